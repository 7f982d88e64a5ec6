"""What a study looks like right now: counts, best so far, running trials, ETA; and its display."""

from __future__ import annotations

import datetime as dt
import math
import sys
import time
from dataclasses import dataclass
from typing import IO, Any

import optuna
from optuna.trial import FrozenTrial, TrialState

from sweeper.store import trial_words as words
from sweeper.store.attrs import TrialInfo
from sweeper.sweep.study import Tally, tally


@dataclass(frozen=True)
class RunningTrial:
    number: int
    epoch: int
    age_seconds: float
    worker: str


@dataclass(frozen=True)
class Snapshot:
    study_name: str
    budget: int
    counts: Tally
    best_value: float | None
    best_trial: int | None
    running: tuple[RunningTrial, ...]
    eta_seconds: float | None
    retries: tuple[tuple[int, int], ...]  # (retry trial, original trial)

    def line(self) -> str:
        c = self.counts
        best = "-" if self.best_value is None else f"{self.best_value:.5g} (#{self.best_trial})"
        eta = "-" if self.eta_seconds is None else format_seconds(self.eta_seconds)
        interrupted = f", {c.interrupted} {words.INTERRUPTED}" if c.interrupted else ""
        confirming = ""
        if c.confirmed or c.confirming:
            confirming = f"; confirmation {c.confirmed} done, {c.confirming} to go"
        return (
            f"{self.study_name}: {c.finished}/{self.budget} done "
            f"({c.complete} {words.FINISHED}, {c.pruned} {words.STOPPED}), "
            f"{c.running} {words.RUNNING}, {c.failed} {words.FAILED}{interrupted}{confirming}; "
            f"best {best}; ETA {eta}"
        )


def format_seconds(seconds: float) -> str:
    seconds = max(0, round(seconds))
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}h{minutes:02d}m" if hours else f"{minutes}m{secs:02d}s"


def _age(trial: FrozenTrial, now: dt.datetime) -> float:
    if trial.datetime_start is None:
        return 0.0
    return max(0.0, (now - trial.datetime_start).total_seconds())


def _eta(trials: list[FrozenTrial], counts: Tally, budget: int, workers: int) -> float | None:
    durations = [
        (t.datetime_complete - t.datetime_start).total_seconds()
        for t in trials
        if t.state in (TrialState.COMPLETE, TrialState.PRUNED)
        and t.datetime_start is not None
        and t.datetime_complete is not None
    ]
    remaining = max(0, budget - counts.finished) + counts.confirming  # confirmation comes after
    if remaining == 0:
        return 0.0
    if not durations:
        return None
    mean = sum(durations) / len(durations)
    waves = math.ceil(remaining / max(1, workers))
    return waves * mean


def _running(trial: FrozenTrial, now: dt.datetime) -> RunningTrial:
    info = TrialInfo.of(trial)
    epoch = max(trial.intermediate_values, default=info.epochs or 0)
    return RunningTrial(trial.number, epoch, _age(trial, now), info.worker)


def snapshot(study: optuna.Study, budget: int, workers: int) -> Snapshot:
    trials = study.get_trials(deepcopy=False)
    counts = tally(trials)
    complete = [t for t in trials if t.state == TrialState.COMPLETE and t.value is not None]
    best = None
    if complete:
        pick = min if study.direction == optuna.study.StudyDirection.MINIMIZE else max
        best = pick(complete, key=lambda t: float(t.value or 0.0))
    now = dt.datetime.now()
    running = tuple(_running(t, now) for t in trials if t.state == TrialState.RUNNING)
    retries = tuple(
        (t.number, origin) for t in trials if (origin := TrialInfo.of(t).failed_trial) is not None
    )
    return Snapshot(
        study_name=study.study_name,
        budget=budget,
        counts=counts,
        best_value=None if best is None else float(best.value),  # type: ignore[arg-type]
        best_trial=None if best is None else best.number,
        running=running,
        eta_seconds=_eta(trials, counts, budget, workers),
        retries=retries,
    )


def writes_plain_lines(stream: IO[str] | None = None) -> bool:
    """Whether a display on ``stream`` (stderr by default) logs plain lines, the final one
    included, rather than drawing a live bar: so whenever it is not a terminal."""
    return not (stream or sys.stderr).isatty()


class ProgressDisplay:
    """A live bar on a terminal; a plain log line every ``interval`` seconds elsewhere."""

    def __init__(self, stream: IO[str] | None = None, interval: float = 10.0) -> None:
        self.stream = stream or sys.stderr
        self.interval = interval
        self.live = not writes_plain_lines(self.stream)
        self._last_line = ""
        self._last_time = 0.0
        self._bar: Any = None
        self._task: Any = None

    def __enter__(self) -> ProgressDisplay:
        if self.live:
            from rich.console import Console
            from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

            self._bar = Progress(
                TextColumn("[bold]{task.description}"),
                BarColumn(),
                MofNCompleteColumn(),
                TextColumn("{task.fields[detail]}"),
                console=Console(file=self.stream),
                transient=False,
            )
            self._bar.start()
            self._task = self._bar.add_task("trials", total=1, detail="")
        return self

    def update(self, snap: Snapshot) -> None:
        if self._bar is not None and self._task is not None:
            c = snap.counts
            best = "-" if snap.best_value is None else f"{snap.best_value:.5g}"
            eta = "-" if snap.eta_seconds is None else format_seconds(snap.eta_seconds)
            detail = (
                f"{words.RUNNING} {c.running} | {words.STOPPED} {c.pruned} | "
                f"{words.FAILED} {c.failed} | "
                f"best {best} | ETA {eta}"
            )
            self._bar.update(self._task, total=snap.budget, completed=c.finished, detail=detail)
            return
        line = snap.line()
        now = time.monotonic()
        if (
            line != self._last_line and now - self._last_time >= self.interval
        ) or not self._last_line:
            print(line, file=self.stream, flush=True)
            self._last_line, self._last_time = line, now

    def final(self, snap: Snapshot) -> None:
        if self._bar is not None:
            self.update(snap)
            return
        if snap.line() != self._last_line:
            print(snap.line(), file=self.stream, flush=True)
            self._last_line = snap.line()

    def __exit__(self, *exc: object) -> None:
        if self._bar is not None:
            self._bar.stop()
