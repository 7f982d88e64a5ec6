"""sweeper: hyperparameter sweeps for recurrent networks.

The public API; everything else is internal and may change.
"""

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
from sweeper.launcher import SweepResult, run_sweep
from sweeper.params import TrialParams
from sweeper.saved_model import load_model
from sweeper.spec import Spec, load_spec, parse_spec
from sweeper.tasks.base import Baseline, SequenceSet, Task
from sweeper.telemetry import EpochRecord

__version__ = "0.1.0"

# The summary pulls in heavy analysis libraries; workers never need it, so it loads on use.
_LAZY = {"build_report": "sweeper.report", "export_study": "sweeper.report"}


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
