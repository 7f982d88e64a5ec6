"""Two processes that create the same new study database at once: one creates, one joins."""

from __future__ import annotations

import multiprocessing
from pathlib import Path

import optuna

from sweeper.store.connect import open_storage

ROUNDS = 6


def _create(path: str, barrier, results) -> None:
    barrier.wait()
    try:
        storage = open_storage(path)
        optuna.create_study(study_name="s", storage=storage, load_if_exists=True)
        results.put("ok")
    except Exception as error:  # the test reports what went wrong in the child
        results.put(f"{type(error).__name__}: {error}")


def test_simultaneous_creators_of_a_new_file_both_succeed(tmp_path: Path) -> None:
    context = multiprocessing.get_context("fork")
    outcomes = []
    for round_number in range(ROUNDS):
        path = str(tmp_path / f"race{round_number}.db")
        barrier, results = context.Barrier(2), context.Queue()
        children = [context.Process(target=_create, args=(path, barrier, results)) for _ in "ab"]
        for child in children:
            child.start()
        for child in children:
            child.join(60)
        outcomes += [results.get(timeout=5) for _ in children]
        assert optuna.get_all_study_names(f"sqlite:///{path}") == ["s"]
    assert outcomes == ["ok"] * (2 * ROUNDS), outcomes
