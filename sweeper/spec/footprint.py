"""What the largest configuration of a spec needs in memory, against what the machine has.

An estimate, refused before any file is written: a spec whose largest network cannot fit
would otherwise create a study and fail its trials one by one on allocation.
"""

from __future__ import annotations

import itertools
import os
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sweeper.spec.space import Choices, Fixed, Range, SearchEntry
from sweeper.training.params import TrialParams

if TYPE_CHECKING:
    from sweeper.spec.sections import Spec

FLOAT_BYTES = 4  # torch's default dtype, float32
# Gate blocks per layer: torch.nn.RNN has one, torch.nn.GRU three (reset, update, new),
# torch.nn.LSTM four (input, forget, cell, output); weights are [gates * hidden, ...] (torch docs).
GATES = {"elman": 1, "gru": 3, "lstm": 4}
SIZE_PARAMS = ("hidden", "layers", "batch", "unroll")
GIB = 2**30


def parameter_count(cell: str, input_size: int, hidden: int, layers: int, output: int) -> int:
    """Weights of the built-in model: the recurrent stack plus its linear read-out.

    Per layer, torch keeps weight_ih [g*H, in], weight_hh [g*H, H], bias_ih and bias_hh [g*H]
    (torch.nn.LSTM/GRU/RNN docs); the read-out is torch.nn.Linear(H, output)."""
    gates = GATES[cell]
    total = 0
    for layer in range(layers):
        inputs = input_size if layer == 0 else hidden
        total += gates * hidden * (inputs + hidden) + 2 * gates * hidden
    return total + hidden * output + output


def optimizer_copies(optimizer: str, momentum: float) -> int:
    """Buffers the optimizer keeps per weight."""
    if optimizer == "adam":
        return 2  # first and second moment estimates (Kingma & Ba 2015, Algorithm 1)
    if optimizer == "rmsprop":
        # the running mean of squared gradients, plus a momentum buffer when momentum > 0
        # (torch.optim.RMSprop docs)
        return 1 + (1 if momentum > 0 else 0)
    return 1 if momentum > 0 else 0  # SGD: a momentum buffer only (torch.optim.SGD docs)


def activation_values(params: TrialParams, output: int) -> int:
    """Values autograd keeps for one truncated-BPTT window: each layer's gate activations and
    output at every step (batch x unroll x hidden x (gates + 1)), plus the read-out's outputs.
    Common practice estimate; torch's fused kernels keep about this much."""
    steps = params.batch * params.unroll
    per_layer = steps * params.hidden * (GATES[params.cell] + 1)
    return per_layer * params.layers + steps * output


@dataclass(frozen=True)
class Footprint:
    params: TrialParams
    weights: int
    total_bytes: int


def footprint(params: TrialParams, input_size: int, output: int) -> Footprint:
    weights = parameter_count(params.cell, input_size, params.hidden, params.layers, output)
    # weights, their gradients and the optimizer's buffers are one float per weight each
    per_weight = 1 + 1 + optimizer_copies(params.optimizer, params.momentum)
    values = weights * per_weight + activation_values(params, output)
    return Footprint(params, weights, values * FLOAT_BYTES)


def _largest(entry: SearchEntry | None, default: Any) -> list[Any]:
    """The values of a parameter worth trying for the worst case (its largest one)."""
    if entry is None:
        return [default]
    if isinstance(entry, Fixed):
        return [entry.value]
    if isinstance(entry, Choices):
        return list(entry.values)
    assert isinstance(entry, Range)
    return [int(entry.high) if entry.integer else entry.high]


def _candidates(spec: Spec) -> list[dict[str, Any]]:
    """Every combination of the cell, optimizer and momentum choices, at the largest sizes."""
    defaults = {**TrialParams().as_dict(), **spec.training.defaults}
    axes: dict[str, list[Any]] = {}
    for name in (*SIZE_PARAMS, "cell", "optimizer", "momentum"):
        values = _largest(spec.search.get(name), defaults[name])
        axes[name] = [max(values)] if name in SIZE_PARAMS else values
    names = list(axes)
    return [dict(zip(names, combo, strict=True)) for combo in itertools.product(*axes.values())]


def largest_footprint(spec: Spec, input_size: int, output: int) -> Footprint:
    found = [
        footprint(TrialParams.from_mapping(values), input_size, output)
        for values in _candidates(spec)
    ]
    return max(found, key=lambda one: one.total_bytes)


def available_memory() -> int | None:
    """Bytes the machine can give without swapping (Linux MemAvailable), or None if unknown."""
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) * 1024  # the kernel writes kB
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def size_keys(spec: Spec) -> list[str]:
    """The spec keys that set the network's size (where the spec sets them)."""
    keys = []
    for name in SIZE_PARAMS:
        if name in spec.search:
            keys.append(f"search.{name}")
        elif name in spec.training.defaults:
            keys.append(f"training.{name}")
    return keys or [f"training.{name}" for name in SIZE_PARAMS]


def describe_shortfall(spec: Spec, largest: Footprint, available: int) -> str | None:
    """Why the spec's largest configuration cannot run on this machine, or None if it fits."""
    workers = spec.study.workers
    needed = largest.total_bytes * workers
    if needed <= available:
        return None
    sizes = ", ".join(f"{name}={getattr(largest.params, name)}" for name in SIZE_PARAMS)
    return (
        f"the largest configuration ({sizes}, {largest.params.cell}, "
        f"{largest.params.optimizer}) needs about {needed / GIB:.3g} GiB on {workers} "
        f"worker(s) ({largest.weights:,} weights), but {available / GIB:.3g} GiB is available; "
        "lower these sizes or the worker count"
    )
