"""What the run commands print without a terminal: each line of the study's state once."""

from __future__ import annotations

from pathlib import Path

from click.testing import CliRunner

from sweeper.cli import main
from tests.conftest import write_tiny_spec


def _run(*args: str) -> tuple[str, str]:
    # CliRunner's streams are not terminals, as in a CI log or `sweeper run ... > log 2>&1`
    result = CliRunner().invoke(main, list(args), catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result.stdout, result.stderr


def test_the_final_line_is_logged_once(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=1, epochs=1)
    out, err = _run("run", spec.name, "--report", "page.html")
    final = "tiny: 1/1 done (1 finished, 0 stopped early), 0 running, 0 failed; best "
    assert [line for line in (out + err).splitlines() if line.startswith(final)] == [
        err.splitlines()[-1]  # the log ends with it; stdout does not repeat it
    ]
    assert out.splitlines()[-1] == "summary: page.html"


def test_queueing_only_logs_the_study_once(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=1, epochs=1)
    out, err = _run("run", spec.name, "--workers", "0")
    assert out == "start workers with: sweeper worker runs/tiny.db\n"
    assert (
        err == "tiny: 0/1 done (0 finished, 0 stopped early), 0 running, 0 failed; best -; ETA -\n"
    )
