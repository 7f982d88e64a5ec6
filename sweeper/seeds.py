"""Seeds derived from the study seed, so that every trial and worker is reproducible."""

from __future__ import annotations

import hashlib
import os


def derive_seed(*parts: object) -> int:
    """Return a 31-bit seed that depends on every part (stable across runs and machines)."""
    text = "/".join(str(part) for part in parts)
    digest = hashlib.sha256(text.encode("utf-8")).digest()
    return int.from_bytes(digest[:4], "big") & 0x7FFFFFFF


def trial_seed(study_seed: int, trial_number: int) -> int:
    """Seed of one trial: model initialisation, shuffling and dropout all draw from it."""
    return derive_seed("trial", study_seed, trial_number)


def confirmation_seed(study_seed: int, searched_trial: int, round_: int) -> int:
    """Seed of a confirmation trial: round ``round_`` (1, 2, ...) of retraining the
    parameters of ``searched_trial``. A part of its own ("confirm") keeps it apart from
    every searched trial's seed."""
    return derive_seed("confirm", study_seed, searched_trial, round_)


def sampler_seed(study_seed: int, worker_index: int, stream: int) -> int:
    """Seed of one worker start's sampler.

    Identically seeded samplers draw the same start-up configurations. A count of the
    study's trials does not part them: after a kill and a quick resume, or two launches at
    once, it is often unchanged. So each start takes the study's next ``stream``
    (``sweeper.store.draw_streams``), which its trials record.
    """
    return derive_seed("sampler", study_seed, worker_index, stream)


def new_stream() -> int:
    """A fresh 31-bit stream number for one worker start (from the OS's random source)."""
    return int.from_bytes(os.urandom(4), "big") & 0x7FFFFFFF
