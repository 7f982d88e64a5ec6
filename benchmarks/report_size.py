"""Time the static summary of a large synthetic study and measure its size.

    python benchmarks/report_size.py            # 2,000 trials x 30 epochs (targets: 15 s, 8 MB)
    python benchmarks/report_size.py --quick    # 100 trials x 10 epochs, a smoke test
    python benchmarks/report_size.py --db runs/bench.db   # keep the study and reuse it next time

Building the study is timed separately: it goes through optuna's storage one trial at a time
and is not part of the report's cost.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import optuna
from synthetic_study import make_synthetic_study

from sweeper.report.render import build_report

TARGET_SECONDS = 15.0
TARGET_MEGABYTES = 8.0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=2000)
    parser.add_argument("--epochs", type=int, default=30)
    parser.add_argument("--quick", action="store_true", help="100 trials x 10 epochs")
    parser.add_argument("--db", type=Path, help="study database to reuse (built if missing)")
    parser.add_argument("--check", action="store_true", help="exit 1 when a target is missed")
    args = parser.parse_args(argv)
    if args.quick:
        args.trials, args.epochs = 100, 10
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    with tempfile.TemporaryDirectory() as scratch:
        db = args.db or Path(scratch) / "bench.db"
        if not db.exists():
            started = time.perf_counter()
            make_synthetic_study(str(db), trials=args.trials, epochs=args.epochs, name="bench")
            built = time.perf_counter() - started
            print(f"study built: {args.trials} trials x {args.epochs} epochs in {built:.1f} s")
        output = Path(scratch) / "summary.html"
        started = time.perf_counter()
        build_report(str(db), output)
        seconds = time.perf_counter() - started
        megabytes = output.stat().st_size / 1e6
    print(f"generation_seconds {seconds:.2f} (target <= {TARGET_SECONDS:g})")
    print(f"size_megabytes {megabytes:.2f} (target <= {TARGET_MEGABYTES:g})")
    missed = seconds > TARGET_SECONDS or megabytes > TARGET_MEGABYTES
    return 1 if args.check and missed else 0


if __name__ == "__main__":
    sys.exit(main())
