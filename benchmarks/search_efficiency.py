"""Compute to reach a target: sweeper's default search against random search without stopping.

    python benchmarks/search_efficiency.py            # 7 seeds, the full task
    python benchmarks/search_efficiency.py --quick    # 2 seeds, a tiny task: a smoke test
    python benchmarks/search_efficiency.py --seeds 9  # more seeds
    python benchmarks/search_efficiency.py --check    # exit 1 when the median ratio is below 3

The task is delayed recall (emit the symbol seen 6 steps earlier; 4 symbols, so chance is
0.25): only an unroll longer than the delay can learn it, and the learning rate decides how
fast. The target is a fixed validation accuracy of 0.9 within 9 epochs, which only a narrow
band of configurations reaches (about one random draw in twenty here). A lower target such
as 0.625, half the way from chance, is met by about one draw in four, and then it hardly
matters how the search chooses. Both searches cover the same space with the same task,
model and epochs; the default search is the spec with no sampler and no [stopping] section,
so it measures sweeper's defaults (the stopping schedule fitted to the spec's budget, the
trial cap).

Each sweep runs in-process with one worker, a few trials at a time, until some trial's
validation accuracy reaches the target (or the trial cap is met). Its compute to target is
the recorded training seconds of every trial before the one that got there, plus that trial's
seconds up to the epoch where it did. The ratio of a seed is random's compute over the
default's; a search that never gets there counts as its whole compute (marked >=), which
understates the ratio when random misses and, when the default misses, counts it as 0.
"""

from __future__ import annotations

import argparse
import io
import math
import sqlite3
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

from measure import REPO, machine_line, median, print_table

sys.path.insert(0, str(REPO))

from sweeper.spec.loading import parse_spec
from sweeper.spec.sections import Spec
from sweeper.sweep.launcher import run_sweep
from sweeper.sweep.progress import ProgressDisplay

TARGET_RATIO = 3.0
SPEC = """
[study]
name = "{name}"
better = "higher"
objective = "valid_metric"
trials = {trials}
seed = {seed}
storage = "{storage}"
{sampler}
[confirm]
configurations = 0  # the search alone is measured

[task]
kind = "recall"
length = 24
delay = 6
symbols = 4
train_sequences = {train}
valid_sequences = 128

[training]
epochs = {epochs}
threads = 1
cell = "lstm"
hidden = 32
batch = 8
optimizer = "adam"

[search]
unroll = {{ between = [2, 24] }}
lr = {{ between = [0.0001, 0.3], scale = "log" }}
clip = {{ between = [0.1, 10.0], scale = "log" }}
{stopping}
"""
SEARCHES = {
    "default": {"sampler": "", "stopping": ""},
    "random": {"sampler": 'sampler = "random"', "stopping": '[stopping]\nrule = "none"'},
}


@dataclass(frozen=True)
class Setting:
    seeds: int
    train: int
    epochs: int
    cap: int  # most trials a sweep may run
    chunk: int  # trials per launch between looks at the target
    target: float


FULL = Setting(seeds=7, train=512, epochs=9, cap=60, chunk=4, target=0.9)
QUICK = Setting(seeds=2, train=64, epochs=2, cap=4, chunk=2, target=0.3)


@dataclass(frozen=True)
class Outcome:
    compute: float  # seconds to the target, or all seconds spent when it was not reached
    reached: bool
    trials: int
    wall: float

    def cell(self) -> str:
        return f"{self.compute:.1f}" if self.reached else f">={self.compute:.1f}"


def build_spec(search: str, seed: int, setting: Setting, folder: Path) -> Spec:
    name = f"{search}-{seed}"
    text = SPEC.format(
        name=name,
        trials=setting.cap,  # the budget the default stopping schedule is fitted to
        seed=seed,
        storage=(folder / f"{name}.db").as_posix(),
        train=setting.train,
        epochs=setting.epochs,
        **SEARCHES[search],
    )
    return parse_spec(text, f"<{name}>")


def epoch_rows(spec: Spec) -> list[tuple[int, float, float]]:
    """(trial, valid accuracy, seconds) of every epoch, in the order one worker ran them."""
    with sqlite3.connect(spec.study.storage) as connection:
        return connection.execute(
            "SELECT trial_number, valid_metric, seconds FROM sweeper_epochs "
            "WHERE study_name = ? ORDER BY trial_number, epoch",
            (spec.study.name,),
        ).fetchall()


def compute_to_target(rows: list[tuple[int, float, float]], target: float) -> tuple[float, bool]:
    spent = 0.0
    for _trial, accuracy, seconds in rows:
        spent += seconds
        if accuracy is not None and math.isfinite(accuracy) and accuracy >= target:
            return spent, True
    return spent, False


def run_search(search: str, seed: int, setting: Setting, folder: Path) -> Outcome:
    spec = build_spec(search, seed, setting, folder)
    started = time.perf_counter()
    trials = 0
    while trials < setting.cap:
        trials = min(setting.cap, trials + setting.chunk)
        run_sweep(spec.with_overrides(trials=trials), ProgressDisplay(io.StringIO()))
        spent, reached = compute_to_target(epoch_rows(spec), setting.target)
        if reached:
            break
    return Outcome(spent, reached, trials, time.perf_counter() - started)


def ratio(random: Outcome, default: Outcome) -> float:
    if not default.reached:
        return 0.0
    return random.compute / default.compute


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="a tiny task and 2 seeds")
    parser.add_argument("--seeds", type=int, help="how many study seeds (default 7)")
    parser.add_argument("--check", action="store_true", help="exit 1 when the target is missed")
    args = parser.parse_args(argv)
    setting = QUICK if args.quick else FULL
    seeds = args.seeds or setting.seeds
    print(machine_line())
    print(
        f"recall, target accuracy {setting.target} (chance 0.25), {setting.epochs} epochs a "
        f"trial, at most {setting.cap} trials a sweep, {seeds} seeds"
    )
    rows, ratios = [], []
    with tempfile.TemporaryDirectory() as folder:
        for seed in range(seeds):
            # alternate which search goes first, so that drift on the machine hits both
            order = ["default", "random"] if seed % 2 == 0 else ["random", "default"]
            outcome = {name: run_search(name, seed, setting, Path(folder)) for name in order}
            default, random = outcome["default"], outcome["random"]
            ratios.append(ratio(random, default))
            rows.append(
                [seed, default.cell(), default.trials, random.cell(), random.trials, ratios[-1]]
            )
            print(f"seed {seed}: ratio {ratios[-1]:.2f}", file=sys.stderr, flush=True)
    headers = ["seed", "default s", "trials", "random s", "trials", "ratio"]
    print_table(headers, rows)
    middle = median(ratios)
    verdict = "met" if middle >= TARGET_RATIO else "NOT met"
    print(f"median_ratio {middle:.2f} (target >= {TARGET_RATIO:g}: {verdict})")
    return 1 if args.check and middle < TARGET_RATIO else 0


if __name__ == "__main__":
    sys.exit(main())
