"""Change forecasting through the commands: check, run, best --retrain --save, load_model."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import torch

import sweeper
from sweeper.results.best import refit_best
from sweeper.sweep.study import load_existing
from tests.conftest import invoke

SPEC = """
[study]
name = "gauge"
trials = 2
seed = 5

[task]
kind = "series"
file = "gauge.csv"
window = 24
stride = 6
test_fraction = 0.2
predict = "change"
log = true
{season}

[training]
epochs = 2
threads = 1
cell = "gru"
hidden = 8

[search]
lr = {{ between = [0.005, 0.03], scale = "log" }}
"""


def gauge(folder: Path, season: str = "season = 12") -> np.ndarray:
    """A reservoir gauge with a trend and a twelve-row season (an invented plant)."""
    t = np.arange(300)
    level = 20 + 0.05 * t + 2 * np.sin(2 * np.pi * t / 12)
    level += np.random.default_rng(3).normal(0, 0.1, len(t))
    lines = ["month,level"] + [f"m{i},{v!r}" for i, v in enumerate(level.tolist())]
    (folder / "gauge.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (folder / "gauge.toml").write_text(SPEC.format(season=season), encoding="utf-8")
    return level


def test_check_lists_the_baselines_and_suggests_a_season(in_tmp: Path) -> None:
    gauge(in_tmp)
    out = invoke("check", "gauge.toml").output
    assert "forecast predicts the change of the log 1 row(s) ahead, fill none" in out
    assert "forecast data units, 60 valid rows, horizon 1, season 12:" in out
    for name in ("persistence", "seasonal naive", "drift", "Holt-Winters"):
        assert f"forecast {name}: MSE " in out
    gauge(in_tmp, season="")
    out = invoke("check", "gauge.toml").output
    assert "season not set (the autocorrelation suggests season = 12)" in out
    assert "forecast Holt-Winters: not computed (set season)" in out


@pytest.mark.slow  # a sweep, a final fit and a Holt-Winters fit: several seconds
def test_retrain_scores_in_data_units_and_the_saved_model_forecasts_levels(in_tmp: Path) -> None:
    level = gauge(in_tmp)
    assert invoke("run", "gauge.toml", "--report", "g.html").exit_code == 0
    result = invoke("best", "runs/gauge.db", "--retrain", "--save", "g.pt")
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert "# data units, 60 test rows, horizon 1, season 12:" in lines
    assert any(line.startswith("# model: MSE ") for line in lines)
    assert any(line.startswith("# Holt-Winters: MSE ") for line in lines)
    model = sweeper.load_model("g.pt")
    assert (model.info["predict"], model.info["log"], model.info["season"]) == ("change", True, 12)
    assert set(model.info["baselines"]["scores"]) == {
        "persistence",
        "seasonal naive",
        "drift",
        "Holt-Winters",
    }
    # the saved model on raw levels: the refit network on the task's own inputs, each step's
    # forecast the level times exp(the predicted log change)
    study, spec = load_existing("runs/gauge.db")
    refit = refit_best(study, spec)
    task, network = refit.task, refit.run.model
    network.eval()
    rows = torch.from_numpy(task._inputs[:240]).float()[None]
    with torch.no_grad():
        outputs, _ = network(rows, network.initial_state(1))
    change = task.target_scaling.invert(outputs[0].double().numpy())
    expected = level[:240, None] * np.exp(change)
    forecasts = model(level[:240, None]).numpy()
    np.testing.assert_allclose(forecasts, expected, rtol=1e-6)
    assert model.info["scores"]["mse"] > 0
