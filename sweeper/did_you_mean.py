"""'Did you mean ...?' for misspelt keys and values: one cut-off for the whole program.

A low layer on purpose: the spec readers and the task option parsers both use it.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable

# The similarity ratio (difflib.SequenceMatcher.ratio) a suggestion needs. difflib's own
# default is 0.6; 0.5 lets a short misspelling such as "adder" still find "adding" (0.545).
CUTOFF = 0.5

# Words sweeper once used, each pointing at the word that replaced it (a key or a value).
RENAMED = {
    "goal": "better",
    "minimize": "lower",
    "maximize": "higher",
}


def closest(word: str, candidates: Iterable[str]) -> str | None:
    """The candidate nearest to ``word`` (difflib.get_close_matches), or None when none is close.

    A renamed word points at its replacement whenever that is one of the candidates.
    """
    allowed = list(candidates)
    if RENAMED.get(word) in allowed:
        return RENAMED[word]
    matches = difflib.get_close_matches(word, allowed, n=1, cutoff=CUTOFF)
    return matches[0] if matches else None
