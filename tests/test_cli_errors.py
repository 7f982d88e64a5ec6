"""Bad input: one line naming file, key and fix; exit code 2; no traceback; no database."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

import sweeper.report.render
from sweeper.cli import main
from tests.conftest import invoke, write_tiny_spec

SERIES = """
[study]
name = "s"
[task]
kind = "series"
file = "{file}"
columns = ["temp"]
window = 8
[search]
lr = {{ between = [0.001, 0.01], scale = "log" }}
unroll = 4
"""


def _assert_input_error(result, expected: str, folder: Path) -> None:
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1, result.output
    assert "Traceback" not in result.output
    assert expected in lines[0], lines[0]
    assert not (folder / "runs").exists(), "a bad spec must not create a database"


@pytest.mark.parametrize(
    ("old", "new", "expected"),
    [
        ("trials = 4", "trials = = 4", "tiny.toml: not valid TOML: "),
        ("[study]", "[study]\nwrokers = 2", "tiny.toml: study.wrokers: unknown key; did you mean"),
        ("trials = 4", "trials = 4.5", "tiny.toml: study.trials: must be an integer"),
        ("[3, 12]", "[12, 3]", "tiny.toml: search.unroll.between: empty range"),
        ("[0.5, 5.0]", "[-1.0, 5.0]", "tiny.toml: search.clip.between: a log range needs low > 0"),
        ("[3, 12]", "[3, 13]", "tiny.toml: search.unroll: unroll 13 is longer than the task"),
    ],
)
def test_bad_spec_exits_2_with_one_line(in_tmp: Path, old: str, new: str, expected: str) -> None:
    path = write_tiny_spec(in_tmp)
    path.write_text(path.read_text().replace(old, new, 1))
    for command in ("check", "run"):
        _assert_input_error(invoke(command, str(path.name)), expected, in_tmp)


def _series(folder: Path, csv: str | None) -> Path:
    if csv is not None:
        (folder / "readings.csv").write_text(csv)
    path = folder / "s.toml"
    path.write_text(SERIES.format(file="readings.csv"))
    return path


def test_missing_data_file(in_tmp: Path) -> None:
    path = _series(in_tmp, None)
    _assert_input_error(invoke("run", path.name), "s.toml: task.file:", in_tmp)


def test_missing_csv_column(in_tmp: Path) -> None:
    rows = "\n".join(f"{i},{i * 0.5}" for i in range(60))
    path = _series(in_tmp, "hour,humidity\n" + rows + "\n")
    result = invoke("check", path.name)
    _assert_input_error(result, "task.columns", in_tmp)
    assert "humidity" in result.output  # names the columns that do exist


def test_non_numeric_csv_cell(in_tmp: Path) -> None:
    rows = [f"{i},{i * 0.5}" for i in range(60)]
    rows[17] = "17,warm"
    path = _series(in_tmp, "hour,temp\n" + "\n".join(rows) + "\n")
    result = invoke("run", path.name)
    _assert_input_error(result, "task.", in_tmp)
    assert "warm" in result.output


def test_missing_spec_file_and_unknown_study(in_tmp: Path) -> None:
    _assert_input_error(invoke("check", "nowhere.toml"), "nowhere.toml: no such spec file", in_tmp)
    result = invoke("status", "absent.db")
    assert result.exit_code == 2 and "no study database here" in result.output


def test_every_command_has_help() -> None:
    from sweeper.cli import main

    for name in main.commands:
        result = invoke(name, "--help")
        assert result.exit_code == 0 and "Usage:" in result.output, name


def test_ctrl_c_while_the_summary_is_written_says_how_to_write_it(
    in_tmp: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    def interrupted(*args: object) -> None:
        raise KeyboardInterrupt

    monkeypatch.setattr(sweeper.report.render, "build_report", interrupted)
    spec = write_tiny_spec(in_tmp, trials=1, epochs=1)
    result = CliRunner().invoke(main, ["run", spec.name, "--report", "page.html"])
    assert result.exit_code == 130
    assert result.stderr.splitlines()[-1] == (
        "sweeper: error: interrupted while writing the summary; the study is intact. "
        "Write the summary with: sweeper report runs/tiny.db -o page.html"
    )
    monkeypatch.undo()
    assert invoke("report", "runs/tiny.db", "-o", "page.html").exit_code == 0  # as it says
