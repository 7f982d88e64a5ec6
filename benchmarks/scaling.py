"""Parallel speedup: the same fixed trials through `sweeper run` with 1, 2 (and N) workers.

    python benchmarks/scaling.py               # 16 equal-cost demo-sized trials, 3 rounds
    python benchmarks/scaling.py --quick       # 4 small trials, one round
    python benchmarks/scaling.py --threads 0   # sweeper's default: cores / workers threads

The task and sizes are the demo's (adding problem, 50 steps, 2048 sequences, 10 epochs, LSTM,
batch 32, Adam) at width 32 and unroll 25. A grid over lr x clip gives trials of equal cost,
so the last trial leaves no worker idle by much. Each round runs every worker count once, in
turn; the speedup is the median over rounds of one worker's wall time over N workers'. Besides
the wall time (start-up included), the study's own timestamps tell where parallel time goes:
how long each worker took to start, how long a trial's epochs took (longer with more workers
means the cores are contended), and the bookkeeping around them.

On a shared machine the cores may not be free. The "ceiling" is measured in the same rounds:
N plain processes train one trial's configuration at once, without sweeper, and their
throughput against one such process alone is the best speedup the machine allows right now.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import sys
import tempfile
from pathlib import Path

from measure import child_env, machine_line, median, print_table, timed_subprocess

TARGET = 1.85
SPEC = """
[study]
name = "scaling"
trials = 64
seed = 5
sampler = "grid"
[confirm]
configurations = 0  # the search alone is measured

[task]
kind = "adding"
length = 50
train_sequences = {train}
valid_sequences = 256
[training]
epochs = {epochs}
threads = {threads}
cell = "lstm"
hidden = 32
unroll = 25
batch = 32
optimizer = "adam"
[search]
lr = {{ one_of = {rates} }}
clip = {{ one_of = [1.0, 2.0] }}
[stopping]
rule = "none"
"""


CEILING = """
import sys, time, torch
from sweeper.training.params import TrialParams
from sweeper.spec.loading import load_spec
from sweeper.tasks.registry import build_section_task
from sweeper.training.epoch_loop import run_epochs
from sweeper.training.trial_run import TrialRun
torch.set_num_threads(1)
spec = load_spec(sys.argv[1])
task = build_section_task(spec.task, spec.base_dir, spec.source)
params = TrialParams.from_mapping({**spec.training.defaults, "lr": 0.01})
started = time.perf_counter()
run_epochs(TrialRun(task, params, seed=1), spec.training.epochs)
print(time.perf_counter() - started)
"""


def ceiling(folder: Path, spec: Path, processes: int) -> float:
    """Trials per second of ``processes`` plain trainers at once over one trainer alone."""
    import subprocess

    def seconds(count: int) -> list[float]:
        args = [sys.executable, "-c", CEILING, str(spec)]
        children = [
            subprocess.Popen(args, cwd=folder, env=child_env(), stdout=subprocess.PIPE, text=True)
            for _ in range(count)
        ]
        return [float(child.communicate()[0]) for child in children]

    alone = seconds(1)[0]
    together = seconds(processes)
    return processes * alone / max(together)


def thread_cost(spec: Path, rounds: int) -> tuple[int, float]:
    """One worker's epoch time with sweeper's default threads over one thread, alternated."""
    import torch

    from sweeper.spec.loading import load_spec
    from sweeper.sweep.workers import default_threads
    from sweeper.tasks.registry import build_section_task
    from sweeper.training.params import TrialParams
    from sweeper.training.trial_run import TrialRun

    loaded = load_spec(spec)
    task = build_section_task(loaded.task, loaded.base_dir, loaded.source)
    params = TrialParams.from_mapping({**loaded.training.defaults, "lr": 0.01})
    many, previous = default_threads(1), torch.get_num_threads()
    times: dict[int, list[float]] = {many: [], 1: []}
    run = TrialRun(task, params, seed=1)
    try:
        for _ in range(2 * rounds):
            for threads in times:
                torch.set_num_threads(threads)
                times[threads].append(run.run_epoch().seconds)
    finally:
        torch.set_num_threads(previous)
    return many, median(times[many]) / median(times[1])


def worker_counts() -> list[int]:
    cores = os.cpu_count() or 1
    return sorted({1, 2, cores})


def one_sweep(folder: Path, spec: Path, workers: int) -> dict[str, float]:
    db = folder / f"w{workers}.db"
    db.unlink(missing_ok=True)
    launched = dt.datetime.now()
    args = [sys.executable, "-m", "sweeper", "run", spec, "--workers", workers]
    wall = timed_subprocess([*args, "--storage", db, "--report", "s.html"], folder)
    return {"wall": wall, **timeline(db, launched)}


def timeline(db: Path, launched: dt.datetime) -> dict[str, float]:
    """Start-up, busy time and per-trial costs, from what the study stored."""
    import optuna

    trials = optuna.load_study(study_name="scaling", storage=f"sqlite:///{db}").trials
    firsts: dict[str, dt.datetime] = {}
    for t in sorted(trials, key=lambda t: t.datetime_start):
        firsts.setdefault(t.user_attrs["worker"], t.datetime_start)
    last = max(t.datetime_complete for t in trials)
    starts = [(first - launched).total_seconds() for first in firsts.values()]
    compute = [t.user_attrs["compute_seconds"] for t in trials]
    inside = [t.user_attrs["wall_seconds"] for t in trials]
    return {
        "first worker starts": min(starts),
        "last worker starts": max(starts),
        "span": (last - min(firsts.values())).total_seconds(),
        "epochs per trial": median(compute),
        "bookkeeping per trial": median([w - c for w, c in zip(inside, compute, strict=True)]),
    }


def run_rounds(spec: Path, rounds: int) -> dict[int, dict[str, float]]:
    """Each round runs every worker count once, then the machine's ceiling for it."""
    runs: dict[int, list[dict[str, float]]] = {n: [] for n in worker_counts()}
    for _ in range(rounds):
        for workers, results in runs.items():  # one worker first: the others divide by it
            results.append(one_sweep(spec.parent, spec, workers))
            results[-1]["speedup"] = runs[1][-1]["wall"] / results[-1]["wall"]
            limit = ceiling(spec.parent, spec, workers) if workers > 1 else 1.0
            results[-1]["ceiling"] = limit
    return {n: {k: median([r[k] for r in rs]) for k in rs[0]} for n, rs in runs.items()}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="4 small trials, one round")
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--threads", type=int, default=1, help="torch threads per worker")
    args = parser.parse_args(argv)
    rates = [0.002, 0.003, 0.005, 0.007, 0.01, 0.014, 0.02, 0.03]
    train, epochs, rounds = 2048, 10, args.rounds
    if args.quick:
        rates, train, epochs, rounds = rates[:2], 256, 2, 1
    with tempfile.TemporaryDirectory() as scratch:
        spec = Path(scratch) / "scaling.toml"
        spec.write_text(SPEC.format(train=train, epochs=epochs, threads=args.threads, rates=rates))
        many, slower = thread_cost(spec, rounds)
        figures = run_rounds(spec, rounds)
    print(machine_line())
    threads = args.threads or "cores / workers"
    print(f"{2 * len(rates)} trials, {train} sequences x {epochs} epochs, threads: {threads}")
    print(f"threads_epoch_ratio {slower:.3f} (one worker's epoch on {many} threads / on 1)")
    report(figures)
    return 0


def report(figures: dict[int, dict[str, float]]) -> None:
    one = figures[1]
    speedups = {n: f["speedup"] for n, f in figures.items()}
    headers = ("workers", "speedup", "machine ceiling", "speedup / ceiling", "trials-span speedup")
    rows = [
        (n, s, figures[n]["ceiling"], s / figures[n]["ceiling"], one["span"] / figures[n]["span"])
        for n, s in speedups.items()
    ]
    print_table(headers, rows)
    print()
    keys = [k for k in one if k not in ("ceiling", "speedup")]
    print_table(
        ("workers", *[f"{k} s" for k in keys]),
        [(n, *[f[k] for k in keys]) for n, f in figures.items()],
    )
    print()
    print(f"speedup_2_workers {speedups[2]:.3f} (target >= {TARGET})")
    print(f"machine_ceiling_2 {figures[2]['ceiling']:.3f}")


if __name__ == "__main__":
    sys.exit(main())
