"""sweeper: hyperparameter sweeps for recurrent networks.

The public API; everything else is internal and may change. Names other than the exceptions
load on first use, so that the command line and fresh worker processes import torch only
when they need it (the launcher starts its pool before that; see ``sweeper.pool``).
"""

import typing as _typing

from sweeper.errors import (
    InputError,
    Interrupted,
    RunFailure,
    SpecChanged,
    SpecError,
    StudyNotFound,
    SweeperError,
    TooManyFailures,
)

if _typing.TYPE_CHECKING:
    from sweeper.launcher import SweepResult, run_sweep
    from sweeper.params import TrialParams
    from sweeper.report import build_report, export_study
    from sweeper.saved_model import load_model
    from sweeper.spec import Spec, load_spec, parse_spec
    from sweeper.tasks.base import Baseline, SequenceSet, Task
    from sweeper.telemetry import EpochRecord

__version__ = "0.1.0"

_LAZY = {
    "Baseline": "sweeper.tasks.base",
    "EpochRecord": "sweeper.telemetry",
    "SequenceSet": "sweeper.tasks.base",
    "Spec": "sweeper.spec",
    "SweepResult": "sweeper.launcher",
    "Task": "sweeper.tasks.base",
    "TrialParams": "sweeper.params",
    "build_report": "sweeper.report",
    "export_study": "sweeper.report",
    "load_model": "sweeper.saved_model",
    "load_spec": "sweeper.spec",
    "parse_spec": "sweeper.spec",
    "run_sweep": "sweeper.launcher",
}


def __getattr__(name: str) -> object:
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'sweeper' has no attribute {name!r}")


__all__ = [
    "Baseline",
    "EpochRecord",
    "InputError",
    "Interrupted",
    "RunFailure",
    "SequenceSet",
    "Spec",
    "SpecChanged",
    "SpecError",
    "StudyNotFound",
    "SweepResult",
    "SweeperError",
    "Task",
    "TooManyFailures",
    "TrialParams",
    "build_report",
    "export_study",
    "load_model",
    "load_spec",
    "parse_spec",
    "run_sweep",
]
