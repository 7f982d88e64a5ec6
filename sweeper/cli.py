"""The command line: parse, call the library, turn SweeperError into a message and exit code.

Each command imports what it needs when it runs (start-up speed: `sweeper check` must not
wait for torch, and `sweeper run` starts its pool before torch loads).
"""

from __future__ import annotations

import atexit
import gc
from pathlib import Path
from typing import TYPE_CHECKING

import click

from sweeper.errors import Interrupted, SweeperError

if TYPE_CHECKING:
    from sweeper.spec.sections import Spec


class SweeperGroup(click.Group):
    """Runs a command and maps our errors to one line on stderr and an exit code, once."""

    def invoke(self, ctx: click.Context) -> object:
        try:
            return super().invoke(ctx)
        except SweeperError as error:
            from sweeper.store.connect import redact

            click.echo(f"sweeper: error: {redact(str(error))}", err=True)
            ctx.exit(error.exit_code)
        except KeyboardInterrupt:
            click.echo("sweeper: interrupted", err=True)
            ctx.exit(Interrupted.exit_code)
        return None


@click.group(cls=SweeperGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="sweeper")
def main() -> None:
    """Hyperparameter sweeps for recurrent networks (unroll, width, clipping, learning rate)."""


@main.command()
@click.argument("specs", nargs=-1, required=True, type=click.Path(dir_okay=False))
def check(specs: tuple[str, ...]) -> None:
    """Validate spec files; print the search space and the planned budget."""
    from sweeper.spec.describe import describe_spec
    from sweeper.spec.loading import load_spec

    for path in specs:
        click.echo(describe_spec(load_spec(path)))
    from sweeper.training.numerics import trainer_line  # loads torch: after the specs' checks

    click.echo(trainer_line())


@main.command()
@click.argument("spec_path", metavar="SPEC", type=click.Path(dir_okay=False))
@click.option(
    "--workers",
    type=int,
    help="Worker processes (overrides study.workers); 0 queues the trials for `sweeper worker`.",
)
@click.option("--trials", type=int, help="Trial budget (overrides study.trials).")
@click.option(
    "--storage",
    help="Study database: a .db path (relative to the current folder) or a storage URL. "
    "Default: study.storage, whose path is relative to the spec's folder.",
)
@click.option("--report", "report_path", type=click.Path(dir_okay=False), help="Summary path.")
@click.option("--cluster", metavar="ADDRESS", help="Place the workers on this Dask scheduler.")
def run(
    spec_path: str,
    workers: int | None,
    trials: int | None,
    storage: str | None,
    report_path: str | None,
    cluster: str | None,
) -> None:
    """Create the study or continue it, run it to its budget, write the summary."""
    from sweeper.spec.loading import load_spec
    from sweeper.sweep.pool import collector_paused, local_pool

    here = None if workers == 0 else workers

    def read(check_task: bool) -> Spec:
        spec = load_spec(spec_path, check_task)
        return spec.with_overrides(trials=trials, workers=here, storage=storage)

    if workers == 0:
        _queue(read(check_task=True))
        return
    if not cluster:  # a cluster's workers bring their own cores
        _warn_if_crowded(read(check_task=False))
    # The pool's processes load torch while this one checks the spec against its task.
    with local_pool(0 if cluster else read(check_task=False).study.workers) as pool:
        with collector_paused():  # checking the spec against its task imports torch
            spec = read(check_task=True)
            from sweeper.sweep.launcher import run_sweep

        result = run_sweep(spec, cluster=cluster, pool=pool)
    _finish(result, report_path)


def _queue(spec: Spec) -> None:
    from sweeper.store.connect import redact
    from sweeper.sweep.launcher import queue_only

    queue_only(spec)  # its display has logged the study's line on stderr
    click.echo(f"start workers with: sweeper worker {redact(spec.storage_location)}")


@main.command()
@click.argument("study_location", metavar="STUDY")
@click.option("--workers", type=int, help="Worker processes (default: as stored).")
@click.option("--trials", type=int, help="New trial budget (default: as stored).")
@click.option("--report", "report_path", type=click.Path(dir_okay=False), help="Summary path.")
def resume(
    study_location: str, workers: int | None, trials: int | None, report_path: str | None
) -> None:
    """Continue an interrupted study from the spec stored inside it."""
    from sweeper.sweep.launcher import run_sweep
    from sweeper.sweep.study import load_existing

    _study, spec = load_existing(study_location)
    spec = spec.with_overrides(trials=trials, workers=workers, storage=study_location)
    _warn_if_crowded(spec)
    _finish(run_sweep(spec), report_path)


def _warn_if_crowded(spec: Spec) -> None:
    """One line on stderr when the local workers' torch threads outnumber the cores."""
    from sweeper.sweep.cores import share_of_cores, usable_cores

    workers, cores = spec.study.workers, usable_cores()
    threads = spec.training.threads or share_of_cores(workers)
    if workers * threads > cores:
        click.echo(
            f"sweeper: warning: {workers} workers x {threads} torch threads on {cores} cores: "
            f"trials slow each other down; use --workers {max(1, cores // threads)}",
            err=True,
        )


@main.command()
@click.argument("study_location", metavar="STUDY")
@click.option("--report", "report_path", type=click.Path(dir_okay=False), help="Summary path.")
def worker(study_location: str, report_path: str | None) -> None:
    """Join a study from this host and work until its budget is met.

    The worker that finds no trial running or waiting at its end writes the summary, as
    `sweeper run` does; the others say how to write it once the last trial ends.
    """
    from sweeper.store.connect import redact
    from sweeper.sweep.launcher import join_sweep

    result = join_sweep(study_location, tell=lambda line: click.echo(line, err=True))
    _final_line(result.snapshot.line())
    counts = result.snapshot.counts
    if counts.running or counts.waiting:
        # A page written now would be stale as soon as the other workers' trials end.
        where = f" -o {report_path}" if report_path else ""
        click.echo(
            f"summary not written: {counts.running} trials running, {counts.waiting} waiting "
            f"elsewhere; the last worker writes it, or: sweeper report {redact(study_location)}"
            f"{where}"
        )
        return
    for line in _settled_choice(result.location, result.study_name):
        click.echo(line)
    _write_summary(result.location, report_path, result.study_name)


def entry() -> None:
    """The `sweeper` command: ``main`` with a quicker exit."""
    # Freezing moves every object out of the collector's reach, so the interpreter's final
    # collections skip torch's large object graph: about a second at every exit.
    atexit.register(gc.freeze)  # registered first, so it runs after every other exit handler
    main(prog_name="sweeper")


def _final_line(line: str) -> None:
    """The study's final line on stdout, unless the progress log already ended with it."""
    from sweeper.sweep.progress import writes_plain_lines

    if not writes_plain_lines():  # a live bar drew it; say it in words once
        click.echo(line)


def _finish(result: object, report_path: str | None) -> None:
    from sweeper.store.connect import redact
    from sweeper.sweep.launcher import SweepResult

    assert isinstance(result, SweepResult)
    if result.queued == 0 and result.ran == 0:
        click.echo(
            f"budget already met ({result.snapshot.counts.finished} finished trials); "
            "raise --trials to run more"
        )
    _final_line(result.snapshot.line())
    choice = _settled_choice(result.location, result.study_name)
    for line in choice or ([result.best_line] if result.best_line else []):
        click.echo(line)
    click.echo(f"study: {redact(result.location)}")
    _write_summary(result.location, report_path, result.study_name)


def _settled_choice(location: str, study_name: str) -> list[str]:
    """The confirmed choice, stored in the study and said in words (none for a study without
    a completed trial)."""
    from sweeper.results.choice import settle_choice
    from sweeper.sweep.study import load_existing

    study, spec = load_existing(location, study_name)
    return settle_choice(study, spec)


def _write_summary(location: str, report_path: str | None, study_name: str) -> None:
    output = Path(report_path) if report_path else default_report_path(location)
    try:
        from sweeper.report.render import build_report
    except ImportError:  # the summary is optional until its package is installed
        return
    try:
        written = build_report(location, output, study_name)
    except KeyboardInterrupt:
        raise _summary_interrupted(location, report_path) from None
    click.echo(f"summary: {written}")


def _summary_interrupted(location: str, report_path: str | None) -> Interrupted:
    """The sweep is over and stored; only the page is missing, and one command writes it."""
    from sweeper.store.connect import redact

    where = f" -o {report_path}" if report_path else ""
    return Interrupted(
        "interrupted while writing the summary; the study is intact. "
        f"Write the summary with: sweeper report {redact(location)}{where}"
    )


def default_report_path(location: str) -> Path:
    """Beside the study database (or in runs/ for a server URL)."""
    from sweeper.store.connect import sqlite_path, storage_url

    path = sqlite_path(storage_url(location))
    if path is None:
        return Path("runs") / "summary.html"
    return path.with_suffix(".html")


@main.command()
@click.argument("study_location", metavar="STUDY")
def status(study_location: str) -> None:
    """Trials by state, best so far, running trials with epoch and age, ETA.

    Also says when the summary beside the study (where `run` writes it by default) misses
    trials that finished after it was written; a summary written elsewhere is not looked at.
    """
    from sweeper.results.status import choice_lines, stale_summary_line, status_table
    from sweeper.sweep.progress import snapshot
    from sweeper.sweep.study import budget_of, load_existing

    study, spec = load_existing(study_location, read_only=True)
    snap = snapshot(study, budget_of(spec), spec.study.workers)
    click.echo(status_table(snap))
    for line in choice_lines(study, spec):
        click.echo(line)
    page = default_report_path(study_location)
    stale = stale_summary_line(page, study.get_trials(deepcopy=False), study_location)
    if stale:
        click.echo(stale)


@main.command()
@click.argument("study_location", metavar="STUDY")
@click.option("-o", "--output", type=click.Path(dir_okay=False), help="Where to write the page.")
def report(study_location: str, output: str | None) -> None:
    """Write the static HTML summary of a study."""
    from sweeper.report.render import build_report

    path = Path(output) if output else default_report_path(study_location)
    click.echo(f"summary: {build_report(study_location, path)}")


@main.command()
@click.argument("study_location", metavar="STUDY")
@click.option("--format", "fmt", type=click.Choice(["csv", "json", "sqlite"]), required=True)
@click.option(
    "-o",
    "--output",
    type=click.Path(),
    required=True,
    help="Output path; csv writes two files named after it (x.csv: x_trials.csv, x_epochs.csv).",
)
def export(study_location: str, fmt: str, output: str) -> None:
    """Write flat tables of trials, parameters and epochs.

    json and sqlite write the one file PATH; csv writes one file per table beside it:
    -o x.csv gives x_trials.csv and x_epochs.csv.
    """
    from sweeper.report.export import export_study, written_line

    written = export_study(study_location, Path(output), fmt)  # type: ignore[arg-type]
    click.echo(written_line(written, Path(output)))


@main.command()
@click.argument("study_location", metavar="STUDY")
@click.argument("trial_number", metavar="TRIAL", type=click.IntRange(min=0))
def replay(study_location: str, trial_number: int) -> None:
    """Retrain one trial from its parameters and seed; compare each epoch with its record.

    Exits 0 when every recorded value agrees exactly, 1 when any differs.
    """
    from sweeper.results.replay import (
        epoch_lines,
        header_lines,
        plan_replay,
        run_replay,
        verdict_line,
    )
    from sweeper.sweep.study import load_existing

    study, spec = load_existing(study_location, read_only=True)
    plan = plan_replay(study, spec, trial_number)
    click.echo("\n".join(header_lines(plan)))
    comparisons = run_replay(plan, lambda c: click.echo("\n".join(epoch_lines(c))))
    click.echo(verdict_line(comparisons))
    if any(c.differing for c in comparisons):
        click.get_current_context().exit(1)


@main.command()
@click.argument("study_location", metavar="STUDY")
@click.option(
    "--spec",
    "spec_path",
    type=click.Path(dir_okay=False),
    help="Write the study's spec with its search fixed at the best values to this new file.",
)
@click.option("--retrain", is_flag=True, help="Fit the best configuration on train + valid data.")
@click.option(
    "--save", "save_path", type=click.Path(dir_okay=False), help="Where --retrain saves the model."
)
def best(study_location: str, spec_path: str | None, retrain: bool, save_path: str | None) -> None:
    """Print the best parameters as TOML tables to merge into a spec by hand.

    With --spec PATH, also write the study's whole spec with its search fixed at those
    values: a one-trial study of its own, ready for `sweeper run PATH`. With --retrain
    --save PATH, train them on the training plus validation data for the epochs the trial
    ran, score the held-out split and save the model (sweeper.load_model).
    """
    from sweeper.results.best import (
        ensure_refittable,
        epoch_line,
        fragment,
        refit_best,
        refit_lines,
        start_line,
        write_fixed_spec,
    )
    from sweeper.results.saved_model import save_model
    from sweeper.sweep.study import load_existing

    if retrain != (save_path is not None):
        raise click.UsageError("--retrain and --save PATH go together")
    study, spec = load_existing(study_location, read_only=True)
    if save_path is not None:
        ensure_refittable(study, spec)
    click.echo(fragment(study, spec))
    if spec_path is not None:
        written = write_fixed_spec(study, spec, Path(spec_path))
        click.echo(f"# spec with the search fixed: {written} (run it with: sweeper run {written})")
    if save_path is None:
        return
    click.echo(start_line(study, spec))
    refit = refit_best(study, spec, lambda record: click.echo(epoch_line(record)))
    click.echo("\n".join(refit_lines(refit)))
    click.echo(f"# saved: {save_model(save_path, refit)}")


if __name__ == "__main__":  # pragma: no cover
    entry()
