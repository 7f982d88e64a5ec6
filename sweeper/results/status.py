"""A study's status table for the terminal."""

from __future__ import annotations

import io
from pathlib import Path

import optuna
from optuna.trial import FrozenTrial
from rich.console import Console
from rich.table import Table

from sweeper.errors import InputError
from sweeper.results.choice import confirmed_choice
from sweeper.results.summary_stamp import read_stamp
from sweeper.spec.sections import Spec
from sweeper.store import trial_words as words
from sweeper.store.connect import redact
from sweeper.sweep.progress import Snapshot, format_seconds


def _eta_text(snap: Snapshot) -> str:
    # With nothing running and budget left, no one is working on the study: an estimate of
    # when it will finish would only mislead.
    idle = snap.counts.running == 0 and snap.counts.finished < snap.budget
    if idle or snap.eta_seconds is None:
        return "-"
    return format_seconds(snap.eta_seconds)


def status_table(snap: Snapshot) -> str:
    counts = snap.counts
    summary = Table(title=f"study {snap.study_name}", show_header=True)
    columns = (
        "budget",
        words.FINISHED,
        words.STOPPED,
        words.FAILED,
        words.INTERRUPTED,
        words.RUNNING,
        words.WAITING,
    )
    for column in (*columns, "best", "ETA"):
        summary.add_column(column, justify="right")
    best = "-" if snap.best_value is None else f"{snap.best_value:.5g} (trial {snap.best_trial})"
    eta = _eta_text(snap)
    summary.add_row(
        str(snap.budget),
        str(counts.complete),
        str(counts.pruned),
        str(counts.failed),
        str(counts.interrupted),
        str(counts.running),
        str(counts.waiting),
        best,
        eta,
    )
    buffer = io.StringIO()
    console = Console(file=buffer, width=110, color_system=None)
    console.print(summary)
    if counts.confirmed or counts.confirming:
        console.print(
            f"confirmation trials (outside the budget): {counts.confirmed} finished, "
            f"{counts.confirming} running or waiting"
        )
    if snap.running:
        running = Table(title="running trials")
        for column in ("trial", "epoch", "age", "worker"):
            running.add_column(column)
        for trial in snap.running:
            running.add_row(
                str(trial.number),
                str(trial.epoch),
                format_seconds(trial.age_seconds),
                trial.worker,
            )
        console.print(running)
    if snap.retries:
        retries = Table(title="retried trials")
        retries.add_column("trial")
        retries.add_column("in place of trial")
        for number, original in snap.retries:
            retries.add_row(str(number), str(original))
        console.print(retries)
    return buffer.getvalue().rstrip()


def stale_summary_line(page: Path, trials: list[FrozenTrial], location: str) -> str | None:
    """A line when the summary at ``page`` misses trials that have finished since it was
    written; None when it is current, absent, or not stamped by sweeper."""
    stamp = read_stamp(page)
    finished = sum(trial.state.is_finished() for trial in trials)
    if stamp is None or stamp.finished >= finished:
        return None
    return (
        f"summary at {page} shows {stamp.finished} of the {finished} finished trials "
        f"(written {stamp.written:%Y-%m-%d %H:%M} UTC); "
        f"refresh with: sweeper report {redact(location)}"
    )


def choice_lines(study: optuna.Study, spec: Spec) -> list[str]:
    """The configuration the study chooses now (confirmed or not yet), in words."""
    try:
        return confirmed_choice(study, spec).lines()
    except InputError:  # nothing completed yet: the table says so
        return []
