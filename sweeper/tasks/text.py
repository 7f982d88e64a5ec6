"""A character-level model of a UTF-8 text file.

The vocabulary is every character in the file. The first ``1 - valid_fraction`` of the
characters train, the rest validate. Each split is cut into non-overlapping sequences of
``length`` one-hot characters; the target at every step is the next character.
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
from sweeper.tasks.options import check_at_least, check_fraction, parse_options


@dataclass(frozen=True)
class TextOptions:
    file: str = ""
    length: int = 100
    valid_fraction: float = 0.1

    def __post_init__(self) -> None:
        check_at_least("length", self.length, 1)
        check_fraction("valid_fraction", self.valid_fraction)


class TextTask(CachedTask):
    name = "text"
    kind = "classification"
    metric_name = "bits_per_character"
    metric_higher_is_better = False

    def __init__(self, options: TextOptions, base_dir: Path, source: str) -> None:
        super().__init__()
        self.options = options
        self.path = resolve(options.file, base_dir, source)
        text = read_utf8(self.path, source)
        self.vocabulary = "".join(sorted(set(text)))
        self.input_size = self.output_size = len(self.vocabulary)
        self.length = options.length
        cut = len(text) - round(len(text) * options.valid_fraction)
        self.texts = {"train": text[:cut], "valid": text[cut:]}
        for split, part in self.texts.items():
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
        nats = unigram_entropy(self.scored_text("valid"))
        return Baseline(
            nats,
            "valid_loss",
            f"unigram entropy {nats:.4f} nats ({nats / math.log(2):.3f} bits) per character "
            "of the validation text: the best a model that ignores context can do",
        )

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        return metrics.bits_per_character(outputs, data)


def unigram_entropy(text: str) -> float:
    """Entropy in nats of the character frequencies of ``text``."""
    total = len(text)
    return -sum(n / total * math.log(n / total) for n in Counter(text).values())


def build(options: Mapping[str, Any], base_dir: Path, source: str) -> TextTask:
    return TextTask(parse_options(TextOptions, options, source, "text"), base_dir, source)
