"""The stopping schedule fitted to the budget: enough trials run every epoch; explicit keys win."""

from __future__ import annotations

import io
import random
import statistics
from pathlib import Path

import optuna
import pytest
from optuna.trial import TrialState

from sweeper.spec.loading import load_spec
from sweeper.spec.schedule import choose_schedule, decisions, finishers_needed
from sweeper.spec.sections import StoppingSection
from sweeper.store.connect import open_storage
from sweeper.sweep.launcher import run_sweep
from sweeper.sweep.progress import ProgressDisplay
from sweeper.sweep.study import make_pruner
from tests.conftest import invoke, write_tiny_spec

AUTO = StoppingSection()


@pytest.mark.parametrize(("budget", "wanted"), [(4, 4), (12, 8), (24, 8), (30, 10), (100, 34)])
def test_a_third_of_the_budget_and_at_least_8_should_finish(budget: int, wanted: int) -> None:
    assert finishers_needed(budget) == wanted


def test_decision_epochs_before_the_last_are_counted() -> None:
    # ASHA decides at first * reduction**i (Li et al. 2020): 1, 3, 9 fall before epoch 10
    assert decisions(1, 3, 10) == 3
    assert decisions(5, 2, 10) == 1  # 5 only; 10 is the last epoch itself
    assert decisions(4, 2, 4) == 0


def test_a_small_budget_stops_nothing_and_a_larger_one_halves_once_at_mid_training() -> None:
    small = choose_schedule(AUTO, 12, 5)
    assert small.rule == "none"
    assert small.why == (
        "chosen: stopping any of 12 trials of 5 epochs would leave fewer than 8 to run every epoch"
    )
    larger = choose_schedule(AUTO, 30, 10)
    assert (larger.rule, larger.min_epochs, larger.reduction) == ("asha", 5, 2)
    assert larger.why == (
        "rule, first decision, reduction chosen for 30 trials of 10 epochs: about 15 trials "
        "run every epoch (at least 10 wanted)"
    )


@pytest.mark.parametrize(
    ("keys", "budget", "expected"),
    [
        ({"rule": "none"}, 200, ("none", 1, 3)),
        ({"rule": "asha"}, 8, ("asha", 4, 2)),  # asked for at a tiny budget: one late cut
        ({"min_epochs": 1}, 40, ("asha", 1, 2)),
        ({"reduction": 3}, 40, ("asha", 3, 3)),  # too few would finish: one cut
        ({"rule": "asha", "min_epochs": 2, "reduction": 4}, 40, ("asha", 2, 4)),
        ({"rule": "median", "min_epochs": 2}, 40, ("median", 2, 3)),
        ({"rule": "hyperband"}, 40, ("hyperband", 1, 3)),
    ],
)
def test_keys_the_spec_gives_win(keys: dict, budget: int, expected: tuple) -> None:
    schedule = choose_schedule(StoppingSection(**keys), budget, 8)
    assert (schedule.rule, schedule.min_epochs, schedule.reduction) == expected
    if len(keys) == 3 or keys.get("rule") in ("none", "median", "hyperband"):
        assert schedule.why == ""  # nothing was chosen


def _finishers(budget: int, epochs: int, seed: int) -> int:
    """Trials of random quality (curve q + 1/epoch + noise) that ASHA lets run every epoch."""
    schedule = choose_schedule(AUTO, budget, epochs)
    pruner = optuna.pruners.SuccessiveHalvingPruner(
        min_resource=schedule.min_epochs, reduction_factor=schedule.reduction
    )
    study = optuna.create_study(pruner=pruner)
    rng = random.Random(seed)
    for _ in range(budget):
        trial, quality = study.ask(), rng.random()
        for epoch in range(1, epochs + 1):
            trial.report(quality + 1 / epoch + rng.gauss(0, 0.05), epoch)
            if schedule.min_epochs <= epoch < epochs and trial.should_prune():
                study.tell(trial, state=TrialState.PRUNED)
                break
        else:
            study.tell(trial, quality)
    return len(study.get_trials(states=(TrialState.COMPLETE,)))


@pytest.mark.parametrize(("budget", "epochs"), [(24, 5), (30, 10), (60, 9)])
def test_under_optunas_asha_the_wanted_trials_finish(budget: int, epochs: int) -> None:
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    counts = [_finishers(budget, epochs, seed) for seed in range(7)]
    assert statistics.median(counts) >= finishers_needed(budget)
    assert min(counts) >= finishers_needed(budget) - 2


FITTED = """
[study]
name = "fitted"
trials = 24
seed = 5
sampler = "random"

[task]
kind = "adding"
length = 8
train_sequences = 32
valid_sequences = 16

[training]
epochs = 4
batch = 32
hidden = 4
unroll = 4

[search]
lr = { between = [0.001, 0.1], scale = "log" }

[confirm]
configurations = 0  # the searched trials only: confirmation is never stopped early
"""


def test_a_sweep_without_stopping_keys_lets_enough_trials_finish(in_tmp: Path) -> None:
    (in_tmp / "fitted.toml").write_text(FITTED, encoding="utf-8")
    checked = invoke("check", "fitted.toml")
    assert checked.exit_code == 0, checked.output
    assert (
        "  stopping asha from epoch 2, reduction 2; rule, first decision, reduction chosen "
        "for 24 trials of 4 epochs: about 12 trials run every epoch (at least 8 wanted)\n"
    ) in checked.output
    spec = load_spec(in_tmp / "fitted.toml")
    assert isinstance(make_pruner(spec), optuna.pruners.SuccessiveHalvingPruner)
    run_sweep(spec, ProgressDisplay(io.StringIO()))
    study = optuna.load_study(study_name="fitted", storage=open_storage("runs/fitted.db"))
    finished = study.get_trials(states=(TrialState.COMPLETE,))
    stopped = study.get_trials(states=(TrialState.PRUNED,))
    assert len(finished) + len(stopped) == 24
    assert len(finished) >= 8
    assert all(t.user_attrs["epochs"] >= 2 for t in stopped)  # none before the first decision


def test_check_says_nothing_was_chosen_when_the_spec_sets_the_schedule(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp)  # [stopping] rule = "none"
    checked = invoke("check", spec.name)
    assert checked.exit_code == 0, checked.output
    assert "  stopping none\n" in checked.output
    assert "chosen" not in checked.output


def test_a_negative_first_decision_names_the_key_and_how_to_get_a_chosen_one(
    in_tmp: Path,
) -> None:
    spec = write_tiny_spec(in_tmp, extra="min_epochs = -1\n")
    checked = invoke("check", spec.name)
    assert checked.exit_code == 2
    assert checked.output.strip().endswith(
        "stopping.min_epochs: must be at least 1, got -1; leave the key out to have it "
        "chosen from the budget and the epochs"
    )
