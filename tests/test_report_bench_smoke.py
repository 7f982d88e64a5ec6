"""The size benchmark runs end to end in its quick form and prints its two figures."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

SCRIPT = Path(__file__).resolve().parents[1] / "benchmarks" / "report_size.py"


def test_quick_benchmark_prints_time_and_size() -> None:
    done = subprocess.run(
        [sys.executable, str(SCRIPT), "--quick", "--check"],
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    assert "study built: 100 trials x 10 epochs" in done.stdout
    seconds = re.search(r"^generation_seconds (\d+\.\d+) \(target <= 15\)$", done.stdout, re.M)
    size = re.search(r"^size_megabytes (\d+\.\d+) \(target <= 8\)$", done.stdout, re.M)
    assert seconds is not None and size is not None, done.stdout
    # plotly.js alone is about 4.8 MB, so a page below that would be missing it.
    assert 4.8 < float(size.group(1)) < 8.0
