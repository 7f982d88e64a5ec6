"""The search-efficiency benchmark runs end to end in its quick form and prints its figures.

The figures of a quick run mean nothing (a tiny task, two seeds); only their shape is checked.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

SCRIPT = Path(__file__).resolve().parents[1] / "benchmarks" / "search_efficiency.py"
NUMBER = r"(>=)?\d+\.\d+"


def test_quick_benchmark_prints_a_row_per_seed_and_the_median_ratio() -> None:
    done = subprocess.run(
        [sys.executable, str(SCRIPT), "--quick"],
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    lines = done.stdout.splitlines()
    assert lines[1].startswith("recall, target accuracy 0.3 (chance 0.25)")
    rows = [line.split() for line in lines if re.match(r"^[01]\s", line)]
    assert [row[0] for row in rows] == ["0", "1"]
    for row in rows:
        assert re.fullmatch(NUMBER, row[1]) and re.fullmatch(NUMBER, row[3]), row
        assert 1 <= int(row[2]) <= 4 and 1 <= int(row[4]) <= 4
    assert re.search(r"^median_ratio \d+\.\d\d \(target >= 3: (met|NOT met)\)$", done.stdout, re.M)
