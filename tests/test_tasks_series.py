"""CSV forecasting: the chronological split, train-only scaling, persistence and file errors."""

from pathlib import Path

import numpy as np
import pytest

from sweeper.errors import SpecError
from sweeper.tasks.registry import build_task

EXAMPLES = Path(__file__).resolve().parents[1] / "search_spaces"


def write_csv(folder: Path, rows: int = 120) -> np.ndarray:
    """A trending, wiggling two-column series (plus a timestamp) and its raw values."""
    t = np.arange(rows)
    raw = np.column_stack([0.05 * t + np.sin(t / 3), 10 - 0.02 * t + np.cos(t / 5) ** 2])
    lines = ["stamp,level,flow"]
    lines += [f"day{i},{float(a)!r},{float(b)!r}" for i, (a, b) in enumerate(raw)]
    (folder / "readings.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return raw


def series(folder: Path, **options):
    return build_task({"kind": "series", "file": "readings.csv", **options}, folder, "s.toml")


def test_default_columns_are_the_numeric_ones(tmp_path):
    write_csv(tmp_path)
    task = series(tmp_path, window=10)
    assert task.columns == ("level", "flow") == task.target
    assert (task.input_size, task.output_size) == (2, 2)


def test_split_is_chronological_and_scaling_uses_training_rows_only(tmp_path):
    raw = write_csv(tmp_path, rows=120)
    task = series(tmp_path, window=10, stride=5, valid_fraction=0.25)
    assert task.train_rows == 90
    train_rows = raw[:90]
    np.testing.assert_allclose(task.input_scaling.mean, train_rows.mean(axis=0))
    np.testing.assert_allclose(task.input_scaling.std, train_rows.std(axis=0))
    assert not np.allclose(task.input_scaling.mean, raw.mean(axis=0))  # the trend shows
    train = task.input_scaling.invert(task.data("train").inputs.double().numpy())
    valid = task.input_scaling.invert(task.data("valid").inputs.double().numpy())
    np.testing.assert_allclose(train[0], raw[0:10], atol=1e-5)
    np.testing.assert_allclose(train[-1], raw[75:85], atol=1e-5)  # last start 90 - 10 - 1
    # validation scores origins 89..118 (targets 90..119), five per sequence, warmed on the
    # five rows before them: the first sequence reads rows 84..93
    np.testing.assert_allclose(valid[0], raw[84:94], atol=1e-5)
    assert len(task.data("valid")) == 6


def test_windows_reach_the_end_of_each_split(tmp_path):
    raw = write_csv(tmp_path, rows=120)
    task = series(tmp_path, window=10, stride=1, valid_fraction=0.25)
    assert len(task.data("train")) == 90 - 11 + 1
    assert len(task.data("valid")) == 6  # 30 rows scored, 5 per sequence: stride is training's
    last_target = task.target_scaling.invert(task.data("valid").targets[-1, -1].double().numpy())
    np.testing.assert_allclose(last_target, raw[-1], rtol=1e-5)


def test_targets_are_horizon_steps_ahead(tmp_path):
    raw = write_csv(tmp_path)
    task = series(tmp_path, window=8, horizon=3, target="flow", columns=["level", "flow"])
    data = task.data("train")
    scaled_flow = (raw[:, 1] - raw[:96, 1].mean()) / raw[:96, 1].std()
    np.testing.assert_allclose(data.targets[1, :, 0].numpy(), scaled_flow[11:19], rtol=1e-5)
    assert data.weights.min() == 1.0


def test_persistence_baseline_equals_hand_computation(tmp_path):
    raw = write_csv(tmp_path, rows=100)
    task = series(tmp_path, window=6, horizon=2, stride=4, valid_fraction=0.3)
    scaled = (raw - raw[:70].mean(axis=0)) / raw[:70].std(axis=0)
    errors = [(scaled[r - 2] - scaled[r]) ** 2 for r in range(70, 100)]  # every row once
    baseline = task.baseline()
    assert baseline.value == pytest.approx(float(np.mean(errors)), rel=1e-5)
    assert baseline.measure == "valid_loss"
    assert task.metric(task.persistence("valid"), task.data("valid")) == baseline.value


def test_shipped_greenhouse_example_loads():
    task = build_task({"kind": "series", "file": "data/greenhouse.csv"}, EXAMPLES, "x.toml")
    assert task.columns == ("temperature_c", "humidity_pct", "soil_moisture_pct")
    assert 0 < task.baseline().value < 1


def check_error(caught, key: str, *parts: str) -> None:
    assert caught.value.key == key
    assert "\n" not in str(caught.value)
    for part in parts:
        assert part in caught.value.message


def test_missing_file(tmp_path):
    with pytest.raises(SpecError) as caught:
        series(tmp_path)
    check_error(caught, "task.file", str(tmp_path / "readings.csv"))


def test_missing_column_lists_the_columns(tmp_path):
    write_csv(tmp_path)
    with pytest.raises(SpecError) as caught:
        series(tmp_path, columns=["levle"])
    check_error(caught, "task.columns", "'levle'", "did you mean 'level'?", "stamp, level, flow")
    with pytest.raises(SpecError) as caught:
        series(tmp_path, target="pressure")
    check_error(caught, "task.target", "'pressure'", "stamp, level, flow")


def test_non_numeric_cell_names_row_and_cell(tmp_path):
    write_csv(tmp_path, rows=30)
    path = tmp_path / "readings.csv"
    lines = path.read_text().splitlines()
    lines[17] = "day16,1.5,n/a"  # data row 17, line 18 of the file
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(SpecError) as caught:
        series(tmp_path, window=5)
    check_error(caught, "task.file", "'n/a'", "'flow'", "row 17", "line 18")


def test_ragged_row_and_too_long_window(tmp_path):
    write_csv(tmp_path, rows=40)
    with pytest.raises(SpecError) as caught:
        series(tmp_path, window=32)  # training has 32 rows; a window needs 33
    check_error(caught, "task.window", "training", "32 rows")
    path = tmp_path / "readings.csv"
    path.write_text(path.read_text() + "day40,1.0\n")
    with pytest.raises(SpecError) as caught:
        series(tmp_path, window=4)
    check_error(caught, "task.file", "row 41", "2 cells")


def test_bad_option_values(tmp_path):
    write_csv(tmp_path)
    with pytest.raises(SpecError) as caught:
        series(tmp_path, valid_fraction=1.5)
    check_error(caught, "task.valid_fraction", "between 0 and 1", "1.5")
    with pytest.raises(SpecError) as caught:
        series(tmp_path, horizon="2")
    check_error(caught, "task.horizon", "whole number", "'2'")
