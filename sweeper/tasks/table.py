"""A CSV file read into named numeric columns, with errors that point at the bad cell."""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sweeper.did_you_mean import closest
from sweeper.errors import SpecError
from sweeper.tasks.files import read_utf8


@dataclass(frozen=True)
class Table:
    """The header and the data rows of a CSV file; ``lines`` holds each row's file line."""

    path: Path
    columns: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    lines: tuple[int, ...]

    def numeric_columns(self) -> tuple[str, ...]:
        """Columns whose first non-empty cell is a number (a timestamp column is left out)."""
        return tuple(name for i, name in enumerate(self.columns) if self._numeric(i))

    def _numeric(self, i: int) -> bool:
        first = next((row[i] for row in self.rows if row[i]), "")
        return _number(first) is not None

    def values(
        self, names: tuple[str, ...], source: str, key: str, missing: bool = False
    ) -> np.ndarray:
        """The named columns as float64 [rows, len(names)]; every cell must be a number, or,
        with ``missing``, a cell that is not one is NaN (for a series' ``fill`` option)."""
        for name in names:
            self._check_column(name, source, key)
        index = [self.columns.index(name) for name in names]
        out = np.empty((len(self.rows), len(names)))
        for r in range(len(self.rows)):
            for c, i in enumerate(index):
                out[r, c] = self._maybe(r, i) if missing else self._cell(r, i, source)
        return out

    def _check_column(self, name: str, source: str, key: str) -> None:
        if name in self.columns:
            return
        close = closest(name, self.columns)
        hint = f"did you mean {close!r}? " if close else ""
        raise SpecError(
            source,
            key,
            f"no column {name!r} in {self.path.name}; {hint}columns: {', '.join(self.columns)}",
        )

    def _maybe(self, r: int, i: int) -> float:
        value = _number(self.rows[r][i])
        return np.nan if value is None else value

    def _cell(self, r: int, i: int, source: str) -> float:
        cell = self.rows[r][i]
        value = _number(cell)
        if value is None:
            raise SpecError(
                source,
                "task.file",
                f"{_cell_kind(cell)} cell {cell!r} in column {self.columns[i]!r} at row {r + 1} "
                f"(line {self.lines[r]} of {self.path.name}); fix the cell, or for a series set "
                'fill = "previous" or "linear" in [task]',
            )
        return value


def _cell_kind(cell: str) -> str:
    if not cell:
        return "empty"
    try:
        float(cell)
    except ValueError:
        return "non-numeric"
    return "NaN or infinite"


def _number(cell: str) -> float | None:
    try:
        value = float(cell)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def read_table(path: Path, source: str) -> Table:
    """Read a CSV with a header row; blank lines are skipped, ragged rows refused."""
    reader = csv.reader(io.StringIO(read_utf8(path, source)))
    header = tuple(cell.strip() for cell in next(reader, []))
    if not header:
        raise SpecError(source, "task.file", f"{path} is empty; it needs a header row and data")
    _check_header(header, path, source)
    rows: list[tuple[str, ...]] = []
    lines: list[int] = []
    for row in reader:
        if not row:
            continue
        if len(row) != len(header):
            raise SpecError(
                source,
                "task.file",
                f"row {len(rows) + 1} (line {reader.line_num} of {path.name}) has {len(row)} "
                f"cells, the header has {len(header)}; make every row as wide as the header",
            )
        rows.append(tuple(cell.strip() for cell in row))
        lines.append(reader.line_num)
    if not rows:
        raise SpecError(source, "task.file", f"{path} has a header but no data rows")
    return Table(path, header, tuple(rows), tuple(lines))


def _check_header(header: tuple[str, ...], path: Path, source: str) -> None:
    repeated = sorted({name for name in header if header.count(name) > 1})
    if repeated:
        raise SpecError(
            source,
            "task.file",
            f"{path.name} names column(s) {', '.join(map(repr, repeated))} more than once; "
            "give each column its own name",
        )
