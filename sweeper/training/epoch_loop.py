"""The one loop over a trial's epochs: train, tell the hooks, end on divergence or when told.

Every caller that trains a ``TrialRun`` for several epochs (a sweep's trial, ``best
--retrain``, ``replay``) goes through ``run_epochs``, so a diverged epoch ends a run the same
way everywhere. Hooks carry the results out: ``on_epoch`` hooks see every record, the diverged
one included; ``stop_after`` is asked only after a healthy epoch and may end the run early.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any, Literal

from sweeper.training.epoch_record import EpochRecord
from sweeper.training.trial_run import TrialRun, divergence_reason

EpochHook = Callable[[EpochRecord], None]
StopQuestion = Callable[[EpochRecord], str | None]
Ending = Literal["completed", "diverged", "stopped"]


@dataclass(frozen=True)
class RunEnd:
    """How a run of epochs ended, after which epoch, and why (``None`` when it completed)."""

    how: Ending
    epoch: int
    reason: str | None = None


def _never() -> bool:
    return False


def _go_on(record: EpochRecord) -> str | None:
    return None


def run_epochs(
    run: TrialRun,
    last_epoch: int,
    on_epoch: Sequence[EpochHook] = (),
    stop_after: StopQuestion = _go_on,
    should_stop: Callable[[], bool] = _never,
) -> RunEnd:
    """Train from the run's current epoch up to ``last_epoch`` (inclusive).

    After each epoch: every ``on_epoch`` hook, in order; then the divergence check, which ends
    the run; then ``stop_after``, whose reason (a string) ends it too. What a hook raises
    propagates, and so does ``TrainingInterrupted`` from ``should_stop``.
    """
    for _ in range(run.epoch, last_epoch):
        # train one epoch, then let the hooks record it before anything can end the run
        record = run.run_epoch(should_stop)
        for hook in on_epoch:
            hook(record)
        # diverged: nothing sensible can follow a non-finite step or loss
        reason = divergence_reason(record)
        if reason is not None:
            return RunEnd("diverged", record.epoch, reason)
        # stopped: a hook's rule (the study's stopping rule, say) ended it early
        reason = stop_after(record)
        if reason is not None:
            return RunEnd("stopped", record.epoch, reason)
    return RunEnd("completed", run.epoch)


class BestWeights:
    """An ``on_epoch`` hook that keeps a copy of the model's weights at its best epoch.

    ``value`` picks the measure from a record (validation loss, say); ``better`` says which way
    is better ("lower" or "higher"). A non-finite value is never best; a tie keeps the earlier
    epoch.
    """

    def __init__(
        self,
        run: TrialRun,
        value: Callable[[EpochRecord], float],
        better: Literal["lower", "higher"] = "lower",
    ) -> None:
        self._run = run
        self._value = value
        self._sign = 1.0 if better == "lower" else -1.0
        self.epoch: int | None = None
        self.value = math.nan
        self.state: dict[str, Any] | None = None

    def __call__(self, record: EpochRecord) -> None:
        value = self._value(record)
        if math.isfinite(value) and (self.epoch is None or self._better(value)):
            self.epoch, self.value = record.epoch, value
            # a copy: later epochs must not change the kept weights
            self.state = copy.deepcopy(self._run.model.state_dict())

    def _better(self, value: float) -> bool:
        return self._sign * value < self._sign * self.value
