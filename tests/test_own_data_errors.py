"""A bad data file is one line naming the spec, the key, the file and the fix; exit code 2."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest

from tests.conftest import invoke

HEAD = '[study]\nname = "mine"\n\n[training]\nunroll = 4\n\n[task]\n'


def csv_with(cell: str) -> Callable[[Path], str]:
    def write(folder: Path) -> str:
        rows = [f"{i},{i % 7}.5,{(i * 3) % 11}.25" for i in range(60)]
        rows[20] = f"20,{cell},1.0"
        (folder / "pumps.csv").write_text("hour,speed,power\n" + "\n".join(rows) + "\n")
        return 'kind = "series"\nfile = "pumps.csv"\nwindow = 8\n'

    return write


def series_npz_with_nan(folder: Path) -> str:
    speed = np.arange(60.0)
    speed[41] = np.nan
    np.savez(folder / "pumps.npz", speed=speed, power=np.arange(60.0) % 5)
    return 'kind = "series"\nfile = "pumps.npz"\nwindow = 8\n'


def missing_column(folder: Path) -> str:
    csv_with("2.5")(folder)
    return 'kind = "series"\nfile = "pumps.csv"\ncolumns = ["sped"]\nwindow = 8\n'


def npz_without_labels(folder: Path) -> str:
    np.savez(folder / "scans.npz", inputs=np.zeros((20, 5, 2)), y=np.zeros(20))
    return 'kind = "sequences"\nfile = "scans.npz"\n'


def labels_out_of_range(folder: Path) -> str:
    labels = np.arange(20) % 3
    labels[12] = 3
    np.savez(folder / "scans.npz", inputs=np.zeros((20, 5, 2)), labels=labels)
    return 'kind = "sequences"\nfile = "scans.npz"\nclasses = 3\n'


def text_not_utf8(folder: Path) -> str:
    (folder / "log.txt").write_bytes("caf\u00e9 au lait ".encode("latin-1") * 40)
    return 'kind = "text"\nfile = "log.txt"\nlength = 8\n'


CASES = {
    "missing column": (missing_column, "task.columns", "no column 'sped' in pumps.csv"),
    "NaN cell in a CSV": (csv_with("nan"), "task.file", "NaN or infinite cell 'nan'"),
    "empty cell in a CSV": (csv_with(""), "task.file", "empty cell '' in column 'speed'"),
    "NaN in an NPZ column": (series_npz_with_nan, "task.file", "'speed' of pumps.npz"),
    "NPZ without labels": (npz_without_labels, "task.labels", "no array 'labels' in scans.npz"),
    "label out of range": (labels_out_of_range, "task.labels", "label 3 at sequence 12"),
    "text not UTF-8": (text_not_utf8, "task.file", "log.txt is not UTF-8 text"),
}


@pytest.mark.parametrize("case", CASES, ids=list(CASES))
def test_bad_file_is_one_line_and_exit_2(in_tmp: Path, case: str) -> None:
    write, key, words = CASES[case]
    (in_tmp / "mine.toml").write_text(HEAD + write(in_tmp), encoding="utf-8")
    result = invoke("check", "mine.toml")
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith(f"sweeper: error: mine.toml: {key}: ")
    assert words in lines[0]
    assert not (in_tmp / "runs").exists()


def test_run_refuses_a_bad_file_before_creating_a_study(in_tmp: Path) -> None:
    (in_tmp / "mine.toml").write_text(HEAD + labels_out_of_range(in_tmp), encoding="utf-8")
    result = invoke("run", "mine.toml")
    assert result.exit_code == 2
    assert not (in_tmp / "runs").exists()
