"""NPZ archives named by a spec: named numeric arrays, with errors that say what to fix.

Archives are read with ``allow_pickle=False``: a data file is data, never code.
"""

from __future__ import annotations

import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sweeper.errors import SpecError

SAVE_HINT = "write it with numpy.savez(path, name=array, ...)"


def read_npz(path: Path, source: str, key: str = "task.file") -> dict[str, np.ndarray]:
    """Every array of the archive at ``path``, by name."""
    if not zipfile.is_zipfile(path):
        raise SpecError(source, key, f"{path} is not an NPZ archive; {SAVE_HINT}")
    try:
        with np.load(path, allow_pickle=False) as archive:
            return {name: archive[name] for name in archive.files}
    except ValueError as error:  # object arrays need pickle, which we refuse
        raise SpecError(
            source, key, f"{path} holds an array of Python objects ({error}); save numeric arrays"
        ) from None
    except (zipfile.BadZipFile, OSError, EOFError) as error:
        raise SpecError(source, key, f"{path} cannot be read ({error}); {SAVE_HINT}") from None


def require(
    arrays: dict[str, np.ndarray], name: str, path: Path, source: str, key: str
) -> np.ndarray:
    """The numeric array ``name``; a missing or non-numeric one is a SpecError at ``key``."""
    if name not in arrays:
        found = ", ".join(sorted(arrays)) or "none"
        raise SpecError(
            source,
            key,
            f"no array {name!r} in {path.name} (arrays: {found}); set {key} to one of them "
            f"or {SAVE_HINT}",
        )
    array = arrays[name]
    if not (np.issubdtype(array.dtype, np.number) or array.dtype == np.bool_):
        raise SpecError(
            source,
            key,
            f"array {name!r} of {path.name} is {array.dtype}, not numbers; save numbers",
        )
    return array


def first_nonfinite(array: np.ndarray) -> tuple[int, ...] | None:
    """Index of the first NaN or infinite value (in C order), or None when all are finite."""
    bad = ~np.isfinite(array)
    if not bad.any():
        return None
    return tuple(int(i) for i in np.unravel_index(int(np.argmax(bad)), array.shape))


@dataclass(frozen=True)
class NpzColumns:
    """Series columns from an NPZ archive: each 1-D numeric array is one named column."""

    path: Path
    arrays: dict[str, np.ndarray]

    @property
    def columns(self) -> tuple[str, ...]:
        return tuple(self.arrays)

    def numeric_columns(self) -> tuple[str, ...]:
        return tuple(name for name, array in self.arrays.items() if _is_column(array))

    def values(
        self, names: tuple[str, ...], source: str, key: str, missing: bool = False
    ) -> np.ndarray:
        """The named columns as float64 [rows, len(names)], all the same length; all finite
        unless ``missing`` (NaN and infinite values are then left for ``fill``)."""
        columns = [self._column(name, source, key, missing) for name in names]
        for name, column in zip(names[1:], columns[1:], strict=True):
            if len(column) != len(columns[0]):
                raise SpecError(
                    source,
                    key,
                    f"arrays {names[0]!r} ({len(columns[0])} values) and {name!r} "
                    f"({len(column)} values) of {self.path.name} differ in length; "
                    "give every column one value per row",
                )
        return np.column_stack(columns)

    def _column(self, name: str, source: str, key: str, missing: bool) -> np.ndarray:
        array = require(self.arrays, name, self.path, source, key).astype(np.float64)
        if array.ndim != 1:
            raise SpecError(
                source,
                key,
                f"array {name!r} of {self.path.name} has shape {array.shape}; a series column "
                "must be 1-D (one value per row)",
            )
        bad = None if missing else first_nonfinite(array)
        if bad is not None:
            raise SpecError(
                source,
                "task.file",
                f"array {name!r} of {self.path.name} has a NaN or infinite value at row "
                f"{bad[0] + 1} (index {bad[0]}); fill it in, or set "
                'fill = "previous" or "linear" in [task]',
            )
        return array


def _is_column(array: np.ndarray) -> bool:
    return array.ndim == 1 and bool(np.issubdtype(array.dtype, np.number))


def read_npz_columns(path: Path, source: str) -> NpzColumns:
    arrays = read_npz(path, source)
    if not arrays:
        raise SpecError(source, "task.file", f"{path} holds no arrays; {SAVE_HINT}")
    return NpzColumns(path, arrays)
