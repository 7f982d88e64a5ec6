"""Cost of the checkpoint saved after every epoch, against the epoch it follows.

    python benchmarks/checkpoint_cost.py           # the demo's mid configuration, 12 epochs x 2
    python benchmarks/checkpoint_cost.py --quick   # 3 epochs x 2

The model is the demo spec's (search_spaces/adding_lstm_demo.toml) at the middle of its search
space. Two identical runs (same parameters and seed) train in turn, epoch by epoch: one saves
its state into a SQLite study database after each epoch, exactly as a sweep does
(``checkpoints.save`` of ``TrialRun.state_dict()``), the other does not. The save is also
timed in its three parts: copying the state, encoding it with torch.save, and the write.
"""

from __future__ import annotations

import argparse
import math
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import torch
from measure import REPO, machine_line, median, print_table

from sweeper.spec.checks import build_spec_task
from sweeper.spec.loading import load_spec
from sweeper.store import checkpoints, tables
from sweeper.store.connect import open_storage
from sweeper.training.params import TrialParams
from sweeper.training.trial_run import TrialRun

DEMO = REPO / "search_spaces" / "adding_lstm_demo.toml"
TARGET = 0.03


def middle(entry: Any) -> Any:
    """The centre of a search entry: geometric on a log scale, the middle choice of a list."""
    if hasattr(entry, "values"):
        return entry.values[len(entry.values) // 2]
    centre = math.sqrt(entry.low * entry.high) if entry.log else (entry.low + entry.high) / 2
    return int(centre) if entry.integer else round(centre, 6)


def timed(action: Callable[[], Any]) -> tuple[Any, float]:
    started = time.perf_counter()
    result = action()
    return result, time.perf_counter() - started


def save_parts(saving: TrialRun, engine: Any, epoch: int) -> dict[str, float]:
    """Train one epoch, then checkpoint it as a sweep does, timing each part."""
    _, trained = timed(saving.run_epoch)
    state, copied = timed(saving.state_dict)
    payload, encoded = timed(lambda: checkpoints.encode(state))
    _, saved = timed(lambda: checkpoints.save(engine, "bench", 0, epoch, state))
    # save encodes again, then writes
    parts = {"copy": copied, "encode": encoded, "write": saved - encoded}
    return {"saving": trained + copied + saved, "bytes": len(payload), **parts}


def measure(epochs: int, threads: int, db: Path) -> dict:
    spec = load_spec(DEMO)
    point = {name: middle(entry) for name, entry in spec.search.items()}
    params = TrialParams.from_mapping({**spec.training.defaults, **point})
    task = build_spec_task(spec)
    engine = open_storage(str(db)).engine
    tables.ensure_tables(engine)
    torch.set_num_threads(threads)
    saving, plain = TrialRun(task, params, seed=1), TrialRun(task, params, seed=1)
    rows = []
    for epoch in range(1, epochs + 1):
        # the two runs take turns going first, so a drift in load hits both alike
        if epoch % 2:
            row = {"plain": timed(plain.run_epoch)[1], **save_parts(saving, engine, epoch)}
        else:
            row = save_parts(saving, engine, epoch)
            row["plain"] = timed(plain.run_epoch)[1]
        row["ratio"] = row["saving"] / row["plain"]
        rows.append(row)
    figures = {key: median([row[key] for row in rows]) for key in rows[0]}
    figures["params"] = params
    return figures


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="3 epochs per run")
    parser.add_argument("--epochs", type=int, default=12)
    parser.add_argument("--threads", type=int, default=1, help="torch threads")
    args = parser.parse_args(argv)
    previous = torch.get_num_threads()
    try:
        with tempfile.TemporaryDirectory() as scratch:
            epochs = 3 if args.quick else args.epochs
            got = measure(epochs, args.threads, Path(scratch) / "study.db")
    finally:
        torch.set_num_threads(previous)
    report(got, args.threads)
    return 0


def report(got: dict, threads: int) -> None:
    p = got["params"]
    print(machine_line())
    print(
        f"demo model: {p.cell}, hidden {p.hidden}, unroll {p.unroll}, batch {p.batch}, "
        f"clip {p.clip:g}, lr {p.lr:g}, {p.optimizer}; {threads} torch thread(s)"
    )
    epoch = got["plain"]
    rows = [
        ("epoch without checkpoint", 1000 * epoch, 1.0),
        ("epoch with checkpoint", 1000 * got["saving"], got["ratio"]),
        ("  copy the state (state_dict)", 1000 * got["copy"], got["copy"] / epoch),
        ("  encode (torch.save)", 1000 * got["encode"], got["encode"] / epoch),
        ("  write the row (SQLite)", 1000 * got["write"], got["write"] / epoch),
    ]
    print_table(("median over epochs", "ms", "share of an epoch"), rows)
    print()
    cost = (got["copy"] + got["encode"] + got["write"]) / epoch
    print(f"checkpoint_bytes {got['bytes']:.0f}")
    print(f"checkpoint_share_of_epoch {cost:.3f} (target <= {TARGET})")
    print(f"epoch_ratio_with_checkpoint {got['ratio']:.3f} (target <= {1 + TARGET})")


if __name__ == "__main__":
    sys.exit(main())
