"""Imported once by the local pool's fork server (see sweeper.sweep.pool), never by anything else.

Every worker process forked from the server starts with torch, optuna and the trainer loaded.
"""

import atexit
import contextlib
import gc
import os
import signal

from sweeper.sweep.pool import collector_paused

# The server outlives the launcher briefly and holds the launcher's stdout and stderr until
# it is gone, so whoever reads them (a pipe, a test, CI) waits for it. It keeps no state and
# its workers have ended, so it skips the interpreter's teardown of torch (about a second).
atexit.register(os._exit, 0)

# SIGTERM sent to the launcher's whole process group (timeout, service managers, containers)
# must not end the server: the pool sees its workers' status pipes close, takes them all for
# dead and kills them mid-trial. It still exits with the launcher; its workers get the
# default handling back, and each running worker installs its own stop handler.
signal.signal(signal.SIGTERM, signal.SIG_IGN)
os.register_at_fork(after_in_child=lambda: signal.signal(signal.SIGTERM, signal.SIG_DFL))

# a failed preload only costs time: each worker then loads what it needs itself
with contextlib.suppress(Exception), collector_paused():
    from sweeper.sweep.workers import load_trial_machinery  # torch, optuna and the trainer

    load_trial_machinery()

# Whatever the server has loaded stays for good: frozen, the collectors of the forked workers
# never walk it (nor copy its memory pages by touching them).
gc.freeze()
