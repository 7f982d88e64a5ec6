"""Sweep spec files: TOML into frozen dataclasses; every error says file: key: what to do."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sweeper.errors import SpecError
from sweeper.did_you_mean import closest
from sweeper.spec.space import SearchEntry, grid_points, parse_search
from sweeper.training.params import PARAM_NAMES, TrialParams

GOALS = ("minimize", "maximize")
OBJECTIVES = ("valid_loss", "valid_metric")
SAMPLERS = ("tpe", "random", "sobol", "grid", "cmaes")
RULES = ("none", "median", "asha", "hyperband")
# Keys that may differ between launches of one study (everything else must match).
MUTABLE_KEYS = (
    "study.trials",
    "study.compute_hours",
    "study.workers",
    "study.storage",
    "study.heartbeat",
)


@dataclass(frozen=True)
class StudySection:
    name: str
    trials: int = 20
    compute_hours: float = 0.0  # a second budget: total compute of the trials; 0 = none
    workers: int = 1
    seed: int = 0
    goal: str = "minimize"
    objective: str = "valid_loss"
    sampler: str = "tpe"
    storage: str = ""
    max_failures: int = 5
    max_retries: int = 2
    heartbeat: int = 10  # seconds; a trial silent for 3 heartbeats is taken as dead
    keep_best_checkpoint: bool = False


@dataclass(frozen=True)
class TrainingSection:
    epochs: int = 5
    threads: int = 0  # torch threads per worker; 0 = cores / workers
    defaults: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class StoppingSection:
    rule: str = "asha"  # benchmarks/search_efficiency.py measures this default
    min_epochs: int = 1
    reduction: int = 3
    warmup_trials: int = 4
    patience: int = 0  # epochs without improvement tolerated before the rule may stop a trial


@dataclass(frozen=True)
class Spec:
    source: str
    text: str
    study: StudySection
    task: dict[str, Any]
    training: TrainingSection
    search: dict[str, SearchEntry]
    stopping: StoppingSection

    @property
    def is_objective_plugin(self) -> bool:
        return self.task.get("kind") == "objective"

    @property
    def base_dir(self) -> Path:
        return Path(self.source).parent if self.source else Path.cwd()

    @property
    def storage_location(self) -> str:
        return self.study.storage or f"runs/{self.study.name}.db"

    def canonical(self) -> dict[str, Any]:
        """The parsed spec as plain data: what two launches of one study must agree on."""
        return {
            "study": dataclasses.asdict(self.study),
            "task": self.task,
            "training": dataclasses.asdict(self.training),
            "search": {name: entry.describe() for name, entry in sorted(self.search.items())},
            "stopping": dataclasses.asdict(self.stopping),
        }

    def digest(self) -> str:
        data = self.canonical()
        for key in MUTABLE_KEYS:
            section, name = key.split(".")
            data[section].pop(name, None)
        text = json.dumps(data, sort_keys=True, default=str)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()

    def with_overrides(
        self, trials: int | None = None, workers: int | None = None, storage: str | None = None
    ) -> Spec:
        changes: dict[str, Any] = {}
        if trials is not None:
            changes["trials"] = _positive(self.source, "--trials", trials)
        if workers is not None:
            changes["workers"] = _positive(self.source, "--workers", workers)
        if storage is not None:
            changes["storage"] = storage
        return dataclasses.replace(self, study=dataclasses.replace(self.study, **changes))


def _positive(source: str, key: str, value: int) -> int:
    if value < 1:
        raise SpecError(source, key, f"must be at least 1, got {value}")
    return value


def spec_from_text(text: str, source: str) -> Spec:
    """Every section of a spec's TOML text, each checked on its own."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise SpecError(source, "", f"not valid TOML: {error}") from None
    _check_keys(source, "", data, ("study", "task", "training", "search", "stopping"))
    for section in ("study", "task"):
        if section not in data:
            raise SpecError(source, section, f"missing section; add a [{section}] table")
    for name, value in data.items():
        if not isinstance(value, dict):
            raise SpecError(source, name, f"must be a table ([{name}]), got {_kind(value)}")
    study = _parse_study(source, data["study"])
    task = dict(data["task"])
    training = _parse_training(source, data.get("training", {}))
    search = parse_search(source, data.get("search", {}))
    stopping = _parse_stopping(source, data.get("stopping", {}))
    return Spec(source, text, study, task, training, search, stopping)


def _kind(value: Any) -> str:
    return {bool: "a boolean", int: "an integer", float: "a number", str: "a string"}.get(
        type(value), "a list" if isinstance(value, list) else "a table"
    )


def _check_keys(
    source: str, prefix: str, table: Mapping[str, Any], allowed: tuple[str, ...]
) -> None:
    for key in table:
        if key not in allowed:
            hint = closest(key, allowed)
            fix = f"did you mean '{hint}'?" if hint else f"valid keys: {', '.join(allowed)}"
            raise SpecError(source, f"{prefix}{key}", f"unknown key; {fix}")


def _field_value(source: str, key: str, value: Any, default: Any) -> Any:
    expected = type(default)
    if expected is float and isinstance(value, int) and not isinstance(value, bool):
        return float(value)
    if isinstance(value, bool) != isinstance(default, bool) or not isinstance(value, expected):
        raise SpecError(source, key, f"must be {_kind(default)}, got {_kind(value)} {value!r}")
    return value


def _section(source: str, name: str, cls: Any, table: Mapping[str, Any], **fixed: Any) -> Any:
    fields = {f.name: f for f in dataclasses.fields(cls) if f.name not in fixed}
    _check_keys(source, f"{name}.", table, tuple(fields))
    values: dict[str, Any] = {}
    for key, value in table.items():
        default = fields[key].default
        if default is dataclasses.MISSING:
            default = ""
        values[key] = _field_value(source, f"{name}.{key}", value, default)
    return cls(**fixed, **values)


def _require_choice(source: str, key: str, value: str, allowed: tuple[str, ...]) -> None:
    if value not in allowed:
        hint = closest(value, allowed)
        extra = f"; did you mean '{hint}'?" if hint else ""
        raise SpecError(source, key, f"must be one of {', '.join(allowed)}, got {value!r}{extra}")


def _require_min(source: str, key: str, value: int, low: int) -> None:
    if value < low:
        raise SpecError(source, key, f"must be at least {low}, got {value}")


def _parse_study(source: str, table: Mapping[str, Any]) -> StudySection:
    if "name" not in table:
        raise SpecError(source, "study.name", "missing; give the study a name")
    study = _section(source, "study", StudySection, table)
    if not study.name.strip():
        raise SpecError(source, "study.name", "must not be empty")
    _require_choice(source, "study.goal", study.goal, GOALS)
    _require_choice(source, "study.objective", study.objective, OBJECTIVES)
    _require_choice(source, "study.sampler", study.sampler, SAMPLERS)
    _require_min(source, "study.trials", study.trials, 1)
    _require_min(source, "study.workers", study.workers, 1)
    _require_min(source, "study.max_failures", study.max_failures, 1)
    _require_min(source, "study.max_retries", study.max_retries, 0)
    _require_min(source, "study.heartbeat", study.heartbeat, 1)
    hours = study.compute_hours
    if not (math.isfinite(hours) and hours >= 0):
        fix = f"must be a number of hours >= 0 (0 = no compute limit), got {hours}"
        raise SpecError(source, "study.compute_hours", fix)
    return study


def _parse_training(source: str, table: Mapping[str, Any]) -> TrainingSection:
    own = {key: value for key, value in table.items() if key in ("epochs", "threads")}
    defaults = {key: value for key, value in table.items() if key not in own}
    _check_keys(source, "training.", defaults, PARAM_NAMES)
    training = _section(source, "training", TrainingSection, own, defaults=defaults)
    _require_min(source, "training.epochs", training.epochs, 1)
    _require_min(source, "training.threads", training.threads, 0)
    reference = TrialParams()
    for key, value in defaults.items():
        value = _field_value(source, f"training.{key}", value, getattr(reference, key))
        try:
            TrialParams.from_mapping({key: value})
        except ValueError as error:
            raise SpecError(source, f"training.{key}", str(error)) from None
        defaults[key] = value
    return training


def _parse_stopping(source: str, table: Mapping[str, Any]) -> StoppingSection:
    stopping = _section(source, "stopping", StoppingSection, table)
    _require_choice(source, "stopping.rule", stopping.rule, RULES)
    _require_min(source, "stopping.min_epochs", stopping.min_epochs, 1)
    _require_min(source, "stopping.reduction", stopping.reduction, 2)
    _require_min(source, "stopping.warmup_trials", stopping.warmup_trials, 0)
    _require_min(source, "stopping.patience", stopping.patience, 0)
    return stopping


def budget_of(spec: Spec) -> int:
    """Trials the study runs: the spec's budget, or fewer when a grid has fewer points."""
    if spec.study.sampler == "grid":
        points = grid_points(spec.search) or []
        return min(spec.study.trials, len(points))
    return spec.study.trials
