"""Orchestration cost: the same fixed trials through sweeper and through a bare PyTorch loop.

    python benchmarks/overhead.py              # the demo's task and sizes, 8 trials, 3 rounds
    python benchmarks/overhead.py --quick      # fewer sequences and epochs, one round
    python benchmarks/overhead.py --epochs 30  # longer trials: start-up weighs less

The task and training sizes are the demo's (search_spaces/adding_lstm_demo.toml: adding
problem, 50 steps, 2048 + 256 sequences, 10 epochs, batch 32, Adam); the grid takes the
demo's smallest and largest width and four unrolls.

A grid over unroll x hidden gives a fixed, ordered list of trials, so trial numbers and seeds
are the same in every run. Three child processes are timed from launch to exit, in turn, each
round, the order rotating: the bare loop (bare_lstm.py), ``run_sweep`` alone, and ``sweeper
run`` (which also writes the HTML summary). Both sides use the same torch threads.
The bare loop starts from the same weights and shuffles, so its validation losses must match.
Each side's time is then split into start-up, trials and exit from its own timestamps, and
sweeper's trials into epochs and the bookkeeping around them (from the attributes it stores).
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import math
import sys
import tempfile
import time
from pathlib import Path

from measure import machine_line, median, print_table, timed_subprocess

TARGET = 1.03
SPEC = """
[study]
name = "overhead"
trials = 8
seed = 11
sampler = "grid"
[confirm]
configurations = 0  # the search alone is measured

[task]
kind = "adding"
length = 50
train_sequences = {train}
valid_sequences = {valid}
[training]
epochs = {epochs}
threads = {threads}
cell = "lstm"
batch = 32
optimizer = "adam"
lr = 0.01
clip = 1.0
[search]
unroll = {{ one_of = [5, 10, 25, 50] }}
hidden = {{ one_of = [16, 48] }}
[stopping]
rule = "none"
"""
RUN_SWEEP = (
    "import sys; from sweeper import load_spec, run_sweep; "
    "run_sweep(load_spec(sys.argv[1]).with_overrides(storage=sys.argv[2]))"
)


def prepare(folder: Path, spec_text: str) -> tuple[Path, Path]:
    """Write the spec, and the bare side's config with the task data and the trials' seeds."""
    import torch

    from sweeper.seeds import derive_seed, trial_seed
    from sweeper.spec.loading import load_spec
    from sweeper.spec.space import grid_points
    from sweeper.tasks.registry import build_section_task

    spec_path = folder / "overhead.toml"
    spec_path.write_text(spec_text)
    spec = load_spec(spec_path)
    task = build_section_task(spec.task, folder, str(spec_path))
    splits = {s: task.data(s) for s in ("train", "valid")}
    data = {s: (d.inputs, d.targets, d.weights) for s, d in splits.items()}
    torch.save(data, folder / "data.pt")
    trials = []
    for number, point in enumerate(grid_points(spec.search) or []):
        seed = trial_seed(spec.study.seed, number)
        trials.append({**point, "seed": seed, "shuffle_seed": derive_seed("shuffle", seed)})
    defaults = spec.training.defaults
    config = {
        "threads": spec.training.threads,
        "epochs": spec.training.epochs,
        "batch": defaults["batch"],
        "lr": defaults["lr"],
        "clip": defaults["clip"],
        "data": str(folder / "data.pt"),
        "out": str(folder / "bare.json"),
        "trials": trials,
    }
    config_path = folder / "bare_config.json"
    config_path.write_text(json.dumps(config))
    return spec_path, config_path


def sweeper_phases(db: Path, launched: dt.datetime, wall: float) -> tuple[dict, list[float]]:
    """Where a sweeper run's time went, from the timestamps and attributes it stored."""
    import optuna

    trials = optuna.load_study(study_name="overhead", storage=f"sqlite:///{db}").trials
    trials.sort(key=lambda t: t.number)
    compute = [t.user_attrs["compute_seconds"] for t in trials]
    around = [t.user_attrs["wall_seconds"] - c for t, c in zip(trials, compute, strict=True)]
    # the first trial also pays one-off imports (torch's optimizer pulls in torch._dynamo),
    # which the bare loop pays too; the other trials show the steady bookkeeping
    one_off = around[0] - median(around[1:])
    first, last = trials[0].datetime_start, max(t.datetime_complete for t in trials)
    span = (last - first).total_seconds()
    phases = {
        "start-up": (first - launched).total_seconds(),
        "trials": span,
        "after the last trial": wall - (last - launched).total_seconds(),
        "  epochs (training and evaluation)": sum(compute),
        "  first trial's one-off imports": one_off,
        "  bookkeeping inside trials": sum(around) - one_off,
        "  between trials": span - sum(t.user_attrs["wall_seconds"] for t in trials),
    }
    return phases, [float(t.value or math.nan) for t in trials]


def bare_phases(out: Path, launched: float, wall: float) -> tuple[dict, list[float]]:
    done = json.loads(out.read_text())
    phases = {
        "start-up": done["began"] - launched,
        "trials": done["ended"] - done["began"],
        "after the last trial": wall - (done["ended"] - launched),
    }
    return phases, done["losses"]


def one_round(folder: Path, spec: Path, config: Path, turn: int) -> dict:
    """Each variant once; the order rotates from round to round, so drifts in load even out."""
    db = folder / "sweep.db"
    cli = ["-m", "sweeper", "run", spec, "--storage", db, "--report", folder / "summary.html"]
    commands = {
        "bare": [sys.executable, Path(__file__).with_name("bare_lstm.py"), config],
        "run_sweep": [sys.executable, "-c", RUN_SWEEP, spec, folder / "in_process.db"],
        "cli": [sys.executable, *cli],
    }
    names = list(commands)
    walls, phases, losses = {}, {}, {}
    for name in names[turn % 3 :] + names[: turn % 3]:
        for stale in (db, folder / "in_process.db"):
            stale.unlink(missing_ok=True)
        launched, clock = dt.datetime.now(), time.time()
        walls[name] = timed_subprocess(commands[name], folder)
        if name == "cli":
            phases[name], losses[name] = sweeper_phases(db, launched, walls[name])
        if name == "bare":
            phases[name], losses[name] = bare_phases(folder / "bare.json", clock, walls[name])
    diff = max(abs(a - b) for a, b in zip(losses["bare"], losses["cli"], strict=True))
    ratios = {name: walls[name] / walls["bare"] for name in names}
    ratios["trials"] = phases["cli"]["trials"] / phases["bare"]["trials"]
    return {"walls": walls, "ratios": ratios, "phases": phases, "diff": diff}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small and one round")
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--epochs", type=int, default=10)
    parser.add_argument("--threads", type=int, default=1, help="torch threads on both sides")
    args = parser.parse_args(argv)
    train, valid, epochs, rounds = (2048, 256, args.epochs, args.rounds)
    if args.quick:
        train, valid, epochs, rounds = 128, 64, 2, 1
    text = SPEC.format(train=train, valid=valid, epochs=epochs, threads=args.threads)
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        spec, config = prepare(folder, text)
        results = [one_round(folder, spec, config, turn) for turn in range(rounds)]
    report(results, train, epochs, args.threads)
    return 0


def medians(dicts: list[dict[str, float]]) -> dict[str, float]:
    return {key: median([d[key] for d in dicts]) for key in dicts[0]}


def report(results: list[dict], train: int, epochs: int, threads: int) -> None:
    print(machine_line())
    print(f"8 trials, adding task, {train} sequences x {epochs} epochs, {threads} torch thread(s)")
    walls, ratios = medians([r["walls"] for r in results]), medians([r["ratios"] for r in results])
    names = {"bare": "bare PyTorch loop", "run_sweep": "run_sweep", "cli": "sweeper run"}
    rows = [(names[k], walls[k], ratios[k]) for k in names]
    print_table(("variant", "wall s (median)", "ratio to bare (median of rounds)"), rows)
    print()
    bare = medians([r["phases"]["bare"] for r in results])
    cli = medians([r["phases"]["cli"] for r in results])
    rows = [(phase, bare.get(phase, ""), seconds) for phase, seconds in cli.items()]
    print_table(("phase (medians)", "bare s", "sweeper run s"), rows)
    print()
    share = cli["  bookkeeping inside trials"] / cli["  epochs (training and evaluation)"]
    print(f"bookkeeping_share_of_training {share:.3f}")
    print(f"valid_loss_max_difference {max(r['diff'] for r in results):.2e}")
    print(f"trials_phase_ratio {ratios['trials']:.3f} (sweeper's trials phase / the bare loop's)")
    print(f"overhead_ratio_run_sweep {ratios['run_sweep']:.3f} (target <= {TARGET})")
    print(f"overhead_ratio_cli {ratios['cli']:.3f} (target <= {TARGET})")


if __name__ == "__main__":
    sys.exit(main())
