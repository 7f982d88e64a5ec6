"""Plain-text views for the terminal: a checked spec, and a study's status table."""

from __future__ import annotations

import io

from rich.console import Console
from rich.table import Table

from sweeper.progress import Snapshot, format_seconds
from sweeper.space import Choices, Fixed, Range, SearchEntry
from sweeper.spec import Spec
from sweeper.study import budget_of


def describe_entry(entry: SearchEntry) -> str:
    if isinstance(entry, Fixed):
        return f"fixed {entry.value!r}"
    if isinstance(entry, Choices):
        return "one of " + ", ".join(repr(v) for v in entry.values)
    assert isinstance(entry, Range)
    kind = "integer" if entry.integer else "real"
    low, high = (int(entry.low), int(entry.high)) if entry.integer else (entry.low, entry.high)
    scale = "log" if entry.log else "linear"
    step = f" step {entry.step:g}" if entry.step else ""
    return f"{kind} {low:g}..{high:g} ({scale}{step})"


def describe_spec(spec: Spec) -> str:
    from sweeper.checks import build_spec_task

    study = spec.study
    lines = [
        f"{spec.source}: ok",
        f"  study    {study.name}: {study.goal} {study.objective}, sampler {study.sampler}, "
        f"seed {study.seed}, stopping rule {spec.stopping.rule}",
    ]
    if spec.is_objective_plugin:
        lines.append(f"  task     objective plugin {spec.task['function']}")
    else:
        task = build_spec_task(spec)
        baseline = task.baseline()
        lines.append(f"  task     {task.describe()}")
        lines.append(f"  baseline {baseline.measure} {baseline.value:.5g} ({baseline.description})")
    lines.append("  search")
    width = max((len(name) for name in spec.search), default=0)
    for name, entry in spec.search.items():
        lines.append(f"    {name:<{width}}  {describe_entry(entry)}")
    if spec.training.defaults:
        fixed = ", ".join(f"{k}={v!r}" for k, v in spec.training.defaults.items())
        lines.append(f"  training {fixed}")
    budget = budget_of(spec)
    epochs = "" if spec.is_objective_plugin else f" x {spec.training.epochs} epochs"
    lines.append(
        f"  budget   {budget} trials{epochs} on {study.workers} worker(s); "
        f"storage {spec.storage_location}"
    )
    return "\n".join(lines)


def status_table(snap: Snapshot) -> str:
    counts = snap.counts
    summary = Table(title=f"study {snap.study_name}", show_header=True)
    columns = ("budget", "complete", "stopped", "failed", "interrupted", "running", "waiting")
    for column in (*columns, "best", "ETA"):
        summary.add_column(column, justify="right")
    best = "-" if snap.best_value is None else f"{snap.best_value:.5g} (trial {snap.best_trial})"
    eta = "-" if snap.eta_seconds is None else format_seconds(snap.eta_seconds)
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
        retries = Table(title="retries")
        retries.add_column("trial")
        retries.add_column("retries trial")
        for number, original in snap.retries:
            retries.add_row(str(number), str(original))
        console.print(retries)
    return buffer.getvalue().rstrip()
