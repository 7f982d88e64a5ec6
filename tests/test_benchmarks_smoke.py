"""Each benchmark script runs end to end in its quick form and prints its figures.

Only labels and plain sanity are checked: the figures depend on the machine and its load.
Together the scripts take a few minutes, so the module is marked slow.
"""

from __future__ import annotations

import functools
import re
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.slow

BENCHMARKS = Path(__file__).resolve().parents[1] / "benchmarks"
NUMBER = r"(\d+(?:\.\d+)?(?:e[+-]\d+)?)"

EXPECTED = {
    "overhead.py": [
        "bare PyTorch loop",
        "phase (medians)",
        "overhead_ratio_run_sweep",
        "overhead_ratio_cli",
        "trials_phase_ratio",
        "bookkeeping_share_of_training",
    ],
    "selection.py": [
        "median regret (a)",
        "close pairs flagged",
        "worst_regret_ratio",
        "compute_ratio",
    ],
    "scaling.py": ["machine ceiling", "speedup_2_workers", "machine_ceiling_2"],
    "demo_scaling.py": ["queued demo trials", "epochs 1w / 2w", "demo_wall_ratio_2_over_1"],
    "trainer_flops.py": [
        "share of sgemm",
        "sgemm_share_lstm_32",
        "sgemm_share_lstm_256",
        "sgemm_share_gru_32",
        "sgemm_share_elman_128",
        "slowest_vs_torch",
        "sweep_wall_ratio_gru_example",
        "peak_rss_ratio_gru_256",
        "saved_activations_ratio_elman_256",
    ],
    "score_choice.py": [
        "true quality (held-out loss) of each score's pick",
        "chosen_by_measurement",
        "schedules for",
        "short_of_wanted",
        "worst_ratio_best_epoch_over_last",
    ],
    "study_growth.py": ["stored trials", "watch-loop pass ms", "per_trial_ms_at_1000"],
    "checkpoint_cost.py": [
        "checkpoint_bytes",
        "checkpoint_share_of_epoch",
        "epoch_ratio_with_checkpoint",
    ],
    "forecast_real_series.py": [
        "RNN (best, retrained)",
        "Holt-Winters",
        "co2_mse_over_holt_winters",
        "elnino_mse_over_seasonal_naive",
        "sunspots_mse_over_persistence",
    ],
}


@functools.cache  # each script runs once, however many tests read its output
def run_quick(script: str) -> str:
    done = subprocess.run(
        [sys.executable, str(BENCHMARKS / script), "--quick"],
        capture_output=True,
        text=True,
        timeout=300,
        check=False,
    )
    assert done.returncode == 0, done.stderr[-3000:]
    return done.stdout


@pytest.mark.parametrize("script", sorted(EXPECTED))
def test_quick_run_prints_its_figures(script: str) -> None:
    out = run_quick(script)
    assert out.startswith("machine: "), out
    for label in EXPECTED[script]:
        assert label in out, f"{label!r} missing from:\n{out}"


def test_bare_loop_matches_the_trainer() -> None:
    # the bare loop starts from the same weights and shuffles: the same curve, or it measures
    # something else than the trainer does
    out = run_quick("overhead.py")
    found = re.search(rf"^valid_loss_max_difference {NUMBER}$", out, re.M)
    assert found is not None, out
    assert float(found.group(1)) < 1e-6


def test_checkpoint_size_is_plausible() -> None:
    out = run_quick("checkpoint_cost.py")
    found = re.search(r"^checkpoint_bytes (\d+)$", out, re.M)
    assert found is not None, out
    # the demo's LSTM with Adam's two moments is tens of kilobytes; far more means a leak
    assert 10_000 < int(found.group(1)) < 1_000_000
