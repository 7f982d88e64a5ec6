"""The copy-memory task: layout and the 10·ln 8/(delay + 20) baseline."""

import math
from pathlib import Path

import pytest
import torch
import torch.nn.functional as F

from sweeper.tasks.registry import build_task

README = Path(__file__).resolve().parents[1] / "README.md"


def copy_task(**options):
    return build_task({"kind": "copy", **options}, Path("."), "spec.toml")


def test_layout_symbols_blanks_delimiter_then_recall():
    task = copy_task(delay=15, train_sequences=64)
    data = task.data("train")
    tokens = data.inputs.argmax(dim=-1)
    assert task.length == 35 == data.inputs.shape[1]
    assert ((tokens[:, :10] >= 1) & (tokens[:, :10] <= 8)).all()
    assert (tokens[:, 10:24] == 0).all()  # delay - 1 blanks
    assert (tokens[:, 24] == 9).all()  # the delimiter
    assert (tokens[:, 25:] == 0).all()
    assert (data.targets[:, :25] == 0).all()
    assert torch.equal(data.targets[:, 25:], tokens[:, :10])


@pytest.mark.parametrize("delay", [1, 30, 100])
def test_baseline_formula_equals_blank_then_uniform_strategy(delay):
    task = copy_task(delay=delay, valid_sequences=32)
    data = task.data("valid")
    # blank with certainty until the delimiter, then uniform over the 8 symbols (never blank)
    logits = torch.full((len(data), task.length, task.output_size), -math.inf)
    logits[:, : delay + 10, 0] = 0.0
    logits[:, delay + 10 :, 1:] = 0.0
    per_step = F.cross_entropy(logits.transpose(1, 2), data.targets, reduction="none")
    measured = float((per_step * data.weights).sum() / data.weights.sum())
    # Arjovsky, Shah & Bengio 2016: the memoryless baseline's cross-entropy is 10 log 8 / (T + 20)
    assert measured == pytest.approx(10 * math.log(8) / (delay + 20))
    assert task.baseline().value == pytest.approx(measured)


def test_metric_counts_only_the_ten_recall_steps():
    task = copy_task(delay=5, valid_sequences=20)
    data = task.data("valid")
    perfect = F.one_hot(data.targets, task.output_size).float()
    assert task.metric(perfect, data) == 1.0
    blanks = F.one_hot(torch.zeros_like(data.targets), task.output_size).float()
    assert task.metric(blanks, data) == 0.0


def test_the_printed_baseline_formula_is_the_one_readme_gives():
    (row,) = [
        line for line in README.read_text(encoding="utf-8").splitlines() if "| `copy` |" in line
    ]
    formula = row.rstrip(" |").rsplit("|", 1)[1].strip()  # the table's baseline column
    assert formula == "cross-entropy 10·ln 8/(delay + 20)"
    assert copy_task(delay=30).baseline().description.startswith(f"{formula} = ")
