"""Elman RNN / GRU / LSTM with a linear output head, built from a trial's parameters.

``Recurrent`` is what the trainer needs of any model, the built-in one or a spec's own
(``sweeper.training.model_plugin``): ``model(x, state) -> (outputs, state)`` on batch-first inputs
[B, T, F] with outputs [B, T, O], ``initial_state(batch)`` and ``detach_state(state)``.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Any, Protocol

import torch
from torch import nn

from sweeper.training.numerics import building_numerics
from sweeper.training.params import TrialParams
from sweeper.training.recurrence import WindowGRU, WindowRNN

# LSTM carries (h, c); the other cells carry h alone. Each is [layers, batch, hidden].
State = torch.Tensor | tuple[torch.Tensor, torch.Tensor]


class Recurrent(Protocol):
    """The model contract the truncated-BPTT loop relies on (an nn.Module that also has these)."""

    def __call__(self, x: torch.Tensor, state: Any) -> tuple[torch.Tensor, Any]: ...

    def initial_state(self, batch: int) -> Any: ...

    def detach_state(self, state: Any) -> Any: ...

    def parameters(self, recurse: bool = True) -> Iterator[nn.Parameter]: ...

    def state_dict(self) -> dict[str, Any]: ...

    def load_state_dict(
        self, state_dict: Any, strict: bool = True, assign: bool = False
    ) -> Any: ...

    def train(self, mode: bool = True) -> Any: ...

    def eval(self) -> Any: ...


# (trial parameters, input_size, output_size) -> a model; build_model is the built-in one.
ModelBuilder = Callable[[TrialParams, int, int], Recurrent]


class SequenceModel(nn.Module):
    """A recurrent stack read out at every step: inputs [B, T, F] -> outputs [B, T, O]."""

    def __init__(
        self,
        cell: str,
        input_size: int,
        hidden: int,
        output_size: int,
        layers: int = 1,
        dropout: float = 0.0,
    ) -> None:
        super().__init__()
        self.cell = cell
        self.hidden = hidden
        self.layers = layers
        # Elman and GRU run our window recurrence (training/recurrence.py) unless the trial's
        # revision predates it (training/numerics.py); LSTM runs oneDNN's kernel.
        # torch applies its own dropout only between layers and warns when there is just one.
        between = dropout if layers > 1 else 0.0
        self.rnn = _recurrent(cell, input_size, hidden, layers, between)
        self.dropout: nn.Module = nn.Dropout(dropout) if dropout > 0 else nn.Identity()
        self.head = nn.Linear(hidden, output_size)

    def forward(self, x: torch.Tensor, state: State) -> tuple[torch.Tensor, State]:
        features, state = self.rnn(x, state)
        return self.head(self.dropout(features)), state

    def initial_state(self, batch: int) -> State:
        """The zero state for ``batch`` sequences, on the model's dtype and device."""
        weight = self.head.weight
        shape = (self.layers, batch, self.hidden)
        h = torch.zeros(shape, dtype=weight.dtype, device=weight.device)
        if self.cell == "lstm":
            return h, torch.zeros_like(h)
        return h

    @staticmethod
    def detach_state(state: State) -> State:
        """Cut the graph at a window boundary; the values carry on unchanged."""
        if isinstance(state, tuple):
            h, c = state
            return h.detach(), c.detach()
        return state.detach()


def _recurrent(cell: str, input_size: int, hidden: int, layers: int, dropout: float) -> nn.Module:
    common: dict[str, Any] = {
        "input_size": input_size,
        "hidden_size": hidden,
        "num_layers": layers,
        "dropout": dropout,
        "batch_first": True,
    }
    chosen = building_numerics()  # the revision of the trial being built
    own, compiled = chosen.own_recurrence, chosen.compiled_steps
    if cell == "elman":
        kind = WindowRNN if own else nn.RNN
        extra = {"compiled": compiled} if own else {}
        return kind(nonlinearity="tanh", **common, **extra)
    if cell == "gru":
        return WindowGRU(compiled=compiled, **common) if own else nn.GRU(**common)
    if cell == "lstm":
        return nn.LSTM(**common)
    raise ValueError(f"cell must be one of elman, gru, lstm, got {cell!r}")


def build_model(params: TrialParams, input_size: int, output_size: int) -> SequenceModel:
    """The model a trial trains: ``params.cell`` with ``params.hidden`` units per layer."""
    return SequenceModel(
        params.cell,
        input_size,
        params.hidden,
        output_size,
        layers=params.layers,
        dropout=params.dropout,
    )
