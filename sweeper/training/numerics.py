"""The trainer's numerics revision: which code paths a trial's numbers came from.

Replaying a trial bit for bit, continuing it from its checkpoint and retraining it for
``best --retrain`` must take the paths it was trained with, so every trained trial records
its revision (a ``trainer`` trial attribute, a ``revision`` key in its checkpoint). A trial
or checkpoint without one predates the record and was trained through torch's own
nn.RNN / nn.GRU.

``SWEEPER_RECURRENCE=torch`` in the environment makes new trials use torch's modules (the
oldest revision); the benchmarks use it to time the old path against the new.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass

SWITCH = "SWEEPER_RECURRENCE"
TORCH_MODULES = "torch-modules"  # what a trial without a recorded revision was trained with
WINDOW = "window-1"
LATEST = WINDOW


@dataclass(frozen=True)
class Numerics:
    """The choices of one revision that change a trial's numbers."""

    own_recurrence: bool  # Elman and GRU through training/recurrence.py, not torch's modules
    # fused optimizer kernels (Adam's round differently), clipping that scales only above the
    # threshold; torch-modules keeps the trainer's older code for these as well
    lean_step: bool


REVISIONS = {
    TORCH_MODULES: Numerics(own_recurrence=False, lean_step=False),
    WINDOW: Numerics(own_recurrence=True, lean_step=True),
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


def current_revision() -> str:
    """The revision a new trial trains with: the latest, or torch's modules when asked."""
    return TORCH_MODULES if os.environ.get(SWITCH, "") == "torch" else LATEST


# the revision models are being built for (TrialRun sets it); unset: current_revision()
_building: ContextVar[str | None] = ContextVar("sweeper_building_revision", default=None)


@contextmanager
def building(revision: str) -> Iterator[None]:
    """Build models for ``revision`` inside this block (this thread or task only)."""
    numerics(revision)
    token = _building.set(revision)
    try:
        yield
    finally:
        _building.reset(token)


def own_recurrence() -> bool:
    """Whether a built-in Elman or GRU built now runs our window recurrence."""
    return numerics(_building.get() or current_revision()).own_recurrence
