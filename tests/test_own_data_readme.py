"""README's worked example ("Your own model") runs as written, in a fresh copy of the examples."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from sweeper.spec.loading import load_spec
from sweeper.sweep.launcher import run_sweep

ROOT = Path(__file__).resolve().parents[1]


def section(title: str) -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    start = text.index(f"\n## {title}\n")
    end = text.index("\n## ", start + 1)
    return text[start:end]


def blocks(text: str, language: str) -> list[str]:
    return re.findall(rf"```{language}\n(.*?)```", text, flags=re.DOTALL)


def copy_examples(folder: Path) -> None:
    shutil.copytree(
        ROOT / "search_spaces",
        folder / "search_spaces",
        ignore=shutil.ignore_patterns("__pycache__", "runs"),
    )


def run_as_written(folder: Path, commands: list[str]) -> list[str]:
    """Each line through the shell, with the installed console script and interpreter on PATH
    (as a fresh install puts them there); returns each line's stdout."""
    env = {**os.environ, "PATH": f"{Path(sys.executable).parent}{os.pathsep}{os.environ['PATH']}"}
    outputs = []
    for line in commands:
        done = subprocess.run(
            line, shell=True, cwd=folder, env=env, capture_output=True, text=True, timeout=300
        )
        assert done.returncode == 0, f"{line}\n{done.stdout}\n{done.stderr}"
        outputs.append(done.stdout)
    return outputs


def check_replay_best_and_forecast(folder: Path, replay: str, best: str, script: str) -> None:
    assert replay.splitlines()[-1].startswith("agree: the replay matches the record exactly")
    assert "# held out, test split: loss" in best
    done = subprocess.run(
        [sys.executable, "-c", script], cwd=folder, capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    names, _, values = done.stdout.strip().partition("] [")
    assert names == "['temperature_c', 'humidity_pct'"
    temperature, humidity = (float(v) for v in values.rstrip("]").split(","))
    assert 0 < temperature < 45 and 20 < humidity <= 100  # in the file's units


def example() -> tuple[list[str], str]:
    text = section("Your own model")
    (commands,) = blocks(text, "sh")
    (script,) = blocks(text, "python")
    return commands.strip().splitlines(), script


@pytest.mark.slow
def test_the_worked_example_runs_as_written(tmp_path: Path) -> None:
    copy_examples(tmp_path)
    commands, script = example()
    _run, replay, best = run_as_written(tmp_path, commands)
    check_replay_best_and_forecast(tmp_path, replay, best, script)


def test_the_worked_example_after_a_short_sweep(tmp_path: Path, monkeypatch) -> None:
    """The fast variant: a 2-trial sweep in-process (no summary page), then the rest of the
    example's commands and its Python as written."""
    copy_examples(tmp_path)
    commands, script = example()
    assert commands[0] == "sweeper run search_spaces/greenhouse_own_model.toml"
    monkeypatch.chdir(tmp_path)
    spec = load_spec("search_spaces/greenhouse_own_model.toml").with_overrides(trials=2)
    run_sweep(spec)
    replay, best = run_as_written(tmp_path, commands[1:])
    check_replay_best_and_forecast(tmp_path, replay, best, script)
