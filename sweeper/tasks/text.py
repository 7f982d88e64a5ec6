"""A character-level model of a UTF-8 text file.

The vocabulary is every character in the file. The characters are split in file order: the
first train, the next ``valid_fraction`` validate, and the last ``test_fraction`` (none by
default) are a held-out tail that sweeps never read; only ``sweeper best --retrain`` scores
it. Each split is cut into non-overlapping sequences of ``length`` one-hot characters; the
target at every step is the next character.

Every score of this task is in nats per character: the loss (cross-entropy), the metric
(the same cross-entropy, named by its unit) and the unigram baseline.
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import torch
import torch.nn.functional as F

from sweeper.errors import SpecError
from sweeper.tasks import metrics
from sweeper.tasks.base import Baseline, SequenceSet, Split
from sweeper.tasks.cached import CachedTask
from sweeper.tasks.files import read_utf8, resolve
from sweeper.tasks.options import (
    check_at_least,
    check_fraction,
    check_split_fractions,
    parse_options,
)

UNIT = "nats per character"


@dataclass(frozen=True)
class TextOptions:
    file: str = ""
    length: int = 100
    valid_fraction: float = 0.1
    test_fraction: float = 0.0  # the held-out tail; 0 = none

    def __post_init__(self) -> None:
        check_at_least("length", self.length, 1)
        check_fraction("valid_fraction", self.valid_fraction)
        check_split_fractions(self.valid_fraction, self.test_fraction)


class TextTask(CachedTask):
    name = "text"
    kind = "classification"
    metric_name = "nats_per_character"
    metric_higher_is_better = False

    def __init__(self, options: TextOptions, base_dir: Path, source: str) -> None:
        super().__init__()
        self.options = options
        self.path = resolve(options.file, base_dir, source)
        text = read_utf8(self.path, source)
        self.vocabulary = "".join(sorted(set(text)))
        self.input_size = self.output_size = len(self.vocabulary)
        self.length = options.length
        tail = len(text) - round(len(text) * options.test_fraction)
        cut = tail - round(len(text) * options.valid_fraction)
        self.texts = {"train": text[:cut], "valid": text[cut:tail], "test": text[tail:]}
        self.splits = ("train", "valid", "test") if tail < len(text) else ("train", "valid")
        for split in self.splits:
            part = self.texts[split]
            if len(part) < options.length + 1:
                raise SpecError(
                    source,
                    "task.length",
                    f"the {split} part of {self.path.name} has {len(part)} characters, fewer "
                    f"than length + 1 = {options.length + 1}; shorten length or use more text",
                )

    def _build(self, split: Split) -> SequenceSet:
        length = self.options.length
        index = {char: i for i, char in enumerate(self.vocabulary)}
        part = self.texts[split]
        count = (len(part) - 1) // length
        tokens = torch.tensor([index[char] for char in part[: count * length + 1]])
        inputs = tokens[:-1].reshape(count, length)
        targets = tokens[1:].reshape(count, length)
        onehot = F.one_hot(inputs, len(self.vocabulary)).float()
        return SequenceSet(onehot, targets, torch.ones(count, length))

    def scored_text(self, split: Split) -> str:
        """The characters that are targets in ``split`` (the tail that fills no sequence is not)."""
        count = len(self.data(split))
        return self.texts[split][1 : count * self.options.length + 1]

    def baseline(self) -> Baseline:
        return self.baseline_on("valid")

    def baseline_on(self, split: Split) -> Baseline:
        """The unigram entropy of ``split``'s own characters (the refit asks for "test")."""
        nats = unigram_entropy(self.scored_text(split))
        name = "validation" if split == "valid" else split
        return Baseline(
            nats,
            "valid_loss",
            f"unigram entropy {nats:.4f} {UNIT} of the {name} text: the best a model that "
            "ignores context can do",
        )

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        return metrics.cross_entropy(outputs, data)

    def describe(self) -> str:
        return f"{super().describe()}, scored in {UNIT}"


def unigram_entropy(text: str) -> float:
    """Entropy in nats of the character frequencies of ``text``."""
    total = len(text)
    return -sum(n / total * math.log(n / total) for n in Counter(text).values())


def build(options: Mapping[str, Any], base_dir: Path, source: str) -> TextTask:
    return TextTask(parse_options(TextOptions, options, source, "text"), base_dir, source)
