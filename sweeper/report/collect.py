"""Read a study once into flat tables; every figure and export is a function of these tables.

Every string that comes out of the storage passes through ``redact`` here, so no later stage
can leak a storage password; escaping for HTML happens at render time.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any, Literal

import numpy as np
import optuna
import sqlalchemy as sa
from optuna.distributions import (
    BaseDistribution,
    CategoricalDistribution,
    FloatDistribution,
    IntDistribution,
)
from optuna.trial import FrozenTrial

from sweeper.errors import InputError, StorageFailure, StudyNotFound
from sweeper.store.attrs import StoredBaseline, StoredFailure, StudyInfo, TrialInfo
from sweeper.store.connect import open_storage, redact
from sweeper.store.epoch_rows import read_epochs
from sweeper.store.tables import EPOCHS
from sweeper.store.trial_words import trial_word
from sweeper.training.epoch_record import EPOCH_FIELDS

STATES = ("COMPLETE", "PRUNED", "FAIL", "RUNNING", "WAITING")
ParamKind = Literal["float", "int", "categorical"]


@dataclass(frozen=True)
class Baseline:
    """The task's trivial-strategy score; ``measure`` names the comparable recorded value."""

    value: float
    measure: str
    description: str


@dataclass(frozen=True)
class StudySummary:
    name: str
    location: str  # redacted
    direction: Literal["minimize", "maximize"]
    objective: str
    metric_name: str
    task: str
    task_description: str
    baseline: Baseline | None
    budget: int | None
    workers_planned: int | None
    spec_text: str
    spec_hash: str
    spec_source: str = ""  # the spec file's absolute path: relative data paths start there
    choice: dict[str, Any] | None = None  # the confirmed choice stored when a sweep ended


@dataclass(frozen=True)
class Failure:
    kind: str
    message: str
    traceback: str


@dataclass(frozen=True)
class TrialRow:
    """One trial, flattened. ``value`` is NaN when the trial has none."""

    number: int
    state: str  # optuna's state name; show ``word`` instead
    word: str  # the state in our words (store.trial_words)
    value: float
    params: dict[str, Any]
    distributions: dict[str, BaseDistribution]
    epochs: int
    seconds: float
    worker: str
    start: datetime | None
    end: datetime | None
    end_reason: str
    diverged: bool
    failure: Failure | None
    retry_of: int | None
    seed: int | None
    clip: float  # NaN when unknown; 0 means clipping off
    lr: float
    unroll: float  # truncated-BPTT window in steps; NaN when unknown
    curve: tuple[tuple[int, float], ...]  # (step, objective) as reported per epoch
    confirms: int | None = None  # a confirmation trial: the searched trial it repeats

    @property
    def finished(self) -> bool:
        return self.state in ("COMPLETE", "PRUNED", "FAIL")


@dataclass(frozen=True)
class ParamInfo:
    """A searched parameter as the trials saw it."""

    name: str
    kind: ParamKind
    log: bool
    choices: tuple[Any, ...]  # categorical only
    distinct: int  # distinct values among the trials that set it

    @property
    def varies(self) -> bool:
        return self.distinct > 1


@dataclass(frozen=True)
class StudyTables:
    summary: StudySummary
    trials: tuple[TrialRow, ...]
    params: tuple[ParamInfo, ...]
    epochs: tuple[dict[str, Any], ...]  # rows of sweeper_epochs, NaN where not finite
    series: dict[int, dict[str, np.ndarray]] = field(default_factory=dict)

    def completed(self) -> list[TrialRow]:
        """Completed trials with a finite value."""
        return [t for t in self.trials if t.state == "COMPLETE" and math.isfinite(t.value)]

    def count(self, state: str) -> int:
        return sum(1 for t in self.trials if t.state == state)


def read_study(location: str, study_name: str | None = None) -> StudyTables:
    """Open the storage read-only, pick the study and read everything the summary needs."""
    storage = open_storage(location, create=False, read_only=True)
    try:
        return _read(storage, location, study_name)
    except sa.exc.SQLAlchemyError as error:
        raise StorageFailure(f"cannot read {redact(location)}: {redact(str(error))}") from None
    finally:
        storage.engine.dispose()


def _read(
    storage: optuna.storages.RDBStorage, location: str, study_name: str | None
) -> StudyTables:
    name = pick_study(storage, study_name, location)
    study = optuna.load_study(study_name=name, storage=storage)
    if len(study.directions) != 1:
        raise InputError(f"study {redact(name)!r} has several objectives; the summary needs one")
    maximize = study.direction == optuna.study.StudyDirection.MAXIMIZE
    direction: Literal["minimize", "maximize"] = "maximize" if maximize else "minimize"
    trials = study.get_trials(deepcopy=False)
    epochs = _read_epoch_rows(storage.engine, name)
    return build_tables(name, redact(location), direction, study.user_attrs, trials, epochs)


def pick_study(storage: optuna.storages.BaseStorage, study_name: str | None, location: str) -> str:
    names = optuna.study.get_all_study_names(storage)
    where = redact(location)
    if study_name is not None:
        if study_name not in names:
            listed = redact(", ".join(sorted(names))) or "none"
            wanted = redact(repr(study_name))
            raise StudyNotFound(f"{where}: no study named {wanted} (studies here: {listed})")
        return study_name
    if not names:
        raise StudyNotFound(f"{where}: the storage holds no study yet")
    if len(names) > 1:
        listed = redact(", ".join(sorted(names)))
        raise InputError(f"{where}: holds {len(names)} studies ({listed}); name the one to read")
    return names[0]


def _read_epoch_rows(engine: sa.Engine, study_name: str) -> list[dict[str, Any]]:
    # A study written by plain optuna has no telemetry table; that is not an error.
    if not sa.inspect(engine).has_table(EPOCHS.name):
        return []
    return read_epochs(engine, study_name)


def build_tables(
    name: str,
    location: str,
    direction: Literal["minimize", "maximize"],
    attrs: Mapping[str, Any],
    trials: Sequence[FrozenTrial],
    epochs: Iterable[Mapping[str, Any]],
) -> StudyTables:
    """The pure half of ``read_study``: turn optuna objects and epoch rows into tables."""
    rows = tuple(_trial_row(trial) for trial in sorted(trials, key=lambda t: t.number))
    epoch_rows = tuple(_epoch_row(row) for row in epochs)
    return StudyTables(
        summary=_summary(redact(name), location, direction, attrs),
        trials=rows,
        params=_param_infos(rows),
        epochs=epoch_rows,
        series=_series(epoch_rows),
    )


def _summary(
    name: str, location: str, direction: Literal["minimize", "maximize"], attrs: Mapping[str, Any]
) -> StudySummary:
    info = StudyInfo(attrs)
    return StudySummary(
        name=name,
        location=location,
        direction=direction,
        objective=_text(info.objective),
        metric_name=_text(info.metric_name),
        task=_text(info.task),
        task_description=_text(info.task_description),
        baseline=_baseline(info.baseline),
        budget=info.budget,
        workers_planned=info.workers,
        spec_text=_text(info.spec_text),
        spec_hash=_text(info.spec_hash),
        spec_source=info.spec_source,
        choice=info.choice,
    )


def _baseline(stored: StoredBaseline | None) -> Baseline | None:
    if stored is None or not math.isfinite(stored.value):
        return None
    return Baseline(stored.value, _text(stored.measure), _text(stored.description))


def _trial_row(trial: FrozenTrial) -> TrialRow:
    info = TrialInfo.of(trial)
    training = info.training or {}
    start, end = trial.datetime_start, trial.datetime_complete
    seconds = math.nan if info.compute_seconds is None else info.compute_seconds
    if not math.isfinite(seconds) and start is not None and end is not None:
        seconds = (end - start).total_seconds()
    return TrialRow(
        number=trial.number,
        state=trial.state.name,
        word=trial_word(trial),
        value=_float(trial.value),
        params={_text(k): _param_value(v) for k, v in trial.params.items()},
        distributions={_text(k): _redacted(v) for k, v in trial.distributions.items()},
        epochs=info.epochs or len(trial.intermediate_values),
        seconds=seconds,
        worker=_text(info.worker),
        start=start,
        end=end,
        end_reason=_text(info.end_reason),
        diverged=info.diverged,
        failure=_failure(info.failure),
        retry_of=info.retry_of,
        seed=info.seed,
        clip=_float(trial.params.get("clip", training.get("clip"))),
        lr=_float(trial.params.get("lr", training.get("lr"))),
        unroll=_float(trial.params.get("unroll", training.get("unroll"))),
        curve=tuple(sorted((int(k), _float(v)) for k, v in trial.intermediate_values.items())),
        confirms=info.confirms,
    )


def _failure(stored: StoredFailure | None) -> Failure | None:
    if stored is None:
        return None
    return Failure(_text(stored.kind), _text(stored.message), _text(stored.traceback))


def _param_infos(rows: Sequence[TrialRow]) -> tuple[ParamInfo, ...]:
    """One entry per parameter name, described by the distribution its latest trial used."""
    latest: dict[str, BaseDistribution] = {}
    values: dict[str, set[str]] = {}
    for row in rows:
        for name, dist in row.distributions.items():
            latest[name] = dist
            values.setdefault(name, set()).add(repr(row.params.get(name)))
    return tuple(_param_info(name, latest[name], len(values[name])) for name in sorted(latest))


def _param_info(name: str, dist: BaseDistribution, distinct: int) -> ParamInfo:
    if isinstance(dist, CategoricalDistribution):
        choices = tuple(_param_value(c) for c in dist.choices)
        return ParamInfo(name, "categorical", False, choices, distinct)
    kind: ParamKind = "int" if isinstance(dist, IntDistribution) else "float"
    log = isinstance(dist, (IntDistribution, FloatDistribution)) and bool(dist.log)
    return ParamInfo(name, kind, log, (), distinct)


def _epoch_row(row: Mapping[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {"trial_number": int(row["trial_number"])}
    for key in EPOCH_FIELDS:
        value = row.get(key)
        out[key] = math.nan if value is None else value
    return out


def _series(rows: Sequence[Mapping[str, Any]]) -> dict[int, dict[str, np.ndarray]]:
    """Per trial, each epoch column as a float array ordered by epoch."""
    grouped: dict[int, list[Mapping[str, Any]]] = {}
    for row in rows:
        grouped.setdefault(int(row["trial_number"]), []).append(row)
    series: dict[int, dict[str, np.ndarray]] = {}
    for number, group in grouped.items():
        group.sort(key=lambda r: r["epoch"])
        series[number] = {
            key: np.array([_float(r[key]) for r in group], dtype=np.float64) for key in EPOCH_FIELDS
        }
    return series


def _redacted(dist: BaseDistribution) -> BaseDistribution:
    # Choices pass through redact like the values, so that a value stays one of its choices.
    if isinstance(dist, CategoricalDistribution):
        return CategoricalDistribution([_param_value(c) for c in dist.choices])
    return dist


def _param_value(value: Any) -> Any:
    return redact(value) if isinstance(value, str) else value


def _text(value: Any) -> str:
    return redact("" if value is None else str(value))


def _float(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.number)):
        return math.nan
    return float(value)
