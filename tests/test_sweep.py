"""Whole sweeps through the command line, on real SQLite files."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import optuna
import pytest
from optuna.trial import TrialState

from sweeper.spec.loading import load_spec
from sweeper.spec.space import parse_search
from sweeper.sweep.study import make_sampler
from tests.conftest import invoke, write_tiny_spec


def _trials(db: Path, name: str) -> list[optuna.trial.FrozenTrial]:
    from sweeper.store.connect import open_storage

    return optuna.load_study(study_name=name, storage=open_storage(str(db))).get_trials()


def _epoch_rows(db: Path) -> list[tuple[int, int]]:
    with sqlite3.connect(db) as connection:
        return connection.execute(
            "SELECT trial_number, epoch FROM sweeper_epochs ORDER BY 1, 2"
        ).fetchall()


def test_one_worker_sweep_records_every_epoch(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=3, epochs=2)
    result = invoke("run", spec.name)
    assert result.exit_code == 0, result.output
    db = in_tmp / "runs" / "tiny.db"
    trials = _trials(db, "tiny")
    assert [t.state for t in trials] == [TrialState.COMPLETE] * 3
    assert _epoch_rows(db) == [(n, e) for n in range(3) for e in (1, 2)]
    for trial in trials:
        assert trial.user_attrs["epochs"] == 2
        assert set(trial.params) == {"unroll", "hidden", "clip", "lr"}
        assert trial.user_attrs["training"]["clip"] == trial.params["clip"]
        assert trial.intermediate_values.keys() == {1, 2}


def test_second_launch_continues_and_respects_budget(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=2, epochs=1)
    assert invoke("run", spec.name).exit_code == 0
    again = invoke("run", spec.name)
    assert again.exit_code == 0 and "budget already met" in again.output
    more = invoke("run", spec.name, "--trials", "4")
    assert more.exit_code == 0, more.output
    trials = _trials(in_tmp / "runs" / "tiny.db", "tiny")
    assert [t.number for t in trials] == [0, 1, 2, 3]
    assert all(t.state == TrialState.COMPLETE for t in trials)


def test_changed_spec_is_refused_with_the_changed_keys(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=1, epochs=1)
    assert invoke("run", spec.name).exit_code == 0
    spec.write_text(spec.read_text().replace("[4, 8]", "[4, 16]").replace("seed = 3", "seed = 4"))
    result = invoke("run", spec.name)
    assert result.exit_code == 2
    assert "changed: search.hidden.one_of, study.seed" in result.output


def test_storage_override_and_status(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=2, epochs=1)
    result = invoke("run", spec.name, "--storage", "elsewhere/study.db", "--workers", "1")
    assert result.exit_code == 0, result.output
    assert (in_tmp / "elsewhere" / "study.db").exists()
    status = invoke("status", "elsewhere/study.db")
    assert status.exit_code == 0
    assert "finished" in status.output and "best" in status.output


@pytest.mark.slow
def test_two_workers_meet_the_budget_without_repeats(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=8, workers=2, epochs=1)
    result = invoke("run", spec.name)
    assert result.exit_code == 0, result.output
    trials = _trials(in_tmp / "runs" / "tiny.db", "tiny")
    assert len(trials) == 8 and all(t.state == TrialState.COMPLETE for t in trials)
    drawn = {json.dumps(t.params, sort_keys=True) for t in trials}
    assert len(drawn) == 8, "no configuration may be drawn twice"
    assert len({t.user_attrs["worker"] for t in trials}) == 2


def test_worker_samplers_are_seeded_apart(tmp_path: Path) -> None:
    """Identically seeded samplers repeat each other's start-up draws; ours must not."""
    spec = load_spec(write_tiny_spec(tmp_path))
    space = parse_search("t", {"lr": {"between": [1e-4, 1.0], "scale": "log"}})

    def first_draws(worker: int) -> list[float]:
        study = optuna.create_study(sampler=make_sampler(spec, worker))
        draws = []
        for _ in range(5):
            trial = study.ask()
            from sweeper.spec.space import draw

            draws.append(draw(trial, space)["lr"])
            study.tell(trial, 1.0)
        return draws

    # two starts of worker 0 with an unchanged study: each start draws a fresh stream
    launches = [first_draws(0), first_draws(1), first_draws(0)]
    values = [value for draws in launches for value in draws]
    assert len(set(values)) == len(values)


def test_objective_plugin_and_failing_plugin(in_tmp: Path) -> None:
    (in_tmp / "bowl.py").write_text(
        "def quadratic(params, report):\n"
        "    value = (params['x'] - 0.3) ** 2\n"
        "    report(1, value)\n"
        "    return value\n"
        "def broken(params, report):\n"
        "    raise RuntimeError('sensor offline')\n"
    )
    text = (
        '[study]\nname = "{name}"\ntrials = {trials}\nsampler = "random"\nmax_failures = 3\n'
        "[confirm]\nconfigurations = 0\n"
        '[task]\nkind = "objective"\nfunction = "bowl:{fn}"\npath = "."\n'
        "[search]\nx = {{ between = [0.0, 1.0] }}\n"
    )
    (in_tmp / "good.toml").write_text(text.format(name="good", trials=5, fn="quadratic"))
    result = invoke("run", "good.toml")
    assert result.exit_code == 0, result.output
    trials = _trials(in_tmp / "runs" / "good.db", "good")
    assert all(t.value == pytest.approx((t.params["x"] - 0.3) ** 2) for t in trials)

    (in_tmp / "bad.toml").write_text(text.format(name="bad", trials=5, fn="broken"))
    result = invoke("run", "bad.toml")
    assert result.exit_code == 1
    assert "3 trials in a row failed" in result.output and "sensor offline" in result.output
    failed = [t for t in _trials(in_tmp / "runs" / "bad.db", "bad") if t.state == TrialState.FAIL]
    assert len(failed) >= 3
    assert failed[0].user_attrs["failure"]["type"] == "RuntimeError"
    assert "sensor offline" in failed[0].user_attrs["failure"]["traceback"]
