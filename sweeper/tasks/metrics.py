"""Per-step metrics weighted by a SequenceSet's weights (steps with weight 0 do not count)."""

from __future__ import annotations

import torch
import torch.nn.functional as F

from sweeper.tasks.base import SequenceSet


def weighted_mean(values: torch.Tensor, weights: torch.Tensor) -> float:
    """Mean of per-step ``values`` [N, T] under ``weights`` [N, T]."""
    total = float(weights.sum())
    if total <= 0:
        raise ValueError("no step has a target (all weights are 0)")
    return float((values.double() * weights.double()).sum()) / total


def mse(outputs: torch.Tensor, data: SequenceSet) -> float:
    """Squared error averaged over output channels, then over weighted steps."""
    per_step = (outputs.detach() - data.targets).pow(2).mean(dim=-1)
    return weighted_mean(per_step, data.weights)


def accuracy(outputs: torch.Tensor, data: SequenceSet) -> float:
    """Fraction of weighted steps whose argmax class equals the target."""
    hits = (outputs.detach().argmax(dim=-1) == data.targets).float()
    return weighted_mean(hits, data.weights)


def cross_entropy(outputs: torch.Tensor, data: SequenceSet) -> float:
    """Mean cross-entropy in nats of logits [N, T, C] over weighted steps."""
    logits = outputs.detach().double()
    per_step = F.cross_entropy(logits.transpose(1, 2), data.targets, reduction="none")
    return weighted_mean(per_step, data.weights)
