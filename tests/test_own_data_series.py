"""Series from NPZ archives, and the held-out test tail of a chronological split."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sweeper.errors import SpecError
from sweeper.tasks.refit import RefitTask
from sweeper.tasks.registry import build_task


def raw_series(rows: int = 200) -> np.ndarray:
    t = np.arange(rows)
    return np.column_stack([0.03 * t + np.sin(t / 4), 5 + np.cos(t / 7)])


def write_npz(folder: Path, raw: np.ndarray) -> None:
    np.savez(folder / "plant.npz", stamp=np.arange(len(raw)), level=raw[:, 0], flow=raw[:, 1])


def write_csv(folder: Path, raw: np.ndarray) -> None:
    lines = ["level,flow"] + [f"{a!r},{b!r}" for a, b in raw.tolist()]
    (folder / "plant.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")


def series(folder: Path, file: str = "plant.npz", **options):
    return build_task({"kind": "series", "file": file, **options}, folder, "s.toml")


def test_npz_columns_give_the_same_task_as_the_csv(tmp_path: Path) -> None:
    raw = raw_series()
    write_npz(tmp_path, raw)
    write_csv(tmp_path, raw)
    options = {"columns": ["level", "flow"], "window": 10, "stride": 3, "test_fraction": 0.2}
    from_npz, from_csv = series(tmp_path, **options), series(tmp_path, "plant.csv", **options)
    for split in ("train", "valid", "test"):
        assert from_npz.data(split).inputs.equal(from_csv.data(split).inputs)
        assert from_npz.data(split).targets.equal(from_csv.data(split).targets)


def test_npz_default_columns_are_its_one_dimensional_arrays(tmp_path: Path) -> None:
    write_npz(tmp_path, raw_series())
    assert series(tmp_path, window=10).columns == ("stamp", "level", "flow")


def test_test_tail_is_the_last_rows_and_scaling_ignores_it(tmp_path: Path) -> None:
    raw = raw_series(200)
    write_npz(tmp_path, raw)
    task = series(
        tmp_path, columns=["level"], window=10, stride=1, valid_fraction=0.2, test_fraction=0.1
    )
    assert task.splits == ("train", "valid", "test")
    assert (task.train_rows, task.valid_end) == (140, 180)
    np.testing.assert_allclose(task.input_scaling.mean, [raw[:140, 0].mean()])
    np.testing.assert_allclose(task.input_scaling.std, [raw[:140, 0].std()])
    test = task.input_scaling.invert(task.data("test").inputs.double().numpy())
    assert len(test) == 4  # 20 rows scored, 5 per sequence of 10
    np.testing.assert_allclose(test[0, :, 0], raw[174:184, 0], atol=1e-5)  # origins 179..183
    last_target = task.target_scaling.invert(task.data("test").targets[-1, -1].double().numpy())
    np.testing.assert_allclose(last_target, raw[-1, :1], rtol=1e-5)


def test_without_test_fraction_there_is_no_test_split(tmp_path: Path) -> None:
    write_npz(tmp_path, raw_series())
    task = series(tmp_path, window=10)
    assert task.splits == ("train", "valid")
    with pytest.raises(ValueError, match="split must be one of train, valid"):
        task.data("test")


def test_persistence_on_the_test_tail_equals_hand_computation(tmp_path: Path) -> None:
    raw = raw_series(100)
    write_npz(tmp_path, raw)
    task = series(tmp_path, columns="flow", window=5, horizon=2, stride=1, test_fraction=0.2)
    scaled = (raw[:, 1] - raw[:60, 1].mean()) / raw[:60, 1].std()
    errors = [(scaled[r - 2] - scaled[r]) ** 2 for r in range(80, 100)]  # each test row once
    assert task.baseline_on("test").value == pytest.approx(float(np.mean(errors)), rel=1e-6)


def test_refit_joins_train_and_valid_and_scores_the_test_tail(tmp_path: Path) -> None:
    write_npz(tmp_path, raw_series())
    task = series(tmp_path, window=10, test_fraction=0.2)
    refit = RefitTask(task)
    joined = refit.data("train")
    assert len(joined) == len(task.data("train")) + len(task.data("valid"))
    assert joined.inputs[len(task.data("train")) :].equal(task.data("valid").inputs)
    assert refit.data("valid") is task.data("test")
    assert refit.baseline().value == task.baseline_on("test").value


def error(folder: Path, file: str = "plant.npz", **options) -> SpecError:
    with pytest.raises(SpecError) as caught:
        series(folder, file, **options)
    assert "\n" not in str(caught.value)
    return caught.value


def test_npz_errors_name_the_file_and_the_fix(tmp_path: Path) -> None:
    raw = raw_series()
    level = raw[:, 0].copy()
    level[33] = np.nan
    np.savez(tmp_path / "plant.npz", level=level, flow=raw[:, 1], short=raw[:5, 1])
    nan = error(tmp_path, columns=["level"])
    assert nan.key == "task.file"
    assert "'level' of plant.npz" in nan.message and "row 34" in nan.message
    missing = error(tmp_path, columns=["pressure"])
    assert missing.key == "task.columns"
    assert "no array 'pressure' in plant.npz (arrays: flow, level, short)" in missing.message
    ragged = error(tmp_path, columns=["flow", "short"])
    assert "differ in length" in ragged.message


def test_a_file_that_is_not_an_npz_archive(tmp_path: Path) -> None:
    with open(tmp_path / "plant.npz", "wb") as file:
        np.save(file, raw_series())  # a bare .npy under an .npz name
    found = error(tmp_path)
    assert found.key == "task.file"
    assert "is not an NPZ archive" in found.message and "numpy.savez" in found.message


def test_bad_fractions(tmp_path: Path) -> None:
    write_npz(tmp_path, raw_series())
    found = error(tmp_path, valid_fraction=0.5, test_fraction=0.5)
    assert found.key == "task.test_fraction" and "leaves no training rows" in found.message
    small = error(tmp_path, window=140, test_fraction=0.1)  # held-out parts may be short
    assert small.key == "task.window" and "the training part of plant.npz has 140 rows" in (
        small.message
    )


def test_csv_nan_and_empty_cells_are_named(tmp_path: Path) -> None:
    raw = raw_series(40)
    write_csv(tmp_path, raw)
    path = tmp_path / "plant.csv"
    lines = path.read_text().splitlines()
    lines[5] = "nan,1.0"
    lines[9] = "2.0,"
    path.write_text("\n".join(lines) + "\n")
    found = error(tmp_path, "plant.csv", window=4)
    assert found.key == "task.file"
    assert "NaN or infinite cell 'nan' in column 'level' at row 5" in found.message
    lines[5] = "1.0,1.0"
    path.write_text("\n".join(lines) + "\n")
    assert "empty cell '' in column 'flow'" in error(tmp_path, "plant.csv", window=4).message
