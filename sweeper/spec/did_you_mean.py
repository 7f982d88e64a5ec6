"""'Did you mean ...?' for misspelt keys and values."""

from __future__ import annotations

import difflib
from collections.abc import Iterable


def closest(word: str, candidates: Iterable[str]) -> str | None:
    """The candidate nearest to ``word``, or None when nothing is close."""
    matches = difflib.get_close_matches(word, list(candidates), n=1, cutoff=0.6)
    return matches[0] if matches else None
