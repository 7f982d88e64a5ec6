"""The demo sweep with 1 and with 2 workers, on the same queued trials: wall-time ratio.

    python benchmarks/demo_scaling.py               # 3 rounds, 1 torch thread per worker
    python benchmarks/demo_scaling.py --threads 0   # sweeper's default: cores / workers
    python benchmarks/demo_scaling.py --quick       # 4 trials of 2 epochs, one round

A reference run of `search_spaces/adding_lstm_demo.toml` (TPE, 16 trials) picks the
configurations. Then, in each round and for each worker count, a fresh study gets those
configurations queued in the same order, and `sweeper run` of the demo spec works through
them; the wall time counts everything the command does, the summary included. The demo's
stopping rule stays on, so the trials a run stops early may differ with the order in which
trials finish: the epochs each run trained are printed beside its time.

By default every worker trains on one torch thread, so that both runs use the same kernels;
`--threads 0` keeps sweeper's default instead (one worker then gets every core).
"""

from __future__ import annotations

import argparse
import datetime as dt
import sqlite3
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from measure import REPO, machine_line, median, print_table, timed_subprocess

DEMO = REPO / "search_spaces" / "adding_lstm_demo.toml"
TARGET = 0.6  # 2-worker wall time over 1-worker wall time


def demo_spec(folder: Path, threads: int, quick: bool) -> Path:
    """A copy of the demo spec: the thread count fixed, no confirmation, smaller when quick."""
    text = DEMO.read_text(encoding="utf-8")
    if threads:
        text = text.replace("[training]\n", f"[training]\nthreads = {threads}\n", 1)
    if quick:
        text = text.replace("trials = 16", "trials = 4").replace("epochs = 10", "epochs = 2")
    # the queued searched trials only: confirmation would queue trials of its own
    text += "\n[confirm]\nconfigurations = 0\n"
    path = folder / "demo.toml"
    path.write_text(text, encoding="utf-8")
    return path


def reference_configurations(spec: Path) -> list[dict[str, Any]]:
    """The configurations a 1-worker run of the demo chose, in trial order."""
    import optuna

    db = spec.parent / "reference.db"
    timed_subprocess(_run_args(spec, db, 1), spec.parent)
    study = optuna.load_study(study_name=_study_name(spec), storage=f"sqlite:///{db}")
    return [t.params for t in sorted(study.trials, key=lambda t: t.number)]


def one_run(spec: Path, configurations: list[dict[str, Any]], workers: int, tag: str) -> dict:
    """Queue ``configurations`` in a fresh study, then time `sweeper run` on it."""
    from sweeper.spec.loading import load_spec
    from sweeper.sweep.launcher import open_for_launch

    db = spec.parent / f"{tag}.db"
    loaded = load_spec(spec).with_overrides(workers=workers, storage=str(db))
    study = open_for_launch(loaded)
    for params in configurations:
        study.enqueue_trial(params)
    study._storage.remove_session()  # the child process is the only writer from here
    launched = time.time()
    wall = timed_subprocess(_run_args(spec, db, workers), spec.parent)
    epochs, stopped = _work_done(db)
    return {"wall": wall, "epochs": epochs, "stopped": stopped, **_timeline(db, launched, wall)}


def _timeline(db: Path, launched: float, wall: float) -> dict[str, float]:
    """Start-up, the trials' span, the tail after the last trial, and the training time."""
    with sqlite3.connect(db) as connection:
        first, last = connection.execute(
            "SELECT MIN(datetime_start), MAX(datetime_complete) FROM trials"
        ).fetchone()
        compute = connection.execute(
            "SELECT SUM(value_json) FROM trial_user_attributes WHERE key = 'compute_seconds'"
        ).fetchone()[0]
    start, end = (dt.datetime.fromisoformat(t).timestamp() - launched for t in (first, last))
    return {"start": start, "span": end - start, "tail": wall - end, "compute": float(compute)}


def _run_args(spec: Path, db: Path, workers: int) -> list[object]:
    report = spec.parent / "summary.html"
    command = [sys.executable, "-m", "sweeper", "run", spec, "--workers", workers]
    return [*command, "--storage", db, "--report", report]


def _study_name(spec: Path) -> str:
    from sweeper.spec.loading import load_spec

    return load_spec(spec).study.name


def _work_done(db: Path) -> tuple[int, int]:
    with sqlite3.connect(db) as connection:
        epochs = connection.execute("SELECT COUNT(*) FROM sweeper_epochs").fetchone()[0]
        stopped = connection.execute("SELECT COUNT(*) FROM trials WHERE state = 'PRUNED'")
        return int(epochs), int(stopped.fetchone()[0])


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--threads", type=int, default=1, help="torch threads per worker")
    parser.add_argument("--quick", action="store_true", help="4 trials of 2 epochs, one round")
    args = parser.parse_args(argv)
    rounds = 1 if args.quick else args.rounds
    rows, ratios, phases = [], [], []
    with tempfile.TemporaryDirectory() as scratch:
        spec = demo_spec(Path(scratch), args.threads, args.quick)
        configurations = reference_configurations(spec)
        for round_number in range(1, rounds + 1):
            one = one_run(spec, configurations, 1, f"r{round_number}w1")
            two = one_run(spec, configurations, 2, f"r{round_number}w2")
            ratios.append(two["wall"] / one["wall"])
            work = [f"{one[key]} / {two[key]}" for key in ("epochs", "stopped")]
            rows.append((round_number, one["wall"], two["wall"], ratios[-1], *work))
            for workers, run in ((1, one), (2, two)):
                keys = ("start", "span", "tail", "compute")
                phases.append((round_number, workers, *[run[key] for key in keys]))
    print(machine_line())
    threads = args.threads or "cores / workers"
    print(f"{len(configurations)} queued demo trials, torch threads per worker: {threads}")
    headers = ("round", "1 worker s", "2 workers s", "ratio", "epochs 1w / 2w", "stopped 1w / 2w")
    print_table(headers, rows)
    print()
    print("where the time goes: launch to first trial, first trial to last, after it; and")
    print("the sum of the trials' training seconds")
    print_table(("round", "workers", "start s", "span s", "tail s", "training s"), phases)
    print()
    print(f"demo_wall_ratio_2_over_1 {median(ratios):.3f} (target <= {TARGET})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
