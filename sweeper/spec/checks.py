"""Checks that need more than one section of a spec: parameters against the task and sampler."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sweeper.did_you_mean import closest
from sweeper.errors import SpecError
from sweeper.spec.footprint import (
    available_memory,
    describe_shortfall,
    largest_footprint,
    size_keys,
)
from sweeper.spec.space import Choices, Fixed, Range, SearchEntry, grid_size
from sweeper.tasks.objective import Objective, load_objective
from sweeper.training.params import PARAM_NAMES, TrialParams

if TYPE_CHECKING:
    from sweeper.spec.sections import Spec
    from sweeper.tasks.base import Task

INTEGER_PARAMS = ("unroll", "hidden", "layers", "batch")


def check_spec_against_task(spec: Spec) -> None:
    if spec.is_objective_plugin:
        _check_objective(spec)
    else:
        _check_training_space(spec)
        task = build_spec_task(spec)
        _check_unroll(spec, task)
        _check_footprint(spec, task)
    _check_sampler(spec)


_BUILT: dict[tuple[str, ...], Task] = {}  # the latest spec's task, by _task_key


def build_spec_task(spec: Spec) -> Task:
    """The spec's task, built once per process: the check, the launcher's baseline and an
    in-process worker share it (a data file is read once). A changed data file builds anew."""
    key = _task_key(spec)
    if key not in _BUILT:
        task = _build_task(spec)
        _BUILT.clear()  # one spec's task at a time: a task can hold much data
        _BUILT[key] = task
    return _BUILT[key]


def _task_key(spec: Spec) -> tuple[str, ...]:
    table = json.dumps(spec.task.table(), sort_keys=True, default=str)
    # not the source's spelling: a worker reads the study's copy of the spec by its full path
    return (str(spec.base_dir.resolve()), table, *_file_stamps(spec))


def _file_stamps(spec: Spec) -> list[str]:
    """Size and modification time of each file an option names, so that an edited data file
    is read again (a task can read any option as a file name relative to the spec)."""
    stamps = []
    for value in spec.task.options.values():
        if not isinstance(value, str) or not value:
            continue
        try:
            path = spec.base_dir / Path(value).expanduser()
            stat = path.stat() if path.is_file() else None
        except (OSError, ValueError, RuntimeError):  # not a usable path: it names no file
            stat = None
        if stat is not None:
            stamps.append(f"{value}:{stat.st_size}:{stat.st_mtime_ns}")
    return stamps


def _build_task(spec: Spec) -> Task:
    # here, not at the top: building a task loads torch, which reading a spec must not
    from sweeper.training.model_plugin import build_task_with_model

    return build_task_with_model(spec.task, spec.base_dir, spec.source)


def _check_objective(spec: Spec) -> None:
    # the section itself checked its keys and that function is a string
    if not spec.search:
        raise SpecError(spec.source, "search", "an objective plugin needs at least one parameter")
    load_objective_of(spec)


def load_objective_of(spec: Spec) -> Objective:
    """The objective plugin a ``kind = "objective"`` spec names."""
    task = spec.task
    assert task.function is not None, "an objective section names its function"
    return load_objective(
        task.function, spec.base_dir, spec.source, "task.function", path=task.path or "."
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


def _check_footprint(spec: Spec, task: Task) -> None:
    """Refuse a search space whose largest network cannot fit in this machine's memory."""
    if spec.task.model is not None:
        return  # the spec's own network: its size is not ours to estimate
    available = available_memory()
    if available is None:
        return
    largest = largest_footprint(spec, task.input_size, task.output_size)
    shortfall = describe_shortfall(spec, largest, available)
    if shortfall is not None:
        raise SpecError(spec.source, ", ".join(size_keys(spec)), shortfall)


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
