"""Seeds derived from the study seed, so that every trial and worker is reproducible."""

from __future__ import annotations

import hashlib


def derive_seed(*parts: object) -> int:
    """Return a 31-bit seed that depends on every part (stable across runs and machines)."""
    text = "/".join(str(part) for part in parts)
    digest = hashlib.sha256(text.encode("utf-8")).digest()
    return int.from_bytes(digest[:4], "big") & 0x7FFFFFFF


def trial_seed(study_seed: int, trial_number: int) -> int:
    """Seed of one trial: model initialisation, shuffling and dropout all draw from it."""
    return derive_seed("trial", study_seed, trial_number)


def sampler_seed(study_seed: int, worker_index: int, trials_in_study: int) -> int:
    """Seed of one worker's sampler.

    Identically seeded samplers draw the same start-up configurations, so each worker (and
    each later launch, which finds more trials in the study) gets a seed of its own.
    """
    return derive_seed("sampler", study_seed, worker_index, trials_in_study)
