"""The training hyperparameters of one trial, as a frozen, self-checking dataclass."""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

CELLS = ("elman", "gru", "lstm")
OPTIMIZERS = ("sgd", "adam", "rmsprop")


@dataclass(frozen=True)
class TrialParams:
    """Everything the trainer needs to know about one configuration.

    ``clip = 0`` turns gradient clipping off. ``momentum`` is used by SGD and RMSprop.
    """

    unroll: int = 20
    hidden: int = 32
    clip: float = 1.0
    lr: float = 1e-2
    cell: str = "lstm"
    layers: int = 1
    batch: int = 32
    dropout: float = 0.0
    optimizer: str = "adam"
    momentum: float = 0.9
    weight_decay: float = 0.0

    def __post_init__(self) -> None:
        for name in ("unroll", "hidden", "layers", "batch"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise ValueError(f"{name} must be a whole number >= 1, got {value!r}")
        if self.cell not in CELLS:
            raise ValueError(f"cell must be one of {', '.join(CELLS)}, got {self.cell!r}")
        if self.optimizer not in OPTIMIZERS:
            raise ValueError(
                f"optimizer must be one of {', '.join(OPTIMIZERS)}, got {self.optimizer!r}"
            )
        if not self.lr > 0:
            raise ValueError(f"lr must be > 0, got {self.lr!r}")
        if not self.clip >= 0:
            raise ValueError(f"clip must be >= 0 (0 turns clipping off), got {self.clip!r}")
        if not 0 <= self.dropout < 1:
            raise ValueError(f"dropout must be in [0, 1), got {self.dropout!r}")
        if not 0 <= self.momentum < 1:
            raise ValueError(f"momentum must be in [0, 1), got {self.momentum!r}")
        if not self.weight_decay >= 0:
            raise ValueError(f"weight_decay must be >= 0, got {self.weight_decay!r}")

    @classmethod
    def from_mapping(cls, values: Mapping[str, Any]) -> TrialParams:
        """Build from a trial's parameters; keys that are not training parameters are ignored."""
        known = {field.name for field in dataclasses.fields(cls)}
        kwargs = {key: value for key, value in values.items() if key in known}
        for name in ("unroll", "hidden", "layers", "batch"):
            if isinstance(kwargs.get(name), float) and float(kwargs[name]).is_integer():
                kwargs[name] = int(kwargs[name])
        for name in ("clip", "lr", "dropout", "momentum", "weight_decay"):
            if isinstance(kwargs.get(name), int) and not isinstance(kwargs[name], bool):
                kwargs[name] = float(kwargs[name])
        return cls(**kwargs)

    def as_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


PARAM_NAMES = tuple(field.name for field in dataclasses.fields(TrialParams))
