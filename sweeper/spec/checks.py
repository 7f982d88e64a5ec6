"""Checks that need more than one section of a spec: parameters against the task and sampler."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from sweeper.errors import SpecError
from sweeper.did_you_mean import closest
from sweeper.spec.space import Choices, Fixed, Range, SearchEntry, grid_size
from sweeper.tasks.objective import load_objective
from sweeper.training.params import PARAM_NAMES, TrialParams

if TYPE_CHECKING:
    from sweeper.spec.sections import Spec
    from sweeper.tasks.base import Task

INTEGER_PARAMS = ("unroll", "hidden", "layers", "batch")
OBJECTIVE_KEYS = ("kind", "function", "path")


def check_spec_against_task(spec: Spec) -> None:
    if spec.is_objective_plugin:
        _check_objective(spec)
    else:
        _check_training_space(spec)
        _check_unroll(spec, build_spec_task(spec))
    _check_sampler(spec)


def build_spec_task(spec: Spec) -> Task:
    # here, not at the top: building a task loads torch, which reading a spec must not
    from sweeper.training.model_plugin import build_task_with_model

    if "kind" not in spec.task:
        raise SpecError(spec.source, "task.kind", 'missing; name the task (e.g. kind = "adding")')
    return build_task_with_model(spec.task, spec.base_dir, spec.source)


def _check_objective(spec: Spec) -> None:
    for key in spec.task:
        if key not in OBJECTIVE_KEYS:
            hint = closest(key, OBJECTIVE_KEYS)
            fix = f"did you mean '{hint}'?" if hint else f"valid keys: {', '.join(OBJECTIVE_KEYS)}"
            raise SpecError(spec.source, f"task.{key}", f"unknown key; {fix}")
    ref = spec.task.get("function")
    if not isinstance(ref, str):
        raise SpecError(spec.source, "task.function", 'missing; give "module:function"')
    if not spec.search:
        raise SpecError(spec.source, "search", "an objective plugin needs at least one parameter")
    load_objective(
        ref, spec.base_dir, spec.source, "task.function", path=spec.task.get("path", ".")
    )


def _entry_values(entry: SearchEntry) -> list[Any]:
    if isinstance(entry, Fixed):
        return [entry.value]
    if isinstance(entry, Choices):
        return list(entry.values)
    bounds = [entry.low, entry.high]
    return [int(b) for b in bounds] if entry.integer else bounds


def _check_training_space(spec: Spec) -> None:
    for name, entry in spec.search.items():
        key = f"search.{name}"
        if name not in PARAM_NAMES:
            hint = closest(name, PARAM_NAMES)
            fix = f"did you mean '{hint}'?" if hint else f"searchable: {', '.join(PARAM_NAMES)}"
            raise SpecError(spec.source, key, f"not a training parameter; {fix}")
        if name in spec.training.defaults:
            raise SpecError(
                spec.source, key, f"also set as training.{name}; keep it in one section only"
            )
        if name in INTEGER_PARAMS and isinstance(entry, Range) and not entry.integer:
            raise SpecError(
                spec.source, f"{key}.between", "must be whole numbers, e.g. between = [8, 64]"
            )
        for value in _entry_values(entry):
            try:
                TrialParams.from_mapping({name: value})
            except (ValueError, TypeError) as error:
                raise SpecError(spec.source, key, str(error)) from None


def _check_unroll(spec: Spec, task: Task) -> None:
    entry = spec.search.get("unroll")
    values = _entry_values(entry) if entry else [spec.training.defaults.get("unroll", 20)]
    longest = max(int(v) for v in values)
    if longest > task.length:
        key = "search.unroll" if entry else "training.unroll"
        raise SpecError(
            spec.source,
            key,
            f"unroll {longest} is longer than the task's sequences ({task.length} steps); "
            f"use at most {task.length}",
        )


def _check_sampler(spec: Spec) -> None:
    if spec.study.sampler == "grid":
        _check_grid(spec)
    elif spec.study.sampler == "cmaes":
        _check_cmaes(spec)


def _check_grid(spec: Spec) -> None:
    if grid_size(spec.search) is None:
        name = next(n for n, e in spec.search.items() if isinstance(e, Range) and e.grid() is None)
        raise SpecError(
            spec.source,
            f"search.{name}",
            "the grid sampler needs every range to have a step (or use one_of); add step = ...",
        )


def _check_cmaes(spec: Spec) -> None:
    # optuna's CmaEsSampler leaves choices to random sampling with only a log line; refuse
    # them rather than run part of the search at random unawares.
    for name, entry in spec.search.items():
        if isinstance(entry, Choices):
            raise SpecError(
                spec.source,
                f"search.{name}",
                "the cmaes sampler searches ranges only; write this as "
                '{ between = [low, high] }, fix it to one value, or use sampler = "tpe"',
            )
    if not any(isinstance(entry, Range) for entry in spec.search.values()):
        raise SpecError(
            spec.source,
            "search",
            'the cmaes sampler needs at least one range to search; add one, or use sampler = "tpe"',
        )
