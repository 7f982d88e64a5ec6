"""Achieved GFLOP/s of the trainer's training step, as a share of one core's sgemm rate.

    python benchmarks/trainer_flops.py             # 3 cells x widths 32/128/256, 5 rounds
    python benchmarks/trainer_flops.py --quick     # widths 32 and 256, less work, one round
    python benchmarks/trainer_flops.py --batch 128

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
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable

import torch
from measure import machine_line, median, print_table

from sweeper.tasks.base import Baseline, SequenceSet, Split, Task
from sweeper.training.params import TrialParams
from sweeper.training.trial_run import TrialRun

GATES = {"lstm": 4, "gru": 3, "elman": 1}
INPUTS, OUTPUTS, UNROLL, WINDOWS = 16, 1, 25, 2
TARGETS = {("lstm", 256): 0.85, ("lstm", 32): 0.35}


class SyntheticTask(Task):
    """Random inputs and targets with a target at every step (regression)."""

    name, kind, metric_name, metric_higher_is_better = "synthetic", "regression", "mse", False
    input_size, output_size, length = INPUTS, OUTPUTS, UNROLL * WINDOWS

    def __init__(self, sequences: int) -> None:
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
    optimizer = torch.optim.Adam(model.parameters(), lr=1e-3)
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
    run = TrialRun(SyntheticTask(sequences), params, seed=1)
    run.run_epoch()  # warm-up: first-use allocations and kernel choices
    shares, bare_shares, rates = [], [], []
    for _ in range(rounds):
        peak = sgemm_rate()
        rate = run.run_epoch().sequences_per_second * per_sequence / 1e9
        bare = sequences * per_sequence / bare_epoch_seconds(run, batch) / 1e9
        shares.append(rate / peak)
        bare_shares.append(bare / peak)
        rates.append(rate)
    return {"gflops": median(rates), "share": median(shares), "bare": median(bare_shares)}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="widths 32 and 256, one round")
    parser.add_argument("--batch", type=int, default=32)
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args(argv)
    widths, work, rounds = (32, 128, 256), 2e9, args.rounds
    if args.quick:
        widths, work, rounds = (32, 256), 2e8, 1
    previous = torch.get_num_threads()
    torch.set_num_threads(1)
    try:
        rows = []
        for cell in GATES:
            for hidden in widths:
                got = measure(cell, hidden, args.batch, work, rounds)
                share, bare = got["share"], got["bare"]
                rows.append((cell, hidden, got["gflops"], share, bare, share / bare))
        peak = sgemm_rate()
    finally:
        torch.set_num_threads(previous)
    report(rows, peak, args.batch)
    return 0


def report(rows: list[tuple], peak: float, batch: int) -> None:
    print(machine_line())
    print(f"batch {batch}, unroll {UNROLL} x {WINDOWS} windows, {INPUTS} inputs, 1 thread")
    print(
        f"sgemm 2048x2048 on one thread: {peak:.1f} GFLOP/s (at the end; shares use each round's)"
    )
    headers = ("cell", "hidden", "trainer GFLOP/s", "share of sgemm", "bare loop share")
    headers += ("trainer / bare",)
    print_table(headers, rows)
    print()
    for cell, hidden, _, share, *_ in rows:
        target = TARGETS.get((cell, hidden))
        if target is not None:
            print(f"sgemm_share_{cell}_{hidden} {share:.3f} (target >= {target})")


if __name__ == "__main__":
    sys.exit(main())
