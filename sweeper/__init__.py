"""sweeper: hyperparameter sweeps for recurrent networks.

The public API; everything else is internal and may change. Names other than the exceptions
load on first use, so that the command line and fresh worker processes import torch only
when they need it (the launcher starts its pool before that; see ``sweeper.sweep.pool``).
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
    from sweeper.report.export import export_study
    from sweeper.report.render import build_report
    from sweeper.results.saved_model import load_model
    from sweeper.spec.loading import load_spec, parse_spec
    from sweeper.spec.sections import Spec
    from sweeper.sweep.launcher import SweepResult, run_sweep
    from sweeper.tasks.base import Baseline, SequenceSet, Task
    from sweeper.training.epoch_record import EpochRecord
    from sweeper.training.params import TrialParams

__version__ = "0.1.0"

_LAZY = {
    "Baseline": "sweeper.tasks.base",
    "EpochRecord": "sweeper.training.epoch_record",
    "SequenceSet": "sweeper.tasks.base",
    "Spec": "sweeper.spec.sections",
    "SweepResult": "sweeper.sweep.launcher",
    "Task": "sweeper.tasks.base",
    "TrialParams": "sweeper.training.params",
    "build_report": "sweeper.report.render",
    "export_study": "sweeper.report.export",
    "load_model": "sweeper.results.saved_model",
    "load_spec": "sweeper.spec.loading",
    "parse_spec": "sweeper.spec.loading",
    "run_sweep": "sweeper.sweep.launcher",
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
