"""The one schema of what sweeper stores in optuna's study and trial attributes.

Every attribute is read and written through this module, never by its key elsewhere.

Study user attributes (written at each launch by ``write_launch``; the report, the export,
``resume``, ``status`` and every worker read them through ``StudyInfo``):

==================  ==========================================================================
``spec_text``       the spec file's text; a study without it was not made by sweeper
``spec_source``     the spec file's absolute path ("" when it came from no file)
``spec_hash``       the spec's digest; a launch with another digest is refused
``spec_data``       the canonical spec as its file has it (no command-line override), as JSON
                    text, to name the keys a changed spec changed
``task``            the task's name (``"objective"`` for an objective plugin)
``task_description`` the task in one line
``baseline``        ``{value, measure, description}``: the trivial strategy's score, or null
``objective``       what a trial's value is: ``valid_loss``, ``valid_metric`` or ``value``
``metric_name``     the task's metric (``value`` for an objective plugin)
``budget``          the trial budget; changed only by a launch that adds trials (``launch_budget``)
``workers``         the spec file's worker count (a --workers override is not stored)
``stop_request``    null, or why every worker should stop now (``set_stop_request``)
``choice``          the confirmed choice once a sweep ends (``record_choice``): ``{trial,
                    mean, std, stderr, seeds, told_apart_from_runners_up, tied_with}``, or null
==================  ==========================================================================

Trial user attributes (written by the runner and the worker loop through the ``record_*``
functions; read through ``TrialInfo``):

======================  ======================================================================
``seed``                the trial's training seed (a retry's is its origin's)
``worker``              ``host:pid:wN`` of the worker that ran it
``threads``             torch threads it trained with (replay needs the same count)
``training``            every training parameter (``TrialParams.as_dict``)
``trainer``             the trainer's numerics revision it trained with (training/numerics.py);
                        absent: torch's own nn.RNN / nn.GRU, as before it was recorded
``epochs``              epochs recorded so far
``score_epoch``         the epoch the trial's score comes from (its best epoch, or its last for
                        the other scores): what ``best --retrain`` trains for
``compute_seconds``     training seconds so far, carried over from the trial it continues
``wall_seconds``        seconds from claim to end in its worker
``end_reason``          why it ended, in words
``diverged``            true when it stopped because its loss went non-finite
``failure``             ``{type, message, traceback}`` of the exception it raised
``interrupted``         true when a stop request ended it; the next launch continues it
``retry_of``            the trial it retries or continues (its origin), when not itself
``resumed_from_epoch``  the epoch its origin's checkpoint had reached
``confirms``            a confirmation trial: the searched trial whose parameters it trains
                        again with a fresh seed (absent on searched trials); queued with it,
                        so retries and continuations carry it too
``confirm_round``       which of the confirmation seeds (1, 2, ...) that trial trains with
``draw``                ``{stream, redraws}``: the sampler stream of its worker start, and how
                        many drawn configurations it refused as copies of finished or running
                        trials
======================  ======================================================================

Trial system attributes: ``failed_trial`` and ``retry_history`` are optuna's (its heartbeat
retry writes them; ``requeue_interrupted`` writes them the same way, so a continuation
loads its origin's checkpoint), ``fixed_params`` is optuna's (a queued trial's parameters),
``continues_interrupted`` is ours (the interrupted trial a continuation stands for).

Diverged trials are PRUNED with the worst value at their last epoch, so the sampler learns to
avoid the region; interrupted trials are FAIL with ``interrupted = true``.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import optuna
from optuna.trial import FrozenTrial

from sweeper.store.optuna_internals import frozen_copy, study_user_attrs

STOP_REQUEST = "stop_request"
CHOICE = "choice"
CONFIRMS, CONFIRM_ROUND = "confirms", "confirm_round"


def _int(value: Any) -> int | None:
    # JSON has no separate boolean and integer for optuna's attributes: refuse booleans
    return value if isinstance(value, int) and not isinstance(value, bool) else None


def _number(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    return float(value)


def _text(attrs: Mapping[str, Any], key: str, default: str = "") -> str:
    value = attrs.get(key, default)
    return "" if value is None else str(value)


@dataclass(frozen=True)
class StoredBaseline:
    """The task's trivial-strategy score; ``value`` is NaN when none was stored."""

    value: float
    measure: str
    description: str

    @classmethod
    def of(cls, raw: Any) -> StoredBaseline | None:
        if not isinstance(raw, Mapping):
            return None
        value = _number(raw.get("value"))
        measure, description = _text(raw, "measure"), _text(raw, "description")
        return cls(math.nan if value is None else value, measure, description)

    def as_dict(self) -> dict[str, Any]:
        return {"value": self.value, "measure": self.measure, "description": self.description}


@dataclass(frozen=True)
class StudyLaunch:
    """The study attributes a launch writes (every one but the stop request)."""

    spec_text: str
    spec_source: str
    spec_hash: str
    spec_data: dict[str, Any]
    task: str
    task_description: str
    baseline: StoredBaseline | None
    objective: str
    metric_name: str
    budget: int
    workers: int

    def as_attrs(self) -> dict[str, Any]:
        return {
            "spec_text": self.spec_text,
            "spec_source": self.spec_source,
            "spec_hash": self.spec_hash,
            "spec_data": json.dumps(self.spec_data, sort_keys=True, default=str),
            "task": self.task,
            "task_description": self.task_description,
            "baseline": None if self.baseline is None else self.baseline.as_dict(),
            "objective": self.objective,
            "metric_name": self.metric_name,
            "budget": self.budget,
            "workers": self.workers,
        }


def write_launch(study: optuna.Study, launch: StudyLaunch) -> None:
    for key, value in launch.as_attrs().items():
        study.set_user_attr(key, value)


def record_choice(study: optuna.Study, choice: Mapping[str, Any] | None) -> None:
    """The confirmed choice as plain numbers (``sweeper.results.choice``), or none."""
    study.set_user_attr(CHOICE, None if choice is None else dict(choice))


def set_stop_request(study: optuna.Study, reason: str | None) -> None:
    """Ask every worker of the study to stop (``None``: withdraw the request)."""
    study.set_user_attr(STOP_REQUEST, reason)


@dataclass(frozen=True)
class StudyInfo:
    """Typed access to a study's stored attributes, with the defaults of a study that lacks
    them (one made by plain optuna, or by an older sweeper)."""

    attrs: Mapping[str, Any]

    @classmethod
    def of(cls, study: optuna.Study) -> StudyInfo:
        """As stored right now (read-only; nothing is copied)."""
        return cls(study_user_attrs(study))

    @property
    def spec_text(self) -> str | None:
        value = self.attrs.get("spec_text")
        return value if isinstance(value, str) else None

    @property
    def spec_source(self) -> str:
        return _text(self.attrs, "spec_source")

    @property
    def spec_hash(self) -> str | None:
        value = self.attrs.get("spec_hash")
        return None if value is None else str(value)

    @property
    def spec_data(self) -> dict[str, Any]:
        return json.loads(self.attrs.get("spec_data", "{}"))

    @property
    def task(self) -> str:
        return _text(self.attrs, "task")

    @property
    def task_description(self) -> str:
        return _text(self.attrs, "task_description")

    @property
    def baseline(self) -> StoredBaseline | None:
        return StoredBaseline.of(self.attrs.get("baseline"))

    @property
    def objective(self) -> str:
        return _text(self.attrs, "objective", "value")

    @property
    def metric_name(self) -> str:
        return _text(self.attrs, "metric_name")

    @property
    def budget(self) -> int | None:
        return _int(self.attrs.get("budget"))

    @property
    def workers(self) -> int | None:
        return _int(self.attrs.get("workers"))

    @property
    def stop_request(self) -> str | None:
        reason = self.attrs.get(STOP_REQUEST)
        return reason if isinstance(reason, str) else None

    @property
    def choice(self) -> dict[str, Any] | None:
        raw = self.attrs.get(CHOICE)
        return dict(raw) if isinstance(raw, Mapping) else None


@dataclass(frozen=True)
class StoredFailure:
    """What a failed trial raised."""

    kind: str
    message: str
    traceback: str

    @classmethod
    def of(cls, raw: Any) -> StoredFailure | None:
        if not isinstance(raw, Mapping):
            return None
        return cls(_text(raw, "type"), _text(raw, "message"), _text(raw, "traceback"))

    def as_dict(self) -> dict[str, str]:
        return {"type": self.kind, "message": self.message, "traceback": self.traceback}


@dataclass(frozen=True)
class TrialInfo:
    """Typed access to a trial's stored attributes (a finished or a running trial)."""

    number: int
    user: Mapping[str, Any]
    system: Mapping[str, Any]

    @classmethod
    def of(cls, trial: FrozenTrial) -> TrialInfo:
        return cls(trial.number, trial.user_attrs, trial.system_attrs)

    @classmethod
    def live(cls, trial: optuna.Trial) -> TrialInfo:
        """A running trial's attributes as stored now (one read: a live trial does not
        carry its system attributes)."""
        return cls.of(frozen_copy(trial))

    @property
    def seed(self) -> int | None:
        return _int(self.user.get("seed"))

    @property
    def worker(self) -> str:
        return _text(self.user, "worker")

    @property
    def threads(self) -> int | None:
        return _int(self.user.get("threads"))

    @property
    def training(self) -> dict[str, Any] | None:
        raw = self.user.get("training")
        return dict(raw) if isinstance(raw, Mapping) else None

    @property
    def trainer(self) -> str | None:
        """The numerics revision it trained with; ``None`` when it recorded none."""
        value = self.user.get("trainer")
        return value if isinstance(value, str) else None

    @property
    def epochs(self) -> int | None:
        return _int(self.user.get("epochs"))

    @property
    def score_epoch(self) -> int | None:
        return _int(self.user.get("score_epoch"))

    @property
    def compute_seconds(self) -> float | None:
        return _number(self.user.get("compute_seconds"))

    @property
    def wall_seconds(self) -> float | None:
        return _number(self.user.get("wall_seconds"))

    @property
    def end_reason(self) -> str | None:
        value = self.user.get("end_reason")
        return None if value is None else str(value)

    @property
    def diverged(self) -> bool:
        return bool(self.user.get("diverged", False))

    @property
    def failure(self) -> StoredFailure | None:
        return StoredFailure.of(self.user.get("failure"))

    @property
    def interrupted(self) -> bool:
        return bool(self.user.get("interrupted", False))

    @property
    def retry_of(self) -> int | None:
        return _int(self.user.get("retry_of"))

    @property
    def resumed_from_epoch(self) -> int | None:
        return _int(self.user.get("resumed_from_epoch"))

    @property
    def confirms(self) -> int | None:
        """The searched trial a confirmation trial repeats; None for a searched trial."""
        return _int(self.user.get(CONFIRMS))

    @property
    def confirm_round(self) -> int | None:
        return _int(self.user.get(CONFIRM_ROUND))

    @property
    def is_confirmation(self) -> bool:
        return self.confirms is not None

    @property
    def draw(self) -> tuple[int, int] | None:
        """``(stream, redraws)`` of the drawn configuration, when one was recorded."""
        raw = self.user.get("draw")
        if not isinstance(raw, Mapping):
            return None
        stream, redraws = _int(raw.get("stream")), _int(raw.get("redraws"))
        return None if stream is None or redraws is None else (stream, redraws)

    @property
    def failed_trial(self) -> int | None:
        """The trial this one retries or continues, as optuna's retry records it."""
        value = self.system.get("failed_trial")
        return None if value is None else int(value)

    @property
    def origin(self) -> int:
        """The trial whose seed and checkpoint this one uses: the one it stands for, or itself."""
        failed = self.failed_trial
        return self.number if failed is None else failed

    @property
    def retry_history(self) -> tuple[int, ...]:
        return tuple(int(number) for number in self.system.get("retry_history", ()))

    @property
    def fixed_params(self) -> dict[str, Any] | None:
        raw = self.system.get("fixed_params")
        return dict(raw) if isinstance(raw, Mapping) else None


def continuation_system_attrs(interrupted: TrialInfo) -> dict[str, Any]:
    """System attributes of a trial queued to continue ``interrupted``, as optuna's heartbeat
    retry writes them, so that it loads the same checkpoint."""
    return {
        "failed_trial": interrupted.origin,
        "retry_history": [*interrupted.retry_history, interrupted.number],
        "continues_interrupted": interrupted.number,
    }


def confirmation_user_attrs(searched: int, round_: int) -> dict[str, int]:
    """User attributes a confirmation trial is queued with."""
    return {CONFIRMS: searched, CONFIRM_ROUND: round_}


def continuation_user_attrs(interrupted: TrialInfo) -> dict[str, int]:
    """User attributes a continuation keeps from the trial it continues (a confirmation
    trial stays one, with the same seed)."""
    searched, round_ = interrupted.confirms, interrupted.confirm_round
    if searched is None or round_ is None:
        return {}
    return confirmation_user_attrs(searched, round_)


def record_start(trial: optuna.Trial, seed: int, worker: str, origin: int) -> None:
    """What a trial records before it trains: its seed, its worker and the trial it stands for."""
    if origin != trial.number:
        trial.set_user_attr("retry_of", origin)
    trial.set_user_attr("seed", seed)
    trial.set_user_attr("worker", worker)


def record_draw(trial: optuna.Trial, stream: int, redraws: int) -> None:
    trial.set_user_attr("draw", {"stream": stream, "redraws": redraws})


def record_training(
    trial: optuna.Trial, training: Mapping[str, Any], threads: int, trainer: str
) -> None:
    """What replay needs: the parameters, the thread count and the numerics revision."""
    trial.set_user_attr("training", dict(training))
    trial.set_user_attr("threads", threads)
    trial.set_user_attr("trainer", trainer)


def record_resumed(trial: optuna.Trial, epoch: int) -> None:
    trial.set_user_attr("resumed_from_epoch", epoch)


def record_progress(trial: optuna.Trial, epochs: int, compute_seconds: float | None = None) -> None:
    """Epochs recorded so far, and (for a trained trial) the compute they took."""
    trial.set_user_attr("epochs", epochs)
    if compute_seconds is not None:
        trial.set_user_attr("compute_seconds", compute_seconds)


def record_score_epoch(trial: optuna.Trial, epoch: int) -> None:
    trial.set_user_attr("score_epoch", epoch)


def record_end(trial: optuna.Trial, reason: str) -> None:
    trial.set_user_attr("end_reason", reason)


def record_diverged(trial: optuna.Trial, reason: str) -> None:
    trial.set_user_attr("diverged", True)
    record_end(trial, reason)


def record_interrupted(trial: optuna.Trial, epoch: int) -> None:
    trial.set_user_attr("interrupted", True)
    record_end(trial, f"interrupted in epoch {epoch}; continues on resume")


def record_failure(trial: optuna.Trial, failure: StoredFailure) -> None:
    trial.set_user_attr("failure", failure.as_dict())
    record_end(trial, f"failed: {failure.kind}: {failure.message}")


def record_wall_seconds(trial: optuna.Trial, seconds: float) -> None:
    """The trial's seconds in its worker; its compute too when it recorded none (a plugin)."""
    trial.set_user_attr("wall_seconds", seconds)
    if "compute_seconds" not in trial.user_attrs:
        trial.set_user_attr("compute_seconds", seconds)
