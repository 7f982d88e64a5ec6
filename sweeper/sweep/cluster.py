"""Place sweeper workers on an existing Dask cluster through joblib's dask backend."""

from __future__ import annotations

import threading
from collections.abc import Callable

from sweeper.errors import RunFailure
from sweeper.store.connect import redact
from sweeper.sweep.workers import in_background, work


def run_on_cluster(
    address: str,
    location: str,
    study_name: str,
    workers: int,
    threads: int,
    on_done: Callable[[], None],
    errors: list[BaseException],
) -> threading.Thread:
    """Start ``workers`` sweeper workers, one per Dask task, from a helper thread.

    Every worker opens ``location`` itself, so it must be reachable from the cluster's
    machines: a PostgreSQL URL, or a SQLite file on a disk they all share.
    """

    return in_background(
        lambda: _run(address, location, study_name, workers, threads),
        "sweeper-cluster",
        on_done,
        errors,
    )


def _run(address: str, location: str, study_name: str, workers: int, threads: int) -> None:
    try:
        import joblib
        from dask.distributed import Client
    except ImportError:
        raise RunFailure(
            "--cluster needs Dask's distributed scheduler: pip install 'sweeper[cluster]'"
        ) from None
    try:
        client = Client(address, timeout="20s")
    except OSError as error:
        raise RunFailure(
            f"cannot reach the Dask scheduler at {address}: {redact(str(error))}"
        ) from None
    with client, joblib.parallel_config(backend="dask"):
        joblib.Parallel(n_jobs=workers)(
            joblib.delayed(work)(location, study_name, index, threads, None, False, True)
            for index in range(workers)
        )
