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
from sweeper.report import build_report, export_study
from sweeper.saved_model import load_model
from sweeper.spec import Spec, load_spec, parse_spec
from sweeper.tasks.base import Baseline, SequenceSet, Task
from sweeper.telemetry import EpochRecord

__version__ = "0.1.0"

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
