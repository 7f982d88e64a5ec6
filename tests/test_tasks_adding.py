"""The adding problem: layout of the data and its 1/6 baseline."""

from pathlib import Path

import pytest
import torch

from sweeper.tasks.registry import build_task


def adding(**options):
    return build_task({"kind": "adding", **options}, Path("."), "spec.toml")


def test_two_markers_one_in_each_half_and_target_is_their_sum():
    data = adding(length=40, train_sequences=300).data("train")
    values, markers = data.inputs[..., 0], data.inputs[..., 1]
    assert torch.equal(markers[:, :20].sum(dim=1), torch.ones(300))
    assert torch.equal(markers[:, 20:].sum(dim=1), torch.ones(300))
    expected = (values * markers).sum(dim=1)
    assert torch.allclose(data.targets[:, -1, 0], expected)
    assert torch.equal(data.weights[:, -1], torch.ones(300))
    assert float(data.weights[:, :-1].abs().sum()) == 0.0


def test_always_predicting_one_scores_one_sixth():
    task = adding(length=20, valid_sequences=40_000)
    data = task.data("valid")
    mse = task.metric(torch.ones_like(data.targets), data)
    # Arjovsky et al. 2016 quote 0.167: the variance of a sum of two U(0,1) is 2 * 1/12 = 1/6.
    # The standard error of the mean of (S - 1)^2 over 40 000 draws is about 0.0008.
    assert mse == pytest.approx(1 / 6, abs=0.004)
    assert task.baseline().value == pytest.approx(1 / 6)
    assert task.baseline().measure == "valid_loss"


def test_metric_ignores_steps_without_target():
    task = adding(length=10, valid_sequences=50)
    data = task.data("valid")
    outputs = data.targets.clone()
    outputs[:, :-1] = 100.0  # wrong everywhere except the scored last step
    assert task.metric(outputs, data) == 0.0
