"""The cores this process may use, and their share per worker (light: the command line reads
it before torch loads)."""

from __future__ import annotations

import os


def usable_cores() -> int:
    """The cores this process may run on (a container or `taskset` may allow fewer than the
    machine has)."""
    if hasattr(os, "sched_getaffinity"):
        return len(os.sched_getaffinity(0)) or 1
    return os.cpu_count() or 1


def share_of_cores(workers: int, busy: int = 0) -> int:
    """torch threads per worker: the cores not ``busy`` with other workers, shared out, at
    least one, so that workers x threads never exceeds the cores while the workers fit."""
    return max(1, (usable_cores() - busy) // max(1, workers))
