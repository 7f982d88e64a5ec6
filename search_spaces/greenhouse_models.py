"""A network of our own for sweeper: a GRU whose output head also sees the current readings.

sweeper calls ``skip_gru(params, input_size, output_size)`` once per trial, with the trial's
training parameters (``hidden``, ``layers``, ``dropout``, ... as a dict), and trains what it
returns with its own truncated-BPTT loop, clipping, telemetry and checkpoints. The module
must keep the contract of ``sweeper.training.models.SequenceModel``: ``forward(x, state)`` returns
``(outputs, state)``, plus ``initial_state(batch)`` and ``detach_state(state)``.
"""

from __future__ import annotations

import torch
from torch import nn


class SkipGRU(nn.Module):
    """GRU features and the raw inputs side by side into a linear head: the head can pass
    the current readings straight through, and the GRU learns the change."""

    def __init__(self, input_size: int, hidden: int, output_size: int, layers: int) -> None:
        super().__init__()
        self.hidden, self.layers = hidden, layers
        self.gru = nn.GRU(input_size, hidden, num_layers=layers, batch_first=True)
        self.head = nn.Linear(hidden + input_size, output_size)

    def forward(self, x: torch.Tensor, state: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        features, state = self.gru(x, state)
        return self.head(torch.cat([features, x], dim=-1)), state

    def initial_state(self, batch: int) -> torch.Tensor:
        weight = self.head.weight
        return torch.zeros(
            self.layers, batch, self.hidden, dtype=weight.dtype, device=weight.device
        )

    def detach_state(self, state: torch.Tensor) -> torch.Tensor:
        return state.detach()


def skip_gru(params: dict, input_size: int, output_size: int) -> nn.Module:
    return SkipGRU(input_size, params["hidden"], output_size, params["layers"])
