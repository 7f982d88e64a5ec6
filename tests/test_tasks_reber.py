"""The embedded Reber grammar: generated strings, the acceptor and the legal-successor mask."""

import random
from collections import Counter
from pathlib import Path

import pytest
import torch
import torch.nn.functional as F

from sweeper.errors import SpecError
from sweeper.tasks.reber import ALPHABET, accepts, generate
from sweeper.tasks.registry import build_task

# Walked by hand through the Reber graph (Reber 1967, as drawn by Hochreiter & Schmidhuber
# 1997) and wrapped as B T ... T E or B P ... P E.
HAND_MADE = ["BTBTXSETE", "BPBPVVEPE", "BTBTSSXXTVVETE", "BPBPTVPSEPE", "BTBPTTVPXVVETE"]


def reber(**options):
    return build_task({"kind": "reber", **options}, Path("."), "spec.toml")


def strings_of(data):
    """Decode each sequence back to its string: the inputs, then the last target."""
    out = []
    for row in range(len(data)):
        steps = int(data.weights[row].sum())
        symbols = [ALPHABET[i] for i in data.inputs[row, :steps].argmax(dim=-1)]
        out.append("".join(symbols) + ALPHABET[int(data.targets[row, steps - 1])])
    return out


@pytest.mark.parametrize("string", HAND_MADE)
def test_acceptor_takes_hand_made_strings(string):
    assert accepts(string)


@pytest.mark.parametrize(
    "string",
    [
        "BTBTXSEPE",  # the outer branch must close with the letter it opened with
        "BPBPVVETE",
        "BTBTXSET",  # no final E
        "BTTXSETE",  # the inner string lacks its B
        "BTBTXXETE",  # after T S* X the graph allows S or X T* V, not X E
        "",
    ],
)
def test_acceptor_rejects_corrupted_strings(string):
    assert not accepts(string)


def test_every_generated_string_is_accepted():
    rng = random.Random(3)
    assert all(accepts(generate(rng)) for _ in range(3000))
    data = reber(length=30, train_sequences=500).data("train")
    strings = strings_of(data)
    assert all(accepts(string) for string in strings)
    assert all(len(string) <= 31 for string in strings)
    assert all(not accepts(s[:-3] + ("P" if s[-2] == "T" else "T") + "E") for s in strings)


def test_legal_mask_matches_the_acceptor():
    """A symbol is marked legal iff some completion makes the prefix plus it accepted."""
    rng = random.Random(11)
    completions = sorted(
        {s[i:] for s in (generate(rng) for _ in range(4000)) for i in range(len(s))}
    )
    completions = [""] + [c for c in completions if len(c) <= 10]
    data = reber(length=14, valid_sequences=25).data("valid")
    for row, string in enumerate(strings_of(data)):
        for step in range(len(string) - 1):
            prefix = string[: step + 1]
            for index, symbol in enumerate(ALPHABET):
                viable = any(accepts(prefix + symbol + rest) for rest in completions)
                assert bool(data.extras["legal"][row, step, index]) == viable, (prefix, symbol)


def test_padding_carries_no_weight_and_no_input():
    data = reber(length=40, valid_sequences=50).data("valid")
    pad = data.weights == 0
    assert pad.any()
    assert float(data.inputs[pad].abs().sum()) == 0.0
    assert not data.extras["legal"][pad].any()


def test_metric_and_baseline():
    task = reber(length=30, train_sequences=400, valid_sequences=200)
    valid = task.data("valid")
    assert task.metric(F.one_hot(valid.targets, 7).float(), valid) == 1.0
    counts = Counter(s[i] for s in strings_of(task.data("train")) for i in range(1, len(s)))
    top = counts.most_common(1)[0][0]
    guesses = torch.full(valid.targets.shape, ALPHABET.index(top))
    constant = F.one_hot(guesses, 7).float()
    baseline = task.baseline()
    assert baseline.measure == "valid_metric"
    assert baseline.value == pytest.approx(task.metric(constant, valid))
    assert f"{top!r}" in baseline.description
    assert 0 < baseline.value < 1


def test_length_must_fit_the_shortest_string():
    with pytest.raises(SpecError) as caught:
        reber(length=7)
    assert caught.value.key == "task.length"
