"""Achieved GFLOP/s of the trainer's training step, as a share of one core's sgemm rate.

    python benchmarks/trainer_flops.py             # widths 16-256, 5 rounds, sweep, memory
    python benchmarks/trainer_flops.py --quick     # widths 32/128/256, less work, one round
    python benchmarks/trainer_flops.py --batch 128 --no-sweep

FLOPs counted per sequence, step and layer: the forward pass multiplies the input and the
state by the gate weights, gates * hidden * (inputs + hidden) * 2 FLOPs (gates: LSTM 4, GRU 3,
Elman 1), and the backward pass does about twice that (gradients of the inputs and of the
weights); the linear head adds hidden * outputs * 2 * 3. Gate nonlinearities, the loss,
clipping and the optimizer step are not counted. The synthetic task has a target at every
step, so every window is trained. The rate is ``TrialRun.run_epoch``'s training sequences per
second (evaluation excluded) times the FLOPs per sequence, on one torch thread; the
denominator is torch.mm of two 2048 x 2048 float32 matrices on one thread, measured right
before each epoch. "bare" is the same model and windows trained by a plain loop (forward,
loss, backward, Adam; no clipping, no records), to tell trainer costs from torch's.

Elman and GRU run three times per round, in rotating order: with the latest trainer revision
this machine runs (window-2: our window recurrence with its step loops compiled,
sweeper/training/step_kernels.cpp, fused optimizer kernels and lean clipping;
training/numerics.py), with window-1 (the same with the step loops in Python), and with the
oldest one, the trainer as it was before (``SWEEPER_RECURRENCE=torch``: torch's own nn.RNN /
nn.GRU, torch's default optimizer loop, clip_grad_norm_); "ours / torch" is the median of the
per-round rate ratios and ``slowest_vs_torch`` its smallest value over those cells and widths.
LSTM runs torch's nn.LSTM (oneDNN) in all, so it is measured once, with the latest revision.

Two more figures, each from child processes so that the two paths do not share a heap:
- the sweep: search_spaces/copy_gru.toml with the random sampler (its draws do not depend on
  the results, so both runs train the same trials) and no stopping rule (so the same epochs),
  one worker on one thread, run by ``sweeper run`` with the latest trainer and with torch's
  modules, in the order new, old, old, new; summed wall time new over old.
- memory: the second epoch of a width-256 trial with unroll 100 (2 windows, batch 32): the
  growth of the peak RSS (VmHWM, reset before the epoch, after malloc_trim hands the freed
  heap back) over the RSS right before it, ours against torch's; and the bytes one window's
  autograd graph holds (saved-tensor hooks, weights and inputs excluded).
"""

from __future__ import annotations

import argparse
import ctypes
import os
import sqlite3
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

import torch
from measure import REPO, child_env, machine_line, median, print_table, timed_subprocess

from sweeper.tasks.base import Baseline, SequenceSet, Split, Task
from sweeper.training.numerics import SWITCH
from sweeper.training.params import TrialParams
from sweeper.training.trial_run import TrialRun, build_optimizer

GATES = {"lstm": 4, "gru": 3, "elman": 1}
INPUTS, OUTPUTS, UNROLL, WINDOWS = 16, 1, 25, 2
TARGETS = {("lstm", 256): 0.85, ("lstm", 32): 0.35}
# issue 18: at least this many times torch's own module's share in the same run
GAIN_TARGETS = {("gru", 32): 3.0, ("elman", 32): 3.0, ("gru", 128): 1.5, ("elman", 128): 1.5}
OURS = ("elman", "gru")  # the cells our recurrence runs; LSTM stays on torch's nn.LSTM
SWEEP_SPEC = REPO / "search_spaces" / "copy_gru.toml"
SWEEP_TARGET, MEMORY_TARGET = 0.6, 1.0


@contextmanager
def recurrence(path: str) -> Iterator[None]:
    """Trials begun inside take the latest revision ("ours"), window-1 ("window-1") or torch's
    modules ("torch")."""
    before = os.environ.get(SWITCH)
    if path == "ours":
        os.environ.pop(SWITCH, None)
    else:
        os.environ[SWITCH] = path
    try:
        yield
    finally:
        if before is None:
            os.environ.pop(SWITCH, None)
        else:
            os.environ[SWITCH] = before


class SyntheticTask(Task):
    """Random inputs and targets with a target at every step (regression)."""

    name, kind, metric_name, metric_higher_is_better = "synthetic", "regression", "mse", False
    input_size, output_size = INPUTS, OUTPUTS

    def __init__(self, sequences: int, length: int = UNROLL * WINDOWS) -> None:
        self.length = length
        gen = torch.Generator().manual_seed(0)
        self._sets = {
            split: SequenceSet(
                torch.randn(count, self.length, INPUTS, generator=gen),
                torch.randn(count, self.length, OUTPUTS, generator=gen),
                torch.ones(count, self.length),
            )
            for split, count in (("train", sequences), ("valid", 32))
        }

    def data(self, split: Split) -> SequenceSet:
        return self._sets[split]

    def baseline(self) -> Baseline:
        return Baseline(1.0, "valid_loss", "unit variance")

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        return float((outputs - data.targets).square().mean())


def flops_per_sequence(cell: str, hidden: int) -> float:
    recurrent = GATES[cell] * hidden * (INPUTS + hidden) * 2
    head = hidden * OUTPUTS * 2
    return 3.0 * (recurrent + head) * UNROLL * WINDOWS


def sgemm_rate(size: int = 2048) -> float:
    """Best of three single-thread float32 matrix products, in GFLOP/s."""
    a, b = torch.randn(size, size), torch.randn(size, size)
    best = min(_seconds(lambda: torch.mm(a, b)) for _ in range(3))
    return 2 * size**3 / best / 1e9


def _seconds(action: Callable[[], object]) -> float:
    started = time.perf_counter()
    action()
    return time.perf_counter() - started


def bare_epoch_seconds(run: TrialRun, batch: int) -> float:
    """The run's model and windows trained by a plain loop, on a copy of its weights."""
    import copy

    model = copy.deepcopy(run.model)
    optimizer = build_optimizer(run.params, model, run.revision)  # the trainer's own kind
    train = run.task.data("train")

    def epoch() -> None:
        for start in range(0, len(train), batch):
            x, y = train.inputs[start : start + batch], train.targets[start : start + batch]
            state = model.initial_state(len(x))
            for w in range(0, x.shape[1], UNROLL):
                state = model.detach_state(state)
                out, state = model(x[:, w : w + UNROLL], state)
                loss = (out - y[:, w : w + UNROLL]).square().mean()
                optimizer.zero_grad(set_to_none=True)
                loss.backward()
                optimizer.step()

    return _seconds(epoch)


def measure(cell: str, hidden: int, batch: int, work: float, rounds: int) -> dict[str, float]:
    per_sequence = flops_per_sequence(cell, hidden)
    sequences = max(4 * batch, round(work / per_sequence / batch) * batch)
    params = TrialParams(cell=cell, hidden=hidden, unroll=UNROLL, batch=batch, lr=1e-3)
    task = SyntheticTask(sequences)
    paths = ("ours", "window-1", "torch") if cell in OURS else ("ours",)
    runs = {}
    for path in paths:
        with recurrence(path):
            runs[path] = TrialRun(task, params, seed=1)
        runs[path].run_epoch()  # warm-up: first-use allocations and kernel choices
    shares: dict[str, list[float]] = {path: [] for path in paths}
    bare_shares, rates, gains, over_python = [], [], [], []
    for number in range(rounds):
        peak = sgemm_rate()
        rate = {}
        turn = number % len(paths)
        for path in paths[turn:] + paths[:turn]:
            rate[path] = runs[path].run_epoch().sequences_per_second * per_sequence / 1e9
            shares[path].append(rate[path] / peak)
        bare = sequences * per_sequence / bare_epoch_seconds(runs["ours"], batch) / 1e9
        bare_shares.append(bare / peak)
        rates.append(rate["ours"])
        gains.append(rate["ours"] / rate.get("torch", rate["ours"]))
        over_python.append(rate["ours"] / rate.get("window-1", rate["ours"]))
    torch_share = median(shares["torch"]) if "torch" in shares else float("nan")
    return {
        "gflops": median(rates),
        "share": median(shares["ours"]),
        "torch_share": torch_share,
        "gain": median(gains) if "torch" in shares else float("nan"),
        "bare": median(bare_shares),
        "over_python": median(over_python) if "window-1" in shares else float("nan"),
    }


def sweep_seconds(folder: Path, path: str, quick: bool) -> tuple[float, list[str], int]:
    """Wall time of `sweeper run` on the GRU example, its trials' parameters, epochs trained."""
    text = SWEEP_SPEC.read_text(encoding="utf-8")
    text = text.replace("[study]\n", '[study]\nsampler = "random"\n', 1)
    text = text.replace("[training]\n", "[training]\nthreads = 1\n", 1)
    # no stopping rule: tiny numeric differences could stop different trials, and then the
    # two runs would not train the same epochs
    text += '\n[stopping]\nrule = "none"\n'
    if quick:
        text = text.replace("trials = 10", "trials = 2").replace("epochs = 8", "epochs = 1")
    spec = folder / f"{path}.toml"
    spec.write_text(text, encoding="utf-8")
    db = folder / f"{path}.db"
    command = [sys.executable, "-m", "sweeper", "run", spec, "--workers", 1, "--storage", db]
    with recurrence(path):
        wall = timed_subprocess([*command, "--report", folder / f"{path}.html"], folder)
    with sqlite3.connect(db) as connection:
        params = connection.execute(
            "SELECT trial_id, param_name, param_value FROM trial_params ORDER BY 1, 2"
        ).fetchall()
        epochs = connection.execute("SELECT COUNT(*) FROM sweeper_epochs").fetchone()[0]
    return wall, [f"{name}={value:.6g}" for _, name, value in params], int(epochs)


def memory_mib(cell: str, path: str, repeats: int) -> tuple[float, float]:
    """Peak RSS growth over a width-256, unroll-100 epoch (median of fresh child processes)
    and the MiB one window's autograd graph holds."""
    args = [sys.executable, __file__, "--memory-child", cell]
    growths, saved = [], 0.0
    with recurrence(path):
        for _ in range(repeats):
            done = subprocess.run(args, env=child_env(), capture_output=True, text=True)
            if done.returncode != 0:
                sys.exit(f"memory child for {cell} ({path}) failed:\n{done.stderr[-3000:]}")
            growth, saved = map(float, done.stdout.split()[-2:])
            growths.append(growth)
    return median(growths), saved


def memory_child(cell: str) -> None:
    torch.set_num_threads(1)
    params = TrialParams(cell=cell, hidden=256, unroll=100, batch=32, lr=1e-3)
    task = SyntheticTask(32, length=200)
    run = TrialRun(task, params, seed=1)
    run.run_epoch()  # first use: lazy imports, optimizer state, the allocator's pools
    # hand the freed heap back first, so that the epoch's own buffers count (glibc)
    ctypes.CDLL(None).malloc_trim(0)
    # writing 5 to clear_refs resets the peak (VmHWM) to the current RSS (Linux >= 4.0)
    Path("/proc/self/clear_refs").write_text("5")
    before = _status_kib("VmRSS")
    run.run_epoch()
    growth = (_status_kib("VmHWM") - before) / 1024
    print(growth, saved_mib(run.model, task.data("train").inputs[:, :100]))


def saved_mib(model: torch.nn.Module, window: torch.Tensor) -> float:
    """MiB the autograd graph of one window's forward holds, weights and inputs excluded."""
    skip = {p.untyped_storage().data_ptr() for p in model.parameters()}
    skip.add(window.untyped_storage().data_ptr())
    held: dict[int, int] = {}

    def pack(tensor: torch.Tensor) -> torch.Tensor:
        storage = tensor.untyped_storage()
        if storage.data_ptr() not in skip:
            held[storage.data_ptr()] = storage.nbytes()
        return tensor

    with torch.autograd.graph.saved_tensors_hooks(pack, lambda tensor: tensor):
        model(window, model.initial_state(len(window)))
    return sum(held.values()) / 2**20


def _status_kib(key: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(f"{key}:"):
            return int(line.split()[1])
    raise RuntimeError(f"no {key} in /proc/self/status")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="widths 32, 128, 256, one round")
    parser.add_argument("--batch", type=int, default=32)
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument("--no-sweep", action="store_true", help="skip the sweep and memory")
    parser.add_argument("--widths", help="comma-separated hidden widths (default 16-256)")
    parser.add_argument("--cells", help="comma-separated cells (default lstm,gru,elman)")
    parser.add_argument("--memory-child", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.memory_child:
        memory_child(args.memory_child)
        return 0
    widths, work, rounds = (16, 32, 64, 128, 256), 2e9, args.rounds
    if args.quick:
        widths, work, rounds = (32, 128, 256), 2e8, 1
    if args.widths:
        widths = tuple(int(width) for width in args.widths.split(","))
    cells = tuple(args.cells.split(",")) if args.cells else tuple(GATES)
    print(machine_line())
    print(f"load before: {os.getloadavg()[0]:.1f}")
    previous = torch.get_num_threads()
    torch.set_num_threads(1)
    try:
        rows = []
        for cell in cells:
            for hidden in widths:
                got = measure(cell, hidden, args.batch, work, rounds)
                share, bare = got["share"], got["bare"]
                rows.append(
                    (
                        cell,
                        hidden,
                        got["gflops"],
                        share,
                        got["torch_share"],
                        got["gain"],
                        bare,
                        got["over_python"],
                    )
                )
        peak = sgemm_rate()
    finally:
        torch.set_num_threads(previous)
    figures = report(rows, peak, args.batch)
    if not args.no_sweep:
        figures += report_sweep(args.quick)
        figures += report_memory(repeats=1 if args.quick else 3)
    print(f"load after: {os.getloadavg()[0]:.1f}")
    print()
    print("\n".join(figures))
    return 0


def report(rows: list[tuple], peak: float, batch: int) -> list[str]:
    """Prints the table; returns the figure lines."""
    print(f"batch {batch}, unroll {UNROLL} x {WINDOWS} windows, {INPUTS} inputs, 1 thread")
    print(
        f"sgemm 2048x2048 on one thread: {peak:.1f} GFLOP/s (at the end; shares use each round's)"
    )
    headers = ("cell", "hidden", "trainer GFLOP/s", "share of sgemm", "torch's share")
    headers += ("ours / torch", "bare loop share", "compiled / python loops", "trainer / bare")
    print_table(headers, [(*row, row[3] / row[6]) for row in rows])
    figures = []
    for cell, hidden, _, share, torch_share, *_ in rows:
        target = TARGETS.get((cell, hidden))
        if target is not None:
            figures.append(f"sgemm_share_{cell}_{hidden} {share:.3f} (target >= {target})")
        factor = GAIN_TARGETS.get((cell, hidden))
        if factor is not None:
            figures.append(
                f"sgemm_share_{cell}_{hidden} {share:.3f} (torch's module {torch_share:.3f} in "
                f"the same run, {share / torch_share:.2f}x; target >= {factor}x)"
            )
    gains = [(row[5], row[0], row[1]) for row in rows if row[0] in OURS]
    if gains:
        slowest, cell, hidden = min(gains)
        figures.append(f"slowest_vs_torch {slowest:.3f} ({cell} {hidden}; target >= 1.0)")
    return figures


def report_sweep(quick: bool) -> list[str]:
    """Ours, torch's, torch's, ours (so a load that drifts during the run weighs on both);
    the ratio of the summed wall times."""
    walls: dict[str, list[float]] = {"ours": [], "torch": []}
    trials: dict[str, list[str]] = {}
    epochs: dict[str, int] = {}
    order = ("ours", "torch") if quick else ("ours", "torch", "torch", "ours")
    with tempfile.TemporaryDirectory() as scratch:
        for number, path in enumerate(order):
            folder = Path(scratch) / str(number)
            folder.mkdir()
            wall, trials[path], epochs[path] = sweep_seconds(folder, path, quick)
            walls[path].append(wall)
    same = "same trials" if trials["ours"] == trials["torch"] else "DIFFERENT trials"
    print(f"{SWEEP_SPEC.name}, random sampler, 1 worker, 1 thread, in the order {order}:")
    ours_walls = ", ".join(f"{w:.1f}" for w in walls["ours"])
    torch_walls = ", ".join(f"{w:.1f}" for w in walls["torch"])
    print(f"  ours {ours_walls} s ({epochs['ours']} epochs), torch's {torch_walls} s")
    print(f"  ({epochs['torch']} epochs), {same}")
    ratio = sum(walls["ours"]) / sum(walls["torch"])
    return [f"sweep_wall_ratio_gru_example {ratio:.3f} (target <= {SWEEP_TARGET})"]


def report_memory(repeats: int) -> list[str]:
    figures = []
    for cell in OURS:
        (ours, ours_saved), (theirs, theirs_saved) = (
            memory_mib(cell, "ours", repeats),
            memory_mib(cell, "torch", repeats),
        )
        print(f"{cell} width 256, unroll 100, batch 32: peak RSS growth in an epoch")
        print(f"  (median of {repeats}) ours {ours:.1f} MiB, torch's {theirs:.1f} MiB;")
        print(
            f"  one window's graph holds ours {ours_saved:.1f} MiB, torch's {theirs_saved:.1f} MiB"
        )
        figures.append(f"peak_rss_ratio_{cell}_256 {ours / theirs:.3f} (target <= {MEMORY_TARGET})")
        figures.append(f"saved_activations_ratio_{cell}_256 {ours_saved / theirs_saved:.3f}")
    return figures


if __name__ == "__main__":
    sys.exit(main())
