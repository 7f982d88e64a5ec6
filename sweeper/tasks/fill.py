"""Missing values of a series filled in time order: from the previous row, or linearly.

A cell counts as missing when it is empty, not a number, NaN or infinite. Both rules use
only the rows of the column itself; rows before the first known value take that value
(there is nothing earlier to carry), and linear filling keeps the last known value after
the last one (np.interp holds the ends flat).
"""

from __future__ import annotations

import numpy as np

from sweeper.errors import SpecError

FILLS = ("none", "previous", "linear")


def fill_missing(values: np.ndarray, how: str, names: tuple[str, ...], source: str) -> np.ndarray:
    """``values`` [rows, columns] with every non-finite cell filled by ``how``."""
    out = values.copy()
    for c, name in enumerate(names):
        out[:, c] = _fill_column(values[:, c], how, name, source)
    return out


def _fill_column(column: np.ndarray, how: str, name: str, source: str) -> np.ndarray:
    known = np.flatnonzero(np.isfinite(column))
    if len(known) == len(column):
        return column
    if not len(known):
        raise SpecError(
            source, "task.file", f"column {name!r} has no number at all; it cannot be filled"
        )
    rows = np.arange(len(column))
    if how == "linear":
        return np.interp(rows, known, column[known])
    # previous: each row takes the nearest known row at or before it (the first one before it)
    index = np.maximum.accumulate(np.where(np.isfinite(column), rows, -1))
    return column[np.where(index < 0, known[0], index)]
