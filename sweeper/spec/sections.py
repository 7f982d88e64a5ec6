"""Sweep spec files: TOML into frozen dataclasses; every error says file: key: what to do."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sweeper.did_you_mean import closest
from sweeper.errors import SpecError
from sweeper.spec.space import SearchEntry, grid_points, parse_search
from sweeper.tasks.section import TaskSection, task_section
from sweeper.training.params import PARAM_NAMES, TrialParams

BETTER = ("lower", "higher")  # which way a value is better
CHOSEN_HINT = "; leave the key out to have it chosen from the budget and the epochs"
OBJECTIVES = ("valid_loss", "valid_metric")
SAMPLERS = ("tpe", "random", "sobol", "grid", "cmaes")
RULES = ("auto", "none", "median", "asha", "hyperband")
SCORES = ("best_epoch", "last_epoch", "recent_mean")  # what a trial's value is made of
# Keys that may differ between launches of one study (everything else must match).
MUTABLE_KEYS = (
    "study.trials",
    "study.compute_hours",
    "study.workers",
    "study.storage",
    "study.heartbeat",
    # confirmation runs after the search and never changes a searched trial
    "confirm.configurations",
    "confirm.seeds",
)


class SectionError(SpecError):
    """A section's rule broken, raised by the section's dataclass, which knows no file name.

    ``str()`` is ``key: message``; reading a spec file re-raises it as a SpecError that names
    the file (``in_file``).
    """

    def __init__(self, key: str, message: str) -> None:
        super().__init__("", key, message)
        self.args = (f"{key}: {message}",)

    def in_file(self, source: str) -> SpecError:
        return SpecError(source, self.key, self.message)


@dataclass(frozen=True)
class StudySection:
    name: str
    trials: int = 20
    compute_hours: float = 0.0  # a second budget: total compute of the trials; 0 = none
    workers: int = 1
    seed: int = 0
    better: str = "lower"
    objective: str = "valid_loss"
    score: str = "last_epoch"  # benchmarks/score_choice.py chose this default (docs/benchmarks.md)
    recent_epochs: int = 3  # epochs averaged by score = "recent_mean"
    sampler: str = "tpe"
    storage: str = ""
    max_failures: int = 5
    max_retries: int = 2
    heartbeat: int = 10  # seconds; a trial silent for 3 heartbeats is taken as dead
    keep_best_checkpoint: bool = False

    def __post_init__(self) -> None:
        _check_field_types(self, "study")
        if not self.name.strip():
            raise SectionError("study.name", "must not be empty")
        _require_choice("study.better", self.better, BETTER)
        _require_choice("study.objective", self.objective, OBJECTIVES)
        _require_choice("study.score", self.score, SCORES)
        _require_min("study.recent_epochs", self.recent_epochs, 1)
        _require_choice("study.sampler", self.sampler, SAMPLERS)
        _require_min("study.trials", self.trials, 1)
        _require_min("study.workers", self.workers, 1)
        _require_min("study.max_failures", self.max_failures, 1)
        _require_min("study.max_retries", self.max_retries, 0)
        _require_min("study.heartbeat", self.heartbeat, 1)
        hours = self.compute_hours
        if not (math.isfinite(hours) and hours >= 0):
            fix = f"must be a number of hours >= 0 (0 = no compute limit), got {hours}"
            raise SectionError("study.compute_hours", fix)


@dataclass(frozen=True)
class TrainingSection:
    epochs: int = 5
    threads: int = 0  # torch threads per worker; 0 = cores / workers
    defaults: dict[str, Any] = field(default_factory=dict)  # fixed TrialParams values

    def __post_init__(self) -> None:
        _check_keys("training.", self.defaults, PARAM_NAMES)
        _check_field_types(self, "training", skip=("defaults",))
        _require_min("training.epochs", self.epochs, 1)
        _require_min("training.threads", self.threads, 0)
        object.__setattr__(self, "defaults", _checked_defaults(self.defaults))


@dataclass(frozen=True)
class StoppingSection:
    # "auto" and 0: chosen from the budget and the epochs (sweeper/spec/schedule.py)
    rule: str = "auto"
    min_epochs: int = 0
    reduction: int = 0
    warmup_trials: int = 4
    patience: int = 0  # epochs without improvement tolerated before the rule may stop a trial

    def __post_init__(self) -> None:
        _check_field_types(self, "stopping")
        _require_choice("stopping.rule", self.rule, RULES)
        if self.min_epochs != 0:  # 0: leave it to the budget
            _require_min("stopping.min_epochs", self.min_epochs, 1, CHOSEN_HINT)
        if self.reduction != 0:
            _require_min("stopping.reduction", self.reduction, 2, CHOSEN_HINT)
        _require_min("stopping.warmup_trials", self.warmup_trials, 0)
        _require_min("stopping.patience", self.patience, 0)


@dataclass(frozen=True)
class ConfirmSection:
    """After the search: the best ``configurations`` trained again with ``seeds`` fresh seeds
    each (0 configurations: no confirmation)."""

    configurations: int = 3
    # one fresh seed beside the searched trial's: benchmarks/selection.py (docs/benchmarks.md)
    seeds: int = 1

    def __post_init__(self) -> None:
        _check_field_types(self, "confirm")
        _require_min("confirm.configurations", self.configurations, 0)
        _require_min("confirm.seeds", self.seeds, 1)

    @property
    def enabled(self) -> bool:
        return self.configurations > 0


@dataclass(frozen=True)
class Spec:
    source: str
    text: str
    study: StudySection
    task: TaskSection
    training: TrainingSection
    search: dict[str, SearchEntry]
    stopping: StoppingSection
    confirm: ConfirmSection = field(default_factory=lambda: ConfirmSection())
    # the settings a command line set for this launch (``with_overrides``), not the file
    overrides: frozenset[str] = frozenset()

    @property
    def is_objective_plugin(self) -> bool:
        return self.task.is_objective

    @property
    def base_dir(self) -> Path:
        return Path(self.source).parent if self.source else Path.cwd()

    @property
    def storage_location(self) -> str:
        """Where the study is stored. A path in the spec (and the default) is relative to the
        spec's folder, as ``task.file`` is; one from the command line is relative to the
        current folder, as a shell user expects; a URL is used as written."""
        location = self.study.storage or f"runs/{self.study.name}.db"
        if "://" in location or "storage" in self.overrides or not self.source:
            return location
        path = Path(location).expanduser()
        return str(path if path.is_absolute() else self.base_dir / path)

    def canonical(self) -> dict[str, Any]:
        """The parsed spec as plain data: what two launches of one study must agree on."""
        study = dataclasses.asdict(self.study)
        # The digest predates the key's rename: it keeps the earlier key and words, so
        # studies made before the rename continue.
        study["goal"] = "minimize" if study.pop("better") == "lower" else "maximize"
        return {
            "study": study,
            "task": self.task.table(),
            "training": dataclasses.asdict(self.training),
            "search": {name: entry.describe() for name, entry in sorted(self.search.items())},
            "stopping": dataclasses.asdict(self.stopping),
            "confirm": dataclasses.asdict(self.confirm),
        }

    def digest(self) -> str:
        data = self.canonical()
        for key in MUTABLE_KEYS:
            section, name = key.split(".")
            data[section].pop(name, None)
        _as_before_scores(data)
        if not data["confirm"]:  # every key mutable: digests of older studies still match
            del data["confirm"]
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
        study = dataclasses.replace(self.study, **changes)
        return dataclasses.replace(self, study=study, overrides=self.overrides | set(changes))


def renamed_keys_upgraded(text: str) -> str:
    """A stored spec's text with the study key's earlier name (``goal = "minimize"``) written
    in today's words, so that a study made before the rename still resumes."""
    words = {"minimize": "lower", "maximize": "higher"}
    return re.sub(
        r'^(\s*)goal(\s*=\s*)"(minimize|maximize)"',
        lambda m: f'{m.group(1)}better{m.group(2)}"{words[m.group(3)]}"',
        text,
        flags=re.MULTILINE,
    )


# Keys added after studies stored their digests, with the value a spec that leaves them out
# gets; left out of the digest at that value, so an existing study's spec still matches.
ADDED_KEYS = {"study": {"score": "last_epoch", "recent_epochs": 3}}
# Stopping keys now chosen from the budget when left out: the digest holds the fixed values
# they had before, so that existing studies continue.
CHOSEN_BEFORE = {"rule": ("auto", "asha"), "min_epochs": (0, 1), "reduction": (0, 3)}


def _as_before_scores(data: dict[str, Any]) -> None:
    for section, added in ADDED_KEYS.items():
        for key, default in added.items():
            if data[section].get(key) == default:
                del data[section][key]
    stopping = data["stopping"]
    for key, (chosen, before) in CHOSEN_BEFORE.items():
        if stopping[key] == chosen:
            stopping[key] = before


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
    try:
        return _spec_from_tables(data, text, source)
    except SectionError as error:
        raise error.in_file(source) from None


def _spec_from_tables(data: Mapping[str, Any], text: str, source: str) -> Spec:
    _check_keys("", data, ("study", "task", "training", "search", "stopping", "confirm"))
    for section in ("study", "task"):
        if section not in data:
            raise SectionError(section, f"missing section; add a [{section}] table")
    for name, value in data.items():
        if not isinstance(value, dict):
            raise SectionError(name, f"must be a table ([{name}]), got {_kind(value)}")
    study = _parse_study(data["study"])
    training = _parse_training(data.get("training", {}))
    search = parse_search(source, data.get("search", {}))
    stopping = _section("stopping", StoppingSection, data.get("stopping", {}))
    confirm = _section("confirm", ConfirmSection, data.get("confirm", {}))
    task = task_section(data["task"], source)
    return Spec(source, text, study, task, training, search, stopping, confirm)


def _kind(value: Any) -> str:
    return {bool: "a boolean", int: "an integer", float: "a number", str: "a string"}.get(
        type(value), "a list" if isinstance(value, list) else "a table"
    )


def _check_keys(prefix: str, table: Mapping[str, Any], allowed: tuple[str, ...]) -> None:
    for key in table:
        if key not in allowed:
            hint = closest(key, allowed)
            fix = f"did you mean '{hint}'?" if hint else f"valid keys: {', '.join(allowed)}"
            raise SectionError(f"{prefix}{key}", f"unknown key; {fix}")


def _field_value(key: str, value: Any, default: Any) -> Any:
    """``value`` if it has the type of ``default``; a whole number is taken as a float."""
    expected = type(default)
    if expected is float and isinstance(value, int) and not isinstance(value, bool):
        return float(value)
    if isinstance(value, bool) != isinstance(default, bool) or not isinstance(value, expected):
        raise SectionError(key, f"must be {_kind(default)}, got {_kind(value)} {value!r}")
    return value


def _check_field_types(section: Any, name: str, skip: tuple[str, ...] = ()) -> None:
    """Each field of a frozen section has its default's type (a field without one: text)."""
    for item in dataclasses.fields(section):
        if item.name in skip:
            continue
        default = "" if item.default is dataclasses.MISSING else item.default
        value = getattr(section, item.name)
        checked = _field_value(f"{name}.{item.name}", value, default)
        object.__setattr__(section, item.name, checked)  # frozen: widen an int in place


def _checked_defaults(defaults: Mapping[str, Any]) -> dict[str, Any]:
    """Fixed training values, each of its TrialParams type and within its rules."""
    reference = TrialParams()
    checked: dict[str, Any] = {}
    for key, value in defaults.items():
        value = _field_value(f"training.{key}", value, getattr(reference, key))
        try:
            TrialParams.from_mapping({key: value})
        except ValueError as error:
            raise SectionError(f"training.{key}", str(error)) from None
        checked[key] = value
    return checked


def _section(name: str, cls: Any, table: Mapping[str, Any], **fixed: Any) -> Any:
    allowed = tuple(f.name for f in dataclasses.fields(cls) if f.name not in fixed)
    _check_keys(f"{name}.", table, allowed)
    return cls(**fixed, **table)


def _require_choice(key: str, value: str, allowed: tuple[str, ...]) -> None:
    if value not in allowed:
        hint = closest(value, allowed)
        extra = f"; did you mean '{hint}'?" if hint else ""
        raise SectionError(key, f"must be one of {', '.join(allowed)}, got {value!r}{extra}")


def _require_min(key: str, value: int, low: int, hint: str = "") -> None:
    if value < low:
        raise SectionError(key, f"must be at least {low}, got {value}{hint}")


def _parse_study(table: Mapping[str, Any]) -> StudySection:
    if "name" not in table:
        raise SectionError("study.name", "missing; give the study a name")
    return _section("study", StudySection, table)


def _parse_training(table: Mapping[str, Any]) -> TrainingSection:
    own = {key: value for key, value in table.items() if key in ("epochs", "threads")}
    defaults = {key: value for key, value in table.items() if key not in own}
    return _section("training", TrainingSection, own, defaults=defaults)


def budget_of(spec: Spec) -> int:
    """Trials the study runs: the spec's budget, or fewer when a grid has fewer points."""
    if spec.study.sampler == "grid":
        points = grid_points(spec.search) or []
        return min(spec.study.trials, len(points))
    return spec.study.trials
