"""The adding problem (Hochreiter & Schmidhuber 1997).

Each step carries a value drawn from U(0, 1) and a marker; exactly two steps are marked, one
in each half of the sequence. The target, given at the last step only, is the sum of the two
marked values.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import torch

from sweeper.tasks import metrics
from sweeper.tasks.base import Baseline, SequenceSet, Split
from sweeper.tasks.cached import CachedTask, generator
from sweeper.tasks.options import GeneratedOptions, check_at_least, parse_options


@dataclass(frozen=True)
class AddingOptions(GeneratedOptions):
    length: int = 100

    def __post_init__(self) -> None:
        super().__post_init__()
        check_at_least("length", self.length, 2)


class AddingTask(CachedTask):
    name = "adding"
    kind = "regression"
    input_size = 2
    output_size = 1
    metric_name = "mse"
    metric_higher_is_better = False

    def __init__(self, options: AddingOptions) -> None:
        super().__init__()
        self.options = options
        self.length = options.length

    def _build(self, split: Split) -> SequenceSet:
        opts = self.options
        count = opts.sequences_in(split)
        return make_adding(count, opts.length, generator(opts.split_seed(self.name, split)))

    def baseline(self) -> Baseline:
        return Baseline(
            1 / 6,
            "valid_loss",
            "MSE 1/6 ≈ 0.167 of always predicting 1: the variance of a sum of two U(0,1) "
            "values (Arjovsky et al. 2016 quote 0.167)",
        )

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        return metrics.mse(outputs, data)


def make_adding(count: int, length: int, gen: torch.Generator) -> SequenceSet:
    values = torch.rand(count, length, generator=gen)
    half = length // 2
    first = torch.randint(0, half, (count,), generator=gen)
    second = torch.randint(half, length, (count,), generator=gen)
    rows = torch.arange(count)
    markers = torch.zeros(count, length)
    markers[rows, first] = 1.0
    markers[rows, second] = 1.0
    targets = torch.zeros(count, length, 1)
    targets[:, -1, 0] = values[rows, first] + values[rows, second]
    weights = torch.zeros(count, length)
    weights[:, -1] = 1.0
    return SequenceSet(torch.stack([values, markers], dim=-1), targets, weights)


def build(options: Mapping[str, Any], base_dir: Path, source: str) -> AddingTask:
    return AddingTask(parse_options(AddingOptions, options, source, "adding"))
