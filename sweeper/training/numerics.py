"""The trainer's numerics revision: which code paths a trial's numbers came from.

Replaying a trial bit for bit, continuing it from its checkpoint and retraining it for
``best --retrain`` must take the paths it was trained with, so every trained trial records
its revision (a ``trainer`` trial attribute, a ``revision`` key in its checkpoint). A trial
or checkpoint without one predates the record and was trained through torch's own
nn.RNN / nn.GRU.

``SWEEPER_RECURRENCE`` in the environment picks the revision of new trials by name (``torch``
for torch-modules, ``window-1``); the benchmarks use it to time the old paths against the new.
Without it a new trial takes the latest revision this machine can run: window-2 needs the
compiled step loops (training/compiled_steps.py), window-1 where they cannot be built.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass

from sweeper.training import compiled_steps

SWITCH = "SWEEPER_RECURRENCE"
TORCH_MODULES = "torch-modules"  # what a trial without a recorded revision was trained with
WINDOW = "window-1"
COMPILED = "window-2"
LATEST = COMPILED


@dataclass(frozen=True)
class Numerics:
    """The choices of one revision that change a trial's numbers."""

    own_recurrence: bool  # Elman and GRU through training/recurrence.py, not torch's modules
    # fused optimizer kernels (Adam's round differently), clipping that scales only above the
    # threshold; torch-modules keeps the trainer's older code for these as well
    lean_step: bool
    compiled_steps: bool = False  # the step loops of our recurrence in step_kernels.cpp


REVISIONS = {
    TORCH_MODULES: Numerics(own_recurrence=False, lean_step=False),
    WINDOW: Numerics(own_recurrence=True, lean_step=True),
    COMPILED: Numerics(own_recurrence=True, lean_step=True, compiled_steps=True),
}


class UnknownRevision(ValueError):
    """A revision this sweeper does not have (recorded by a newer one)."""

    def __init__(self, revision: str) -> None:
        self.revision = revision
        known = ", ".join(REVISIONS)
        super().__init__(f"unknown trainer revision {revision!r} (this sweeper has {known})")


def numerics(revision: str) -> Numerics:
    try:
        return REVISIONS[revision]
    except KeyError:
        raise UnknownRevision(revision) from None


class RevisionUnavailable(RuntimeError):
    """A revision whose code this machine cannot run (window-2 without its compiled loops)."""

    def __init__(self, revision: str, why: str) -> None:
        self.revision, self.why = revision, why
        super().__init__(
            f"trainer revision {revision} needs the compiled step loops, which this machine "
            f"cannot build ({why})"
        )


def current_revision() -> str:
    """The revision a new trial trains with: the one asked for in the environment, else the
    latest this machine can run."""
    asked = os.environ.get(SWITCH, "")
    if asked == "torch":
        return TORCH_MODULES
    if asked:
        numerics(asked)
        return asked
    return COMPILED if compiled_steps.loaded() is not None else WINDOW


def trainer_line() -> str:
    """What new trials on this machine train with, for ``sweeper check``."""
    revision = current_revision()
    if revision == COMPILED:
        return f"trainer: revision {revision} (Elman and GRU steps compiled on this machine)"
    if revision == WINDOW and not os.environ.get(SWITCH):
        return (
            f"trainer: revision {revision} (Python step loops; the compiled ones are not "
            f"available here: {compiled_steps.why_not()})"
        )
    return f"trainer: revision {revision} (asked for by {SWITCH})"


def check_runnable(revision: str) -> None:
    """Raise RevisionUnavailable unless this machine can run ``revision``'s code."""
    if numerics(revision).compiled_steps and compiled_steps.loaded() is None:
        raise RevisionUnavailable(revision, compiled_steps.why_not())


# the revision models are being built for (TrialRun sets it); unset: current_revision()
_building: ContextVar[str | None] = ContextVar("sweeper_building_revision", default=None)


@contextmanager
def building(revision: str) -> Iterator[None]:
    """Build models for ``revision`` inside this block (this thread or task only)."""
    check_runnable(revision)
    token = _building.set(revision)
    try:
        yield
    finally:
        _building.reset(token)


def building_numerics() -> Numerics:
    """The numerics of the models built now (the trial's revision, else a new trial's)."""
    return numerics(_building.get() or current_revision())
