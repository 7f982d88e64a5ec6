"""Series forecasting: the change and log transforms, rolling-origin scoring, fill."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import torch

from sweeper.errors import SpecError
from sweeper.tasks import forecast_scores
from sweeper.tasks.registry import build_task
from sweeper.training.params import TrialParams
from sweeper.training.trial_run import TrialRun


def write(folder: Path, columns: dict[str, np.ndarray], name: str = "plant.csv") -> None:
    rows = zip(*columns.values(), strict=True)
    lines = [",".join(columns)] + [",".join(repr(float(v)) for v in row) for row in rows]
    (folder / name).write_text("\n".join(lines) + "\n", encoding="utf-8")


def trend_season(rows: int = 400, seed: int = 0) -> np.ndarray:
    """level = a t + season + noise (an invented reservoir gauge), a = 0.05 per row."""
    t = np.arange(rows)
    noise = np.random.default_rng(seed).normal(0, 0.1, rows)
    return 20 + 0.05 * t + 2 * np.sin(2 * np.pi * t / 12) + noise


def series(folder: Path, **options):
    return build_task({"kind": "series", "file": "plant.csv", **options}, folder, "s.toml")


def test_every_held_out_row_is_scored_once_at_its_origin(tmp_path: Path) -> None:
    # the value of each row is its index, so a target names its row
    write(tmp_path, {"row": np.arange(100.0)})
    task = series(tmp_path, window=10, horizon=3, stride=7, valid_fraction=0.2, test_fraction=0.13)
    assert (task.train_rows, task.valid_end) == (67, 87)
    for split, (first, end) in (("valid", (67, 87)), ("test", (87, 100))):
        data = task.data(split)
        scored = data.weights.numpy() > 0
        assert scored.sum() == end - first  # every row of the split, once
        targets = task.target_scaling.invert(data.targets.double().numpy()[scored])[:, 0]
        np.testing.assert_allclose(targets, np.arange(first, end), atol=1e-4)  # row t + 3
        inputs = task.input_scaling.invert(data.inputs.double().numpy()[scored])[:, 0]
        np.testing.assert_allclose(inputs, np.arange(first, end) - 3, atol=1e-4)  # origin t
        assert list(task.origins(split)) == list(range(first - 3, end - 3))
        # each scored step comes after at least half a window of warm-up rows
        assert all(np.argmax(row) >= 5 for row in scored)


def test_change_forecast_is_the_last_level_plus_the_predicted_change(tmp_path: Path) -> None:
    level = trend_season()
    write(tmp_path, {"level": level})
    task = series(tmp_path, window=24, horizon=2, predict="change", test_fraction=0.2)
    origins = task.origins("test")
    change = np.random.default_rng(1).normal(size=task.data("test").targets.shape)
    outputs = torch.from_numpy(change)
    scored = task.data("test").weights.numpy() > 0
    predicted = task.target_scaling.invert(change[scored])
    np.testing.assert_array_equal(
        task.forecast_levels(outputs, "test"), level[origins, None] + predicted
    )
    # the true change added back gives the level two rows on; persistence gives the last one
    np.testing.assert_allclose(
        task.forecast_levels(task.data("test").targets, "test")[:, 0], level[origins + 2], atol=1e-5
    )
    np.testing.assert_allclose(
        task.forecast_levels(task.persistence("test"), "test")[:, 0], level[origins], atol=1e-5
    )


def test_log_change_forecast_multiplies_the_last_level(tmp_path: Path) -> None:
    level = np.exp(trend_season() / 10)
    write(tmp_path, {"level": level})
    task = series(tmp_path, window=24, predict="change", log=True)
    origins = task.origins("valid")
    outputs = torch.full(task.data("valid").targets.shape, 0.5, dtype=torch.float64)
    change = task.target_scaling.invert(np.array([0.5]))
    expected = level[origins] * np.exp(change)
    np.testing.assert_allclose(task.forecast_levels(outputs, "valid")[:, 0], expected, rtol=1e-12)


def test_change_forecasting_removes_the_trend_bias(tmp_path: Path) -> None:
    # a trained GRU on the change: its test-row bias is small against the trend over the
    # test span (80 rows x 0.05 = 4 units); the level model sees levels above its training range
    write(tmp_path, {"level": trend_season()})
    task = series(tmp_path, window=24, stride=6, predict="change", season=12, test_fraction=0.2)
    params = TrialParams.from_mapping({"cell": "gru", "hidden": 8, "unroll": 24, "lr": 0.03})
    threads = torch.get_num_threads()
    torch.set_num_threads(1)  # a small network trains fastest on one thread
    try:
        run = TrialRun(task, params, seed=0)
        for _ in range(6):
            run.run_epoch()
        data = task.data("test")
        with torch.no_grad():
            outputs, _ = run.model(data.inputs, run.model.initial_state(len(data)))
    finally:
        torch.set_num_threads(threads)
    forecast = task.forecast_levels(outputs, "test")[:, 0]
    truth = task.levels[task.origins("test") + 1, 0]
    assert abs(float(np.mean(forecast - truth))) < 0.05 * 4.0
    scores = forecast_scores.model_scores(task, outputs, "test")
    baselines = forecast_scores.baseline_scores(task, "test").scores
    assert scores.mse < baselines["persistence"].mse


def test_fill_previous_and_linear_against_hand_computation(tmp_path: Path) -> None:
    # rows 1-based: 2 and 4-5 are empty, and the first one
    lines = ["stamp,flow,temp", "a,,5", "b,2,6", "c,,", "d,8,8", "e,,9", "f,,10", "g,14,11"]
    (tmp_path / "plant.csv").write_text("\n".join(lines + [f"h{i},{i},{i}" for i in range(40)]))
    previous = series(tmp_path, window=4, fill="previous").levels[:7]
    linear = series(tmp_path, window=4, fill="linear").levels[:7]
    # previous: each gap takes the value above it; the first row, with none, the next value
    assert previous[:, 0].tolist() == [2, 2, 2, 8, 8, 8, 14]
    assert previous[:, 1].tolist() == [5, 6, 6, 8, 9, 10, 11]
    # linear in row order: 2 -> 8 over two rows gives 5; 8 -> 14 over three gives 10, 12
    assert linear[:, 0].tolist() == [2, 2, 5, 8, 10, 12, 14]
    assert linear[:, 1].tolist() == [5, 6, 7, 8, 9, 10, 11]


def test_a_gap_without_fill_names_the_row_and_the_option(tmp_path: Path) -> None:
    write(tmp_path, {"flow": np.arange(1.0, 60.0)})
    path = tmp_path / "plant.csv"
    lines = path.read_text().splitlines()
    lines[12] = ""  # a blank line is skipped; an empty cell is a gap
    lines[20] = " "
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(SpecError) as caught:
        series(tmp_path, window=4)
    message = caught.value.message
    assert caught.value.key == "task.file"
    assert "empty cell '' in column 'flow' at row 19" in message
    assert 'fill = "previous" or "linear"' in message


@pytest.mark.parametrize(
    ("options", "key", "part"),
    [
        ({"predict": "delta"}, "task.predict", "must be 'level' or 'change', got 'delta'"),
        ({"fill": "mean"}, "task.fill", "must be 'none' or 'previous' or 'linear'"),
        ({"season": 1}, "task.season", "must be >= 2"),
        ({"log": True}, "task.log", "column 'flow' has -1.0 at row 1"),
        (
            {"predict": "change", "columns": "temp", "target": "flow"},
            "task.target",
            "'flow' must also be among columns",
        ),
    ],
)
def test_bad_forecast_options(tmp_path: Path, options: dict, key: str, part: str) -> None:
    write(tmp_path, {"flow": np.arange(-1.0, 59.0), "temp": np.ones(60) + np.arange(60) % 3})
    with pytest.raises(SpecError) as caught:
        series(tmp_path, window=4, **options)
    assert caught.value.key == key and part in caught.value.message


def test_without_statsmodels_holt_winters_says_how_to_install_it(tmp_path, monkeypatch) -> None:
    write(tmp_path, {"level": trend_season(200)})
    task = series(tmp_path, window=24, season=12)
    monkeypatch.setattr(forecast_scores.fb, "statsmodels_missing", lambda: True)
    found = forecast_scores.baseline_scores(task, "valid")
    assert found.missing == {"Holt-Winters": "statsmodels is not installed; " + INSTALL}
    assert set(found.scores) == {"persistence", "seasonal naive", "drift"}
    assert "Holt-Winters needs statsmodels: " + INSTALL in forecast_scores.check_lines(task)


INSTALL = "pip install 'sweeper[forecast]'"


def test_a_recorded_scaled_loss_converts_to_data_units(tmp_path: Path) -> None:
    # the scaled MSE of any outputs, times the target's training variance, is their
    # data-unit MSE (change forecasts: the level error is the change error)
    write(tmp_path, {"level": trend_season(200)})
    task = series(tmp_path, window=24, predict="change")
    outputs = torch.from_numpy(
        np.random.default_rng(4).normal(size=(task.data("valid").targets.shape))
    )
    scaled = task.metric(outputs, task.data("valid"))
    expected = forecast_scores.model_scores(task, outputs, "valid").mse
    assert forecast_scores.data_mse(task, scaled) == pytest.approx(expected, rel=1e-6)
    logged = series(tmp_path, window=24, predict="change", log=True)
    assert forecast_scores.data_mse(logged, scaled) is None


def test_summary_reads_the_baselines_of_each_held_out_split(tmp_path: Path) -> None:
    write(tmp_path, {"level": trend_season(200)})
    task = series(tmp_path, window=24, test_fraction=0.2)
    found = forecast_scores.summary_baselines(task)
    assert set(found) == {"valid", "test"}
    assert found["test"].rows == 40 and found["test"].missing == {
        "seasonal naive": "set season",
        "Holt-Winters": "set season",
    }
    # persistence in data units: the mean squared one-row change over the test rows
    level = task.levels[:, 0]
    expected = float(np.mean((level[160:] - level[159:-1]) ** 2))
    assert found["test"].scores["persistence"].mse == pytest.approx(expected)
    assert forecast_scores.summary_baselines(build_task({"kind": "adding"}, tmp_path, "x")) == {}
