"""Delayed recall, a memory-span probe in common use: emit the symbol seen ``delay`` steps ago.

Inputs are one-hot symbols drawn uniformly from an alphabet of ``symbols``. From step
``delay`` on, the target is the input of ``delay`` steps earlier; earlier steps carry no
target. Gradients must span ``delay`` steps to learn it, so the unroll must be longer.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import torch
import torch.nn.functional as F

from sweeper.tasks import metrics
from sweeper.tasks.base import Baseline, SequenceSet, Split
from sweeper.tasks.cached import CachedTask, generator
from sweeper.tasks.options import GeneratedOptions, OptionError, check_at_least, parse_options


@dataclass(frozen=True)
class RecallOptions(GeneratedOptions):
    length: int = 50
    delay: int = 10
    symbols: int = 4

    def __post_init__(self) -> None:
        super().__post_init__()
        check_at_least("symbols", self.symbols, 2)
        check_at_least("delay", self.delay, 1)
        if self.delay >= self.length:
            raise OptionError(
                "delay",
                f"must be shorter than length ({self.length}) so that some step has a "
                f"target, got {self.delay}; lower delay or raise length",
            )


class RecallTask(CachedTask):
    name = "recall"
    kind = "classification"
    metric_name = "accuracy"
    metric_higher_is_better = True

    def __init__(self, options: RecallOptions) -> None:
        super().__init__()
        self.options = options
        self.length = options.length
        self.input_size = options.symbols
        self.output_size = options.symbols

    def _build(self, split: Split) -> SequenceSet:
        opts = self.options
        count = opts.sequences_in(split)
        gen = generator(opts.split_seed(self.name, split))
        return make_recall(count, opts.length, opts.delay, opts.symbols, gen)

    def baseline(self) -> Baseline:
        chance = 1 / self.options.symbols
        return Baseline(
            chance,
            "valid_metric",
            f"chance accuracy 1/{self.options.symbols} = {chance:.3f} of guessing without "
            f"memory; only an unroll longer than {self.options.delay} steps can beat it",
        )

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        return metrics.accuracy(outputs, data)


def make_recall(
    count: int, length: int, delay: int, symbols: int, gen: torch.Generator
) -> SequenceSet:
    tokens = torch.randint(0, symbols, (count, length), generator=gen)
    targets = torch.zeros(count, length, dtype=torch.long)
    targets[:, delay:] = tokens[:, :-delay]
    weights = torch.zeros(count, length)
    weights[:, delay:] = 1.0
    return SequenceSet(F.one_hot(tokens, symbols).float(), targets, weights)


def build(options: Mapping[str, Any], base_dir: Path, source: str) -> RecallTask:
    return RecallTask(parse_options(RecallOptions, options, source, "recall"))
