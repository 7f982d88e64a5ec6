"""nn.RNN (tanh) and nn.GRU with our own window recurrence in place of torch's per-step path.

``WindowRNN`` and ``WindowGRU`` are torch's modules, same parameters, names and gate order, so
a state dict moves freely between them and torch's own; only ``forward`` differs. For
batch-first [B, T, F] inputs with a state they run each layer as one autograd node
(``ElmanWindow`` / ``GRUWindow``), with torch's dropout between layers on the time-first
layer outputs, as torch's own stack applies it. Anything else (unbatched inputs, relu,
bidirectional, no state) goes to torch's forward, and so does a GRU forward that records no
gradient (evaluation, windows without targets): there torch's C++ step loop is quicker than
our Python one, while for Elman ours is.

Built with ``compiled=True`` (revision window-2) the step loops inside each layer's node are
the compiled ones (step_kernels.cpp), and a GRU forward without a gradient runs them too, as
they are quicker than torch's C++ loop. Which of these the built-in models use follows the
trial's numerics revision (training/numerics.py).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import torch
from torch import nn

from sweeper.training import compiled_steps
from sweeper.training.elman_window import ElmanWindow
from sweeper.training.gru_window import GRUWindow

# one layer's parameters, nn.RNNBase's names (suffixed _l0, _l1, ...)
_NAMES = ("weight_ih", "weight_hh", "bias_ih", "bias_hh")


def handled(module: nn.RNNBase, x: torch.Tensor) -> bool:
    """Whether our recurrence covers this call; torch's forward takes all others."""
    return (
        x.dim() == 3
        and module.batch_first
        and not module.bidirectional
        and module.proj_size == 0
        and module.bias
        and getattr(module, "nonlinearity", "tanh") == "tanh"
    )


def recording(module: nn.RNNBase, x: torch.Tensor, state: torch.Tensor) -> bool:
    """Whether autograd would record this forward (a gradient of an input or a weight)."""
    if not torch.is_grad_enabled():
        return False
    weights = any(w.requires_grad for w in module.parameters())
    return x.requires_grad or state.requires_grad or weights


def run_layers(
    module: nn.RNNBase,
    window: Callable[..., tuple[torch.Tensor, torch.Tensor]],
    x: torch.Tensor,
    state: torch.Tensor,
    compiled: bool,
) -> tuple[torch.Tensor, torch.Tensor]:
    """The layer stack over batch-first ``x`` from ``state`` [layers, B, H], one node a layer;
    ``compiled``: the compiled step loops (they must be loadable: numerics.building checked)."""
    kernels = compiled_steps.loaded() if compiled else None
    layer_input = x.transpose(0, 1)
    last = []
    for layer in range(module.num_layers):
        if layer and module.dropout and module.training:
            layer_input = torch.dropout(layer_input, module.dropout, True)
        weights = [getattr(module, f"{name}_l{layer}") for name in _NAMES]
        layer_input, h = window(layer_input, state[layer], *weights, kernels)
        last.append(h)
    return layer_input.transpose(0, 1), torch.stack(last)


class WindowRNN(nn.RNN):
    """nn.RNN whose tanh batch-first forward is our window recurrence."""

    def __init__(self, *args: Any, compiled: bool = False, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.compiled = compiled

    def forward(  # type: ignore[override]
        self, x: torch.Tensor, hx: torch.Tensor | None = None
    ) -> tuple[torch.Tensor, torch.Tensor]:
        if hx is None or not handled(self, x):
            return super().forward(x, hx)
        return run_layers(self, ElmanWindow.apply, x, hx, self.compiled)


class WindowGRU(nn.GRU):
    """nn.GRU whose batch-first forward is our window recurrence."""

    def __init__(self, *args: Any, compiled: bool = False, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.compiled = compiled

    def forward(  # type: ignore[override]
        self, x: torch.Tensor, hx: torch.Tensor | None = None
    ) -> tuple[torch.Tensor, torch.Tensor]:
        if hx is None or not handled(self, x):
            return super().forward(x, hx)
        # without a gradient to record, torch's C++ step loop is quicker than our Python one
        if not self.compiled and not recording(self, x, hx):
            return super().forward(x, hx)
        return run_layers(self, GRUWindow.apply, x, hx, self.compiled)
