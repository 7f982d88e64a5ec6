"""The planned compute of a sweep, from timing one window of a mid-size configuration.

Printed by ``check`` so that an absurd budget (a billion epochs, say) is seen before it runs.
"""

from __future__ import annotations

import math
import statistics
import time
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from sweeper.spec.footprint import SIZE_PARAMS, footprint
from sweeper.spec.sections import budget_of
from sweeper.spec.space import Choices, Fixed, Range, SearchEntry
from sweeper.training.params import TrialParams

if TYPE_CHECKING:
    from sweeper.spec.sections import Spec
    from sweeper.tasks.base import Task

PROBE_BYTES_LIMIT = 2**28  # larger mid-size networks are not timed: check must stay fast
PROBE_REPEATS = 3  # timed windows after one warm-up; the fastest is kept (least disturbed)


@dataclass(frozen=True)
class PlannedCompute:
    core_hours: float
    probe_ms: float


def _middle(entry: SearchEntry | None, default: Any) -> Any:
    """A mid-size value of a parameter: a range's middle (geometric on a log scale), a list's
    middle element."""
    if entry is None:
        return default
    if isinstance(entry, Fixed):
        return entry.value
    if isinstance(entry, Choices):
        return entry.values[len(entry.values) // 2]
    assert isinstance(entry, Range)
    middle = math.sqrt(entry.low * entry.high) if entry.log else (entry.low + entry.high) / 2
    return round(middle) if entry.integer else middle


def middle_params(spec: Spec) -> TrialParams:
    defaults = {**TrialParams().as_dict(), **spec.training.defaults}
    names = (*SIZE_PARAMS, "cell", "optimizer", "momentum")
    return TrialParams.from_mapping({n: _middle(spec.search.get(n), defaults[n]) for n in names})


def window_seconds(params: TrialParams, task: Task) -> float:
    """Seconds of one truncated-BPTT window: forward, backward and an optimizer step."""
    # lazy: reading a spec must not load torch; only check's summary times a window
    import torch

    from sweeper.training.models import build_model
    from sweeper.training.trial_run import build_optimizer

    model = build_model(params, task.input_size, task.output_size)
    optimizer = build_optimizer(params, model)
    inputs = torch.randn(params.batch, params.unroll, task.input_size)
    times = []
    for _ in range(PROBE_REPEATS + 1):
        started = time.perf_counter()
        outputs, _ = model(inputs, model.initial_state(params.batch))
        outputs.pow(2).mean().backward()
        optimizer.step()
        optimizer.zero_grad()
        times.append(time.perf_counter() - started)
    return min(times[1:]) if len(times) > 1 else statistics.mean(times)


def planned_compute(spec: Spec, task: Task) -> PlannedCompute | None:
    """Core-hours of the whole budget at the mid-size configuration, or None when that
    network is too large to time quickly."""
    # lazy: see window_seconds
    import torch

    params = middle_params(spec)
    if footprint(params, task.input_size, task.output_size).total_bytes > PROBE_BYTES_LIMIT:
        return None
    seconds = window_seconds(params, task)
    windows = math.ceil(len(task.data("train")) / params.batch) * math.ceil(
        task.length / params.unroll
    )
    total = seconds * windows * spec.training.epochs * budget_of(spec)
    return PlannedCompute(total * torch.get_num_threads() / 3600, seconds * 1000)


def describe_planned_compute(spec: Spec, task: Task) -> str:
    planned = planned_compute(spec, task)
    if planned is None:
        return "planned compute not probed (the mid-size network is too large to time quickly)"
    return (
        f"planned compute about {planned.core_hours:.3g} core-hours "
        f"(from a {planned.probe_ms:.3g} ms probe)"
    )
