"""What the benchmark scripts share: medians, timed subprocesses, a table and the machine.

The machine these run on is shared, so every script compares variants measured in the same
run, alternating them, and reports ratios of medians rather than absolute times.
"""

from __future__ import annotations

import os
import platform
import statistics
import subprocess
import sys
import time
from collections.abc import Sequence
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]


def median(values: Sequence[float]) -> float:
    return float(statistics.median(values))


def timed_subprocess(args: Sequence[object], cwd: Path) -> float:
    """Wall seconds of a child process, start-up included; a failure stops the benchmark."""
    started = time.perf_counter()
    done = subprocess.run(
        [str(a) for a in args], cwd=cwd, env=child_env(), capture_output=True, text=True
    )
    seconds = time.perf_counter() - started
    if done.returncode != 0:
        sys.exit(f"{' '.join(map(str, args))} failed ({done.returncode}):\n{done.stderr[-3000:]}")
    return seconds


def child_env() -> dict[str, str]:
    """The environment for a child process, with this checkout first on the import path."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    return env


def cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def machine_line() -> str:
    import torch

    return f"machine: {os.cpu_count()} cores, {cpu_model()}, torch {torch.__version__}"


def print_table(headers: Sequence[str], rows: Sequence[Sequence[object]]) -> None:
    cells = [[str(h) for h in headers]] + [[_cell(v) for v in row] for row in rows]
    widths = [max(len(row[i]) for row in cells) for i in range(len(headers))]
    for index, row in enumerate(cells):
        print("  ".join(text.ljust(width) for text, width in zip(row, widths, strict=True)))
        if index == 0:
            print("  ".join("-" * width for width in widths))


def _cell(value: object) -> str:
    if isinstance(value, float):
        return f"{value:.3f}" if abs(value) < 1000 else f"{value:.0f}"
    return str(value)
