"""Imported once by the local pool's fork server (see sweeper.pool), never by anything else.

Every worker process forked from the server starts with torch, optuna and the trainer loaded.
"""

import contextlib

from sweeper.pool import load_trial_machinery

# a failed preload only costs time: each worker then loads what it needs itself
with contextlib.suppress(Exception):
    load_trial_machinery()
