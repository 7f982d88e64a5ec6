"""A trial's state in sweeper's own words: the one mapping that the command line, ``status``,
the summary and the export all use, so that one trial is never "failed" in one place and
"interrupted" in another.

optuna stores five states; the attributes tell more: a diverged trial is stored PRUNED (or
FAIL) with ``diverged``, an interrupted one FAIL with ``interrupted``, and a trial that repeats
the chosen configuration with another seed carries ``confirms``.
"""

from __future__ import annotations

from optuna.trial import FrozenTrial

from sweeper.store.attrs import TrialInfo

FINISHED = "finished"
STOPPED = "stopped early"
DIVERGED = "diverged"
FAILED = "failed"
INTERRUPTED = "interrupted"
CONFIRMATION = "confirmation"
RUNNING = "running"
WAITING = "waiting"
# In the order the page and the terminal list them.
WORDS = (FINISHED, CONFIRMATION, STOPPED, DIVERGED, FAILED, INTERRUPTED, RUNNING, WAITING)


def state_word(
    state: str, *, diverged: bool = False, interrupted: bool = False, confirms: bool = False
) -> str:
    """Our word for a trial with optuna state name ``state`` and these attributes."""
    if state in ("RUNNING", "WAITING"):
        return RUNNING if state == "RUNNING" else WAITING
    if diverged:
        return DIVERGED
    if state == "FAIL":
        return INTERRUPTED if interrupted else FAILED
    if state == "PRUNED":
        return STOPPED
    return CONFIRMATION if confirms else FINISHED


def trial_word(trial: FrozenTrial) -> str:
    info = TrialInfo.of(trial)
    return state_word(
        trial.state.name,
        diverged=info.diverged,
        interrupted=info.interrupted,
        confirms=info.confirms is not None,
    )
