"""Delayed recall: chance level and the look-back oracle."""

from pathlib import Path

import pytest
import torch

from sweeper.errors import SpecError
from sweeper.tasks.registry import build_task


def recall(**options):
    return build_task({"kind": "recall", **options}, Path("."), "spec.toml")


@pytest.mark.parametrize("symbols", [2, 4, 7])
def test_uniform_guessing_scores_chance(symbols):
    task = recall(length=40, delay=6, symbols=symbols, valid_sequences=2000)
    data = task.data("valid")
    guesses = torch.randn(len(data), 40, symbols, generator=torch.Generator().manual_seed(1))
    # chance accuracy of a predictor that ignores the input is 1/A; 68 000 scored steps
    assert task.metric(guesses, data) == pytest.approx(1 / symbols, abs=0.01)
    assert task.baseline().value == pytest.approx(1 / symbols)
    assert task.baseline().measure == "valid_metric"


def test_looking_back_delay_steps_is_perfect_and_one_step_off_is_not():
    task = recall(length=30, delay=5, symbols=4, valid_sequences=200)
    data = task.data("valid")
    oracle = torch.zeros_like(data.inputs)
    oracle[:, 5:] = data.inputs[:, :-5]
    assert task.metric(oracle, data) == 1.0
    off_by_one = torch.zeros_like(data.inputs)
    off_by_one[:, 4:] = data.inputs[:, :-4]
    # symbols are drawn independently, so the one beside the right one matches it by chance:
    # 1/4 (derived), give or take 0.03 (five binomial standard deviations over 5 000 steps)
    assert task.metric(off_by_one, data) == pytest.approx(1 / 4, abs=0.03)


def test_first_delay_steps_carry_no_target():
    data = recall(length=12, delay=4, valid_sequences=3).data("valid")
    assert float(data.weights[:, :4].sum()) == 0.0
    assert torch.equal(data.weights[:, 4:], torch.ones(3, 8))


def test_delay_must_be_shorter_than_length():
    with pytest.raises(SpecError) as caught:
        recall(length=10, delay=10)
    assert caught.value.key == "task.delay"
    assert "shorter than length (10)" in caught.value.message
