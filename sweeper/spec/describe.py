"""A checked spec as plain text for the terminal: its task, baseline, space and budget."""

from __future__ import annotations

from sweeper.spec.checks import build_spec_task
from sweeper.spec.probe import describe_planned_compute
from sweeper.spec.schedule import Schedule, spec_schedule
from sweeper.spec.sections import Spec, budget_of
from sweeper.spec.space import Choices, Fixed, Range, SearchEntry
from sweeper.tasks import forecast_scores
from sweeper.tasks.base import Task


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
    study = spec.study
    schedule = spec_schedule(spec)
    lines = [
        f"{spec.source}: ok",
        f"  study    {study.name}: {study.objective} ({study.better} is better; {_score(spec)}), "
        f"sampler {study.sampler}, seed {study.seed}",
        f"  stopping {_rule(schedule)}" + (f"; {schedule.why}" if schedule.why else ""),
    ]
    if spec.is_objective_plugin:
        lines.append(f"  task     objective plugin {spec.task.function}")
    else:
        task = build_spec_task(spec)
        baseline = task.baseline()
        lines.append(f"  task     {task.describe()}")
        lines.append(f"  baseline {baseline.measure} {baseline.value:.5g} ({baseline.description})")
        lines.extend(_forecast_lines(task))
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
    lines.append(f"  confirm  {_confirmation(spec)}")
    if not spec.is_objective_plugin:
        lines.append(f"  compute  {_planned(spec)}")
    return "\n".join(lines)


def _confirmation(spec: Spec) -> str:
    confirm = spec.confirm
    if not confirm.enabled:
        return "off: the best trial is the choice, from one seed"
    return (
        f"the best {confirm.configurations} configurations again with {confirm.seeds} fresh "
        f"seed{'s' if confirm.seeds > 1 else ''} each, after the budget and outside it (up to "
        f"{confirm.configurations * confirm.seeds} more trials)"
    )


def _forecast_lines(task: Task) -> list[str]:
    """A series task's scoring, season and baselines in data units."""
    if not forecast_scores.is_forecast(task):
        return []
    return [f"  forecast {line}" for line in forecast_scores.check_lines(task)]  # type: ignore[arg-type]


def _score(spec: Spec) -> str:
    if spec.is_objective_plugin:
        return "the value the objective returns"
    score = spec.study.score
    if score == "recent_mean":
        return f"mean of the last {spec.study.recent_epochs} epochs"
    return score.replace("_", " ")


def _rule(schedule: Schedule) -> str:
    if schedule.rule in ("asha", "hyperband"):
        return f"{schedule.rule} from epoch {schedule.min_epochs}, reduction {schedule.reduction}"
    if schedule.rule == "median":
        return f"median from epoch {schedule.min_epochs}"
    return "none"


def _planned(spec: Spec) -> str:
    if spec.task.model is not None:
        return "planned compute not probed (the spec's own network)"
    return describe_planned_compute(spec, build_spec_task(spec))
