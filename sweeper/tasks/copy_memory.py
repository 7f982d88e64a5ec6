"""The copy-memory task (Arjovsky, Shah & Bengio 2016).

Ten symbols from an alphabet of 8, then ``delay - 1`` blanks, a delimiter and ten more
blanks: ``delay + 20`` steps in all. The target is blank everywhere except the last ten
steps, which must repeat the ten symbols. Inputs are one-hot over blank (0), the eight
symbols (1-8) and the delimiter (9); outputs are blank or one of the eight symbols.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import torch
import torch.nn.functional as F

from sweeper.tasks.base import Baseline, SequenceSet, Split
from sweeper.tasks.cached import CachedTask, generator
from sweeper.tasks.options import GeneratedOptions, check_at_least, parse_options

SYMBOLS = 8
RECALL = 10  # symbols to remember
DELIMITER = SYMBOLS + 1


@dataclass(frozen=True)
class CopyOptions(GeneratedOptions):
    delay: int = 100  # the paper's T; a sequence has delay + 20 steps

    def __post_init__(self) -> None:
        super().__post_init__()
        check_at_least("delay", self.delay, 1)


class CopyTask(CachedTask):
    name = "copy"
    kind = "classification"
    input_size = SYMBOLS + 2
    output_size = SYMBOLS + 1
    metric_name = "recall_accuracy"
    metric_higher_is_better = True

    def __init__(self, options: CopyOptions) -> None:
        super().__init__()
        self.options = options
        self.length = options.delay + 2 * RECALL

    def _build(self, split: Split) -> SequenceSet:
        opts = self.options
        count = opts.sequences_in(split)
        return make_copy(count, opts.delay, generator(opts.split_seed(self.name, split)))

    def baseline(self) -> Baseline:
        value = RECALL * math.log(SYMBOLS) / self.length
        return Baseline(
            value,
            "valid_loss",
            f"cross-entropy 10·ln 8/(delay + 20) = {value:.4f} nats of predicting blank until the "
            "delimiter, then a uniform guess over the 8 symbols (Arjovsky et al. 2016)",
        )

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        """Accuracy on the ten recall steps only (the blanks are trivial)."""
        guesses = outputs.detach()[:, -RECALL:].argmax(dim=-1)
        return float((guesses == data.targets[:, -RECALL:]).float().mean())


def make_copy(count: int, delay: int, gen: torch.Generator) -> SequenceSet:
    symbols = torch.randint(1, SYMBOLS + 1, (count, RECALL), generator=gen)
    blanks = torch.zeros(count, delay - 1, dtype=torch.long)
    delimiter = torch.full((count, 1), DELIMITER, dtype=torch.long)
    tail = torch.zeros(count, RECALL, dtype=torch.long)
    tokens = torch.cat([symbols, blanks, delimiter, tail], dim=1)
    targets = torch.cat([torch.zeros(count, delay + RECALL, dtype=torch.long), symbols], dim=1)
    inputs = F.one_hot(tokens, SYMBOLS + 2).float()
    return SequenceSet(inputs, targets, torch.ones(count, delay + 2 * RECALL))


def build(options: Mapping[str, Any], base_dir: Path, source: str) -> CopyTask:
    return CopyTask(parse_options(CopyOptions, options, source, "copy"))
