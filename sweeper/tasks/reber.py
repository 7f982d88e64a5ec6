"""The embedded Reber grammar (Reber 1967; Hochreiter & Schmidhuber 1997).

A Reber string is a walk through the grammar's graph from B to E. An embedded string wraps
one as B T <reber> T E or B P <reber> P E, so the second-to-last symbol depends on the
second, across the whole inner string. The task is next-symbol prediction: the input at
step t is symbol t (one-hot over B, T, P, S, X, V, E), the target is symbol t + 1. Strings
that would need more than ``length`` steps are drawn again; shorter ones are padded with
zero inputs and weight 0. ``extras["legal"]`` marks every legal successor at each step.
"""

from __future__ import annotations

import random
import re
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import torch
import torch.nn.functional as F

from sweeper.tasks import metrics
from sweeper.tasks.base import Baseline, SequenceSet, Split
from sweeper.tasks.cached import CachedTask
from sweeper.tasks.options import GeneratedOptions, check_at_least, parse_options

ALPHABET = "BTPSXVE"
INDEX = {symbol: i for i, symbol in enumerate(ALPHABET)}

# The Reber graph, state -> (symbol, next state) edges; each edge is taken with probability 1/2.
REBER = {
    0: (("B", 1),),
    1: (("T", 2), ("P", 3)),
    2: (("S", 2), ("X", 4)),
    3: (("T", 3), ("V", 5)),
    4: (("X", 3), ("S", 6)),
    5: (("P", 4), ("V", 6)),
    6: (("E", 7),),
}

# The same language written as expressions, so that the acceptor shares no code with the
# generator: 1 -T-> S* X reaches state 4, 1 -P-> T* V reaches state 5.
_INNER = "B(?:TS*X(?:XT*VP)*(?:S|XT*VV)|PT*V(?:PXT*V)*(?:V|PS))E"
_EMBEDDED = re.compile(f"B(?:T{_INNER}T|P{_INNER}P)E")

SHORTEST = 9  # B T BTXSE T E


def accepts(string: str) -> bool:
    """True when ``string`` is an embedded Reber string."""
    return _EMBEDDED.fullmatch(string) is not None


def _embedded_graph() -> dict[str, dict[str, str]]:
    """Edges of the embedded grammar; inner states carry their branch, e.g. 'T3'."""
    graph = {"start": {"B": "fork"}, "fork": {"T": "T0", "P": "P0"}, "join": {"E": "end"}}
    for branch in "TP":
        for state, edges in REBER.items():
            graph[f"{branch}{state}"] = {sym: f"{branch}{nxt}" for sym, nxt in edges}
        graph[f"{branch}7"] = {branch: "join"}
    return graph


GRAPH = _embedded_graph()


def generate(rng: random.Random) -> str:
    """One embedded Reber string, each branch taken with probability 1/2."""
    state, symbols = "start", []
    while state != "end":
        symbol = rng.choice(sorted(GRAPH[state]))
        symbols.append(symbol)
        state = GRAPH[state][symbol]
    return "".join(symbols)


def successors(string: str) -> list[set[str]]:
    """The legal next symbols after each prefix string[: t + 1] (empty after the final E)."""
    state, legal = "start", []
    for symbol in string:
        state = GRAPH[state][symbol]
        legal.append(set(GRAPH.get(state, {})))
    return legal


@dataclass(frozen=True)
class ReberOptions(GeneratedOptions):
    length: int = 30  # steps; strings of up to length + 1 symbols (about 99.9% of draws)

    def __post_init__(self) -> None:
        super().__post_init__()
        check_at_least("length", self.length, SHORTEST - 1)


class ReberTask(CachedTask):
    name = "reber"
    kind = "classification"
    input_size = len(ALPHABET)
    output_size = len(ALPHABET)
    metric_name = "legal_rate"
    metric_higher_is_better = True

    def __init__(self, options: ReberOptions) -> None:
        super().__init__()
        self.options = options
        self.length = options.length

    def _build(self, split: Split) -> SequenceSet:
        opts = self.options
        count = opts.sequences_in(split)
        rng = random.Random(opts.split_seed(self.name, split))
        strings = [draw(rng, opts.length + 1) for _ in range(count)]
        return encode(strings, opts.length)

    def baseline(self) -> Baseline:
        symbol = self.most_frequent_successor()
        guesses = torch.full(self.data("valid").targets.shape, INDEX[symbol])
        value = legal_rate(guesses, self.data("valid"))
        return Baseline(
            value,
            "valid_metric",
            f"always predicting {symbol!r}, the most frequent next symbol in the training "
            f"strings, is a legal successor at {value:.1%} of validation steps; a model that "
            "learnt the grammar predicts a legal successor at every step",
        )

    def most_frequent_successor(self) -> str:
        train = self.data("train")
        counts = torch.bincount(train.targets[train.weights > 0], minlength=len(ALPHABET))
        return ALPHABET[int(counts.argmax())]

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        return legal_rate(outputs.detach().argmax(dim=-1), data)


def legal_rate(guesses: torch.Tensor, data: SequenceSet) -> float:
    """Fraction of target steps whose guessed symbol index [N, T] is a legal successor."""
    legal = data.extras["legal"].gather(-1, guesses.unsqueeze(-1)).squeeze(-1)
    return metrics.weighted_mean(legal.float(), data.weights)


def draw(rng: random.Random, longest: int) -> str:
    """A string of at most ``longest`` symbols; longer draws are discarded and redrawn."""
    string = generate(rng)
    while len(string) > longest:
        string = generate(rng)
    return string


def encode(strings: list[str], length: int) -> SequenceSet:
    count = len(strings)
    tokens = torch.zeros(count, length + 1, dtype=torch.long)
    weights = torch.zeros(count, length)
    legal = torch.zeros(count, length, len(ALPHABET), dtype=torch.bool)
    for row, string in enumerate(strings):
        steps = len(string) - 1
        tokens[row, : len(string)] = torch.tensor([INDEX[symbol] for symbol in string])
        weights[row, :steps] = 1.0
        for step, allowed in enumerate(successors(string)[:steps]):
            legal[row, step, [INDEX[symbol] for symbol in allowed]] = True
    inputs = F.one_hot(tokens[:, :-1], len(ALPHABET)).float() * weights.unsqueeze(-1)
    return SequenceSet(inputs, tokens[:, 1:], weights, {"legal": legal})


def build(options: Mapping[str, Any], base_dir: Path, source: str) -> ReberTask:
    return ReberTask(parse_options(ReberOptions, options, source, "reber"))
