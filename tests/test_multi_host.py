"""Several hosts on one PostgreSQL study; workers placed on a Dask cluster."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
from collections import Counter
from pathlib import Path

import pytest
import sqlalchemy as sa
from optuna.trial import TrialState

from tests import processes as proc

SPEC = """
[study]
name = "shared"
trials = {trials}
workers = 2
seed = 17
heartbeat = 1

[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "adding"
length = 40
train_sequences = {sequences}
valid_sequences = 64

[training]
epochs = 3
hidden = 16
threads = 1

[search]
unroll = {{ one_of = [10, 20, 40] }}
lr = {{ between = [0.002, 0.02], scale = "log" }}

[stopping]
rule = "none"  # every trial must complete
"""


def _host(root: Path, name: str) -> tuple[Path, dict[str, str]]:
    """A folder and an environment of its own, standing in for another machine."""
    folder = root / name
    folder.mkdir()
    env = {**os.environ, "HOME": str(folder), "TMPDIR": str(folder)}
    return folder, env


def _start_worker(folder: Path, env: dict[str, str], url: str) -> subprocess.Popen[str]:
    with open(folder / "stdout.txt", "w") as out, open(folder / "stderr.txt", "w") as err:
        return subprocess.Popen(
            [sys.executable, "-m", "sweeper", "worker", url],
            cwd=folder,
            env=env,
            stdout=out,
            stderr=err,
            text=True,
        )


def _running_trial_with_checkpoint(engine: sa.Engine) -> tuple[int, int] | None:
    """(trial number, worker pid) of a running trial that has saved a checkpoint."""
    with engine.connect() as connection:
        rows = connection.execute(
            sa.text(
                "SELECT t.number, a.value_json FROM trials t "
                "JOIN trial_user_attributes a ON a.trial_id = t.trial_id AND a.key = 'worker' "
                "JOIN sweeper_checkpoints c ON c.trial_number = t.number "
                "WHERE t.state = 'RUNNING' AND c.epoch >= 1"
            )
        ).fetchall()
    for number, worker in rows:
        return int(number), int(worker.strip('"').split(":")[1])
    return None


def _connections(engine: sa.Engine) -> Counter[str]:
    with engine.connect() as connection:
        names = (
            connection.execute(
                sa.text(
                    "SELECT application_name FROM pg_stat_activity "
                    "WHERE application_name LIKE 'sweeper %'"
                )
            )
            .scalars()
            .all()
        )
    return Counter(names)


@pytest.mark.slow  # four hosts' processes on one PostgreSQL study
@pytest.mark.postgres
def test_three_hosts_one_killed_mid_trial(tmp_path: Path, postgres_url: str) -> None:
    password = postgres_url.split(":")[2].split("@")[0]
    first, env = _host(tmp_path, "host0")
    (first / "shared.toml").write_text(SPEC.format(trials=5, sequences=3072))
    queued = subprocess.run(
        [
            sys.executable,
            "-m",
            "sweeper",
            "run",
            "shared.toml",
            "--storage",
            postgres_url,
            "--workers",
            "0",
        ],
        cwd=first,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert queued.returncode == 0, queued.stderr
    hosts = [_host(tmp_path, f"host{i}") for i in (1, 2, 3)]
    workers = {}
    for folder, host_env in hosts:
        process = _start_worker(folder, host_env, postgres_url)
        workers[process.pid] = process

    engine = sa.create_engine(postgres_url)
    most = Counter[str]()
    deadline = time.monotonic() + 120
    victim = None
    while victim is None and time.monotonic() < deadline:
        most |= _connections(engine)
        found = _running_trial_with_checkpoint(engine)
        if found and found[1] in workers:
            victim = found
        time.sleep(0.1)
    assert victim is not None, "no running trial reached its first checkpoint"
    killed_trial, killed_pid = victim
    workers[killed_pid].send_signal(signal.SIGKILL)
    workers[killed_pid].wait()
    for pid, process in workers.items():
        if pid != killed_pid:
            while process.poll() is None:
                most |= _connections(engine)
                time.sleep(0.2)
            assert process.returncode == 0, (tmp_path / "host1" / "stderr.txt").read_text()

    trials = proc.trials_at(postgres_url, "shared")
    finished = [t for t in trials if t.state == TrialState.COMPLETE]
    assert len(finished) == 5
    origins = [t.user_attrs.get("retry_of", t.number) for t in finished]
    assert len(set(origins)) == 5, "nothing is counted twice"
    (retry,) = [t for t in finished if t.user_attrs.get("retry_of") == killed_trial]
    assert retry.user_attrs["resumed_from_epoch"] >= 1
    assert f":{killed_pid}:" not in retry.user_attrs["worker"]
    # each worker process holds at most three connections (measured on pg_stat_activity)
    assert most and max(most.values()) <= 3, most
    print(f"connections per worker process, most seen: {dict(most)}")

    status = subprocess.run(
        [sys.executable, "-m", "sweeper", "status", postgres_url],
        capture_output=True,
        text=True,
        timeout=60,
    )
    report = subprocess.run(
        [sys.executable, "-m", "sweeper", "report", postgres_url, "-o", str(tmp_path / "r.html")],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert report.returncode == 0, report.stderr
    texts = [
        status.stdout,
        status.stderr,
        report.stdout,
        report.stderr,
        queued.stdout,
        queued.stderr,
        (tmp_path / "r.html").read_text(),
    ]
    texts += [
        (folder / name).read_text() for folder, _ in hosts for name in ("stdout.txt", "stderr.txt")
    ]
    assert all(password not in text for text in texts)
    engine.dispose()


@pytest.mark.postgres
def test_wrong_password_is_never_printed(postgres_url: str) -> None:
    wrong = postgres_url.replace(postgres_url.split(":")[2].split("@")[0], "not-the-password-42")
    result = subprocess.run(
        [sys.executable, "-m", "sweeper", "status", wrong],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert result.returncode in (1, 2)
    assert "not-the-password-42" not in result.stdout + result.stderr
    assert "***" in result.stderr and len(result.stderr.strip().splitlines()) == 1


CLUSTER = """
import sys
from dask.distributed import LocalCluster
with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                  dashboard_address=None) as cluster:
    print(cluster.scheduler_address, flush=True)
    sys.stdin.read()
"""


@pytest.mark.slow  # starts a Dask scheduler and its workers
def test_dask_local_cluster_runs_the_workers(tmp_path: Path) -> None:
    pytest.importorskip("distributed")
    if shutil.which("true") is None:  # pragma: no cover - POSIX only
        pytest.skip("needs a POSIX system")
    (tmp_path / "shared.toml").write_text(SPEC.format(trials=4, sequences=256))
    cluster = subprocess.Popen(
        [sys.executable, "-c", CLUSTER],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
    )
    try:
        assert cluster.stdout is not None
        address = cluster.stdout.readline().strip()
        assert address.startswith("tcp://127.0.0.1:")
        result = proc.run(tmp_path, "run", "shared.toml", "--cluster", address, timeout=240)
    finally:
        assert cluster.stdin is not None
        cluster.stdin.close()
        cluster.wait(timeout=60)
        if cluster.stdout is not None:
            cluster.stdout.close()
    assert result.returncode == 0, result.stderr
    trials = proc.trials(tmp_path / "runs" / "shared.db", "shared")
    assert len(trials) == 4 and all(t.state == TrialState.COMPLETE for t in trials)
    pids = {t.user_attrs["worker"].split(":")[1] for t in trials}
    assert len(pids) == 2, "each Dask worker process runs one sweeper worker"
