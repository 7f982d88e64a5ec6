"""Adam, RMSprop and SGD whose update runs in step_kernels.cpp, one call per parameter tensor.

At the small widths a sweep trains most, torch's optimizer step costs more in Python than in
arithmetic (about 100 to 200 microseconds a step with the fused or foreach kernels, for a few
thousand weights). These are torch's own optimizer classes, with torch's state names and
state_dict, so checkpoints hold the same state; only ``step`` differs: the same formulas as
torch's single-tensor implementations (torch.optim docs), computed in one loop per tensor.
They take the options the trainer uses (no amsgrad, maximize, nesterov, dampening or centred
RMSprop) and are used from trainer revision window-2 on (training/numerics.py).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from typing import Any

import torch

from sweeper.training import compiled_steps
from sweeper.training.compiled_steps import Kernels

Tensor = torch.Tensor


def _kernels() -> Kernels:
    # looked up once a step (a cached call) rather than kept: optimizers get deep-copied
    kernels = compiled_steps.loaded()
    if kernels is None:
        raise RuntimeError(
            f"the compiled optimizer updates need their kernels: {compiled_steps.why_not()}"
        )
    return kernels


def _step_count() -> Tensor:
    return torch.tensor(0.0, dtype=torch.float32)  # as torch keeps it


def _zeros(p: Tensor) -> Tensor:
    return torch.zeros_like(p, memory_format=torch.preserve_format)


class _CompiledStep(torch.optim.Optimizer):
    """The shared step: every parameter with a gradient, its group and state, one update."""

    def __init__(self, params: Iterable[Tensor], **options: Any) -> None:
        super().__init__(params, foreach=False, **options)  # type: ignore[call-arg]

    @torch.no_grad()
    def step(self, closure: Callable[[], float] | None = None) -> None:  # type: ignore[override]
        kernels = _kernels()
        for group in self.param_groups:
            for p in group["params"]:
                if p.grad is not None:
                    self._update(kernels, group, p)

    def _update(self, kernels: Kernels, group: dict[str, Any], p: Tensor) -> None:
        raise NotImplementedError


class CompiledAdam(_CompiledStep, torch.optim.Adam):
    def _update(self, kernels: Kernels, group: dict[str, Any], p: Tensor) -> None:
        state = self.state[p]
        if not state:
            state.update(step=_step_count(), exp_avg=_zeros(p), exp_avg_sq=_zeros(p))
        beta1, beta2 = group["betas"]
        kernels.update(
            "adam", p, p.grad, state["exp_avg"], state["exp_avg_sq"], state["step"],
            group["lr"], beta1, beta2, group["eps"], group["weight_decay"],
        )  # fmt: skip


class CompiledRMSprop(_CompiledStep, torch.optim.RMSprop):
    def _update(self, kernels: Kernels, group: dict[str, Any], p: Tensor) -> None:
        state = self.state[p]
        if not state:
            state.update(step=_step_count(), square_avg=_zeros(p))
            if group["momentum"] > 0:
                state["momentum_buffer"] = _zeros(p)
        kernels.update(
            "rmsprop", p, p.grad, state["square_avg"], state.get("momentum_buffer"),
            state["step"], group["lr"], group["alpha"], group["eps"], group["weight_decay"],
            group["momentum"],
        )  # fmt: skip


class CompiledSGD(_CompiledStep, torch.optim.SGD):
    def _update(self, kernels: Kernels, group: dict[str, Any], p: Tensor) -> None:
        buffer, first = None, False
        if group["momentum"] > 0:  # torch keeps no state for plain SGD
            state = self.state[p]
            first = "momentum_buffer" not in state
            if first:
                state["momentum_buffer"] = torch.empty_like(p, memory_format=torch.preserve_format)
            buffer = state["momentum_buffer"]
        kernels.update(
            "sgd", p, p.grad, buffer, int(first), group["lr"], group["weight_decay"],
            group["momentum"],
        )  # fmt: skip


COMPILED_OPTIMIZERS: dict[str, type[torch.optim.Optimizer]] = {
    "adam": CompiledAdam,
    "rmsprop": CompiledRMSprop,
    "sgd": CompiledSGD,
}
