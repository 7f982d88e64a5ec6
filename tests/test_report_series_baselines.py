"""The summary's forecasting baselines: the same rows and scores that `check` computes.

Data: the weekly CO2 series that statsmodels ships (Mauna Loa, 1958-2001).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from sweeper.report.collect import read_study
from sweeper.report.sections_choice import chosen_from_trials
from sweeper.report.series_baselines import series_baselines
from sweeper.spec.checks import build_spec_task
from sweeper.spec.loading import load_spec
from sweeper.tasks import forecast_scores
from tests.conftest import invoke

SPEC = """
[study]
name = "co2"
trials = 2
seed = 3

[task]
kind = "series"
file = "co2.csv"
window = 104
stride = 52
valid_fraction = 0.15
test_fraction = 0.15
predict = "change"
season = 52
fill = "linear"

[training]
epochs = 1
threads = 1
hidden = 8

[search]
lr = { between = [0.005, 0.02], scale = "log" }

[stopping]
rule = "none"
"""


@pytest.fixture
def co2_study(in_tmp: Path) -> Path:
    datasets = pytest.importorskip("statsmodels.api").datasets
    values = datasets.co2.load_pandas().data["co2"].to_numpy()
    lines = ["co2", *("" if v != v else repr(float(v)) for v in values)]
    (in_tmp / "co2.csv").write_text("\n".join(lines) + "\n")
    (in_tmp / "co2.toml").write_text(SPEC)
    result = invoke("run", "co2.toml")
    assert result.exit_code == 0, result.output
    return in_tmp


def test_summary_baselines_are_checks_scores_on_the_validation_rows(co2_study: Path) -> None:
    tables = read_study(str(co2_study / "runs" / "co2.db"))
    chosen = chosen_from_trials(tables)
    rows = {row.name: row for row in series_baselines(tables, chosen)}
    task = build_spec_task(load_spec(co2_study / "co2.toml"))
    expected = forecast_scores.baseline_scores(task, "valid")  # type: ignore[arg-type]
    assert set(rows) == set(expected.scores) == set(forecast_scores.NAMES)
    for name, scores in expected.scores.items():
        assert rows[name].value == pytest.approx(scores.mse, rel=1e-12)
    # the chosen's validation loss is in units of the training rows' variance
    std = float(task.target_scaling.std[0])  # type: ignore[attr-defined]
    assert chosen is not None
    assert rows["persistence"].chosen_value == pytest.approx(chosen.value * std**2, rel=1e-9)
    page = (co2_study / "runs" / "co2.html").read_text()
    for name in forecast_scores.NAMES:
        assert re.search(rf"<td[^>]*>{name}</td>\s*<td[^>]*>valid MSE, data units", page), name


def test_a_moved_data_file_leaves_the_stored_baseline_only(co2_study: Path) -> None:
    (co2_study / "co2.csv").rename(co2_study / "elsewhere.csv")
    tables = read_study(str(co2_study / "runs" / "co2.db"))
    assert series_baselines(tables, chosen_from_trials(tables)) == []
    assert invoke("report", "runs/co2.db").exit_code == 0
