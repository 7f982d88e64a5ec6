"""Workers without a launcher queue the confirmation trials themselves, each round once."""

from __future__ import annotations

import datetime as dt
import subprocess
import sys
import threading
import time
from collections import Counter
from pathlib import Path

import optuna
import pytest
from optuna.distributions import FloatDistribution
from optuna.trial import TrialState

from sweeper.spec.loading import parse_spec
from sweeper.spec.sections import Spec
from sweeper.store.attrs import TrialInfo
from sweeper.store.connect import engine_of
from sweeper.sweep import lease
from sweeper.sweep.launcher import open_for_launch
from sweeper.sweep.study import load_existing
from sweeper.sweep.workers import IDLE_GIVE_UP_SECONDS, queue_confirmations
from tests import processes as proc

REPO = Path(__file__).resolve().parents[1]

TRAINED = """
[study]
name = "joined"
trials = 4
seed = 21
heartbeat = 1
storage = "{storage}"

[task]
kind = "adding"
length = 12
train_sequences = 64
valid_sequences = 32

[training]
epochs = 2
batch = 32
unroll = 6
threads = 1

[search]
lr = {{ between = [0.001, 0.05], scale = "log" }}

[stopping]
rule = "none"

[confirm]
configurations = 2
seeds = 2
"""

# a worker with no coordinator at all: the function `sweeper worker` and the pool run
BARE = "import sys; from sweeper.sweep.workers import work; work(sys.argv[1], 'joined', {}, 1)"


def _start(folder: Path, how: str, index: int, location: str) -> subprocess.Popen[str]:
    if how == "sweeper worker":
        return proc.start(folder, "worker", location)
    with open(folder / "stdout.txt", "a") as out, open(folder / "stderr.txt", "a") as err:
        return subprocess.Popen(
            [sys.executable, "-c", BARE.format(index), location],
            cwd=folder,
            stdout=out,
            stderr=err,
            text=True,
        )


def _rounds(trials: list) -> Counter[tuple[int, int]]:
    found: Counter[tuple[int, int]] = Counter()
    for trial in trials:
        info = TrialInfo.of(trial)
        if info.confirms is not None and info.confirm_round is not None:
            found[(info.confirms, info.confirm_round)] += 1
    return found


@pytest.mark.parametrize("how", ["sweeper worker", "bare worker"])
def test_two_workers_without_a_launcher_run_the_search_and_each_confirmation_once(
    tmp_path: Path, storage_location: str, how: str
) -> None:
    spec = tmp_path / "joined.toml"
    spec.write_text(TRAINED.format(storage=storage_location), encoding="utf-8")
    queued = proc.run(tmp_path, "run", spec.name, "--workers", "0")  # queues; no launcher stays
    assert queued.returncode == 0, queued.stderr
    started = time.monotonic()
    workers = [_start(tmp_path, how, index, storage_location) for index in (1, 2)]
    try:
        for worker in workers:
            worker.wait(timeout=IDLE_GIVE_UP_SECONDS / 2)  # a wait for nobody would take 120 s
    finally:
        for worker in workers:
            if worker.poll() is None:
                worker.kill()
    wall = time.monotonic() - started
    assert [w.returncode for w in workers] == [0, 0], (tmp_path / "stderr.txt").read_text()

    study, _ = load_existing(storage_location)
    trials = study.get_trials(deepcopy=False)
    searched = [t for t in trials if not TrialInfo.of(t).is_confirmation]
    confirming = [t for t in trials if TrialInfo.of(t).is_confirmation]
    assert len(searched) == 4 and all(t.state == TrialState.COMPLETE for t in searched)
    top = sorted(searched, key=lambda t: (t.value, t.number))[:2]
    assert _rounds(trials) == Counter({(t.number, k): 1 for t in top for k in (1, 2)})
    assert all(t.state == TrialState.COMPLETE for t in confirming)
    # neither worker waited: the confirmation started within seconds of the search's end
    # (a coordinator steps every 2 s), and both workers left soon after the last trial
    search_end = max(t.datetime_complete for t in searched if t.datetime_complete)
    first_confirmation = min(t.datetime_start for t in confirming if t.datetime_start)
    assert first_confirmation - search_end < dt.timedelta(seconds=5)
    assert wall < 45, wall


def _searched_study(storage: str, trials: int) -> tuple[optuna.Study, Spec]:
    """A study whose search is over: ``trials`` complete searched trials, none waiting."""
    text = (
        f'[study]\nname = "race"\ntrials = {trials}\nseed = 5\nsampler = "random"\n'
        f'storage = "{storage}"\n[task]\nkind = "objective"\n'
        f'function = "tests.test_confirmation:worse_when_repeated"\npath = "{REPO.as_posix()}"\n'
        "[search]\nx = { between = [0.0, 1.0] }\n"
        "[confirm]\nconfigurations = 3\nseeds = 2\n"
    )
    spec = parse_spec(text, "<race>")
    study = open_for_launch(spec)
    for k in range(trials):
        x = (k + 0.5) / trials
        study.add_trial(
            optuna.create_trial(
                params={"x": x},
                distributions={"x": FloatDistribution(0.0, 1.0)},
                value=(x - 0.3) ** 2,
            )
        )
    return study, spec


def test_workers_that_find_the_search_over_at_the_same_moment_queue_each_round_once(
    storage_location: str,
) -> None:
    study, _ = _searched_study(storage_location, trials=6)
    go = threading.Barrier(4)
    counts: list[int] = []

    def worker(index: int) -> None:
        own, stored = load_existing(storage_location)  # its own storage, as a process has
        go.wait()
        counts.append(queue_confirmations(own, stored, f"test:{index}:confirmation"))

    threads = [threading.Thread(target=worker, args=(index,)) for index in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=60)
    assert sorted(counts) == [0, 0, 0, 6]  # one of them queued all six, the others none
    trials = study.get_trials(deepcopy=False)
    top = sorted((t for t in trials if t.value is not None), key=lambda t: t.value)[:3]
    found = _rounds(trials)
    assert found == Counter({(t.number, k): 1 for t in top for k in (1, 2)})


def test_a_live_coordinator_keeps_the_queueing_to_itself(storage_location: str) -> None:
    study, spec = _searched_study(storage_location, trials=4)
    engine = engine_of(study)
    assert lease.acquire(engine, "race", "elsewhere:1:coordinator", 30.0)
    assert queue_confirmations(study, spec, "here:2:w0:confirmation") == 0
    assert not _rounds(study.get_trials(deepcopy=False))
    lease.release(engine, "race", "elsewhere:1:coordinator")
    assert queue_confirmations(study, spec, "here:2:w0:confirmation") == 6
    # the worker gave the lease back: a coordinator starting now takes it at once
    assert lease.acquire(engine, "race", "later:3:coordinator", 30.0)
