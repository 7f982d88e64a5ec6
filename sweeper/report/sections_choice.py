"""The first question: what should I use, and can I trust it?

``choice_section`` takes the chosen configuration and the task's baselines as plain values,
so that a configuration confirmed over several seeds, and a task with several named
baselines, slot in without touching the page: ``chosen_from_trials`` reads the choice the
sweep stored (confirmed over seeds) or else the best finished trial, ``baselines_of`` the one
baseline the study stores and ``series_baselines`` a forecasting study's named ones.
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from sweeper.report.collect import StudyTables
from sweeper.report.coverage import at_edge
from sweeper.report.escape import esc
from sweeper.report.html_parts import Cell, fmt, missing, num, para, section, table
from sweeper.report.ranking import best, ranked
from sweeper.results.fixed_spec import toml_value
from sweeper.store import trial_words as words


@dataclass(frozen=True)
class Chosen:
    """The configuration to use: its score over ``seeds`` training runs.

    A confirmed choice maps onto it field by field: its params, its mean as ``value``, its
    standard deviation as ``spread``, the number of its seeds, the runners-up it cannot be
    told apart from, and its confirmed flag.
    """

    trial: int
    params: dict[str, Any]
    value: float  # the mean over seeds
    spread: float = math.nan  # standard deviation over seeds; NaN with one seed
    seeds: int = 1
    runners_up: tuple[int, ...] = ()  # trials it cannot be told apart from
    confirmed: bool = False
    distributions: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class NamedBaseline:
    """A simple strategy's score on the task, in the data's units."""

    name: str
    value: float
    measure: str
    description: str = ""
    chosen_value: float | None = None  # the chosen's score in this measure, where not stored


def chosen_from_trials(tables: StudyTables) -> Chosen | None:
    """The choice the sweep stored when it ended (a configuration's mean over its seeds), or
    else the best finished trial as one training run."""
    stored = _stored_choice(tables)
    if stored is not None:
        return stored
    top = best(tables)
    if top is None:
        return None
    return Chosen(top.number, dict(top.params), top.value, distributions=dict(top.distributions))


def _stored_choice(tables: StudyTables) -> Chosen | None:
    stored = tables.summary.choice or {}
    row = next((t for t in tables.trials if t.number == stored.get("trial")), None)
    mean = stored.get("mean")
    if row is None or not isinstance(mean, (int, float)) or not math.isfinite(mean):
        return None
    spread = stored.get("std")
    return Chosen(
        row.number,
        dict(row.params),
        float(mean),
        spread=float(spread) if isinstance(spread, (int, float)) else math.nan,
        seeds=int(stored.get("seeds") or 1),
        runners_up=tuple(int(n) for n in stored.get("tied_with") or ()),
        confirmed=bool(stored.get("confirmed")),
        distributions=dict(row.distributions),
    )


def baselines_of(tables: StudyTables) -> list[NamedBaseline]:
    base = tables.summary.baseline
    if base is None:
        return []
    return [NamedBaseline("task baseline", base.value, base.measure, base.description)]


def choice_section(
    tables: StudyTables, chosen: Chosen | None, baselines: Sequence[NamedBaseline]
) -> str:
    title = "What to use"
    if chosen is None:
        text = "No trial has finished with a finite value yet, so there is nothing to choose."
        return section("choice", title, missing(text), _trials_line(tables), _task_line(tables))
    return section(
        "choice",
        title,
        _headline(tables, chosen),
        _trust(tables, chosen),
        _params_table(chosen),
        _baselines(tables, chosen, baselines),
        "<h3>Spec fragment</h3>",
        para("Paste into the spec's [training] table to train this configuration.", "hint"),
        f'<pre class="fragment">{esc(spec_fragment(chosen))}</pre>',
        _task_line(tables),
    )


def _headline(tables: StudyTables, chosen: Chosen) -> str:
    objective = tables.summary.objective or "value"
    score = fmt(chosen.value)
    if chosen.seeds > 1 and math.isfinite(chosen.spread):
        score += f" ± {fmt(chosen.spread, 2)}"
    better = "lower" if tables.summary.direction == "minimize" else "higher"
    return (
        f'<p class="verdict"><span class="big">{esc(score)}</span> '
        f"{esc(f'{objective} ({better} is better), trial #{chosen.trial}')}</p>"
    )


def _trust(tables: StudyTables, chosen: Chosen) -> str:
    lines = []
    if chosen.confirmed:
        lines.append(f"Confirmed: the mean of {chosen.seeds} training runs with different seeds.")
    else:
        lines.append(
            "One training run: the score has not been repeated with other seeds, so its "
            "spread is unknown."
        )
    if chosen.runners_up:
        others = ", ".join(f"#{n}" for n in chosen.runners_up)
        lines.append(f"Cannot be told apart from trials {others}: their scores overlap.")
    for name in sorted(chosen.params):
        edge = at_edge(chosen.distributions.get(name), chosen.params[name])
        if edge:
            lines.append(
                f"{name} sits at the {edge} end of its searched range: a better value may lie "
                "beyond it; widen the range."
            )
    lines.append(_trials_text(tables))
    return '<ul class="trust">' + "".join(f"<li>{esc(line)}</li>" for line in lines) + "</ul>"


def _params_table(chosen: Chosen) -> str:
    rows = [[name, _param_cell(name, chosen.params[name])] for name in sorted(chosen.params)]
    return table(["parameter", "value"], rows) if rows else ""


def spec_fragment(chosen: Chosen) -> str:
    lines = [f"# trial {chosen.trial}", "[training]"]
    lines += [f"{name} = {toml_value(chosen.params[name])}" for name in sorted(chosen.params)]
    return "\n".join(lines)


def _baselines(tables: StudyTables, chosen: Chosen, baselines: Sequence[NamedBaseline]) -> str:
    if not baselines:
        return para("This task has no baseline to compare with.", "context")
    rows = []
    for base in baselines:
        measured, lower_better = _measured(tables, chosen, base.measure)
        if base.chosen_value is not None:
            measured, lower_better = base.chosen_value, True
        rows.append(
            [
                base.name,
                base.measure,
                num(base.value),
                num(measured),
                baseline_verdict(measured, base.value, lower_better),
                base.description,
            ]
        )
    headers = ["baseline", "measure", "baseline's", "chosen's", "verdict", "what it is"]
    return "<h3>Against the baselines</h3>" + table(headers, rows)


def baseline_verdict(measured: float, baseline: float, lower_better: bool | None) -> str:
    """Beats / does not beat / ties, with the difference in the measure's own units."""
    if not (math.isfinite(measured) and math.isfinite(baseline)):
        return "not measured"
    gap = measured - baseline
    if gap == 0:
        return "ties the baseline"
    side = "lower" if gap < 0 else "higher"
    amount = f"{fmt(abs(gap), 3)} {side}"
    if baseline != 0:
        amount += f" ({_percent(abs(gap) / abs(baseline))})"
    if lower_better is None:
        return amount
    beats = gap < 0 if lower_better else gap > 0
    return ("beats it: " if beats else "does not beat it: ") + amount


def _percent(share: float) -> str:
    # two significant figures, so that a small but real difference never reads "0%"
    return f"{share * 100:.2g}%" if share < 0.1 else f"{share:.0%}"


def _measured(tables: StudyTables, chosen: Chosen, measure: str) -> tuple[float, bool | None]:
    """The chosen trial's value of the baseline's measure, and whether lower is better."""
    summary = tables.summary
    if measure == summary.objective:
        return chosen.value, summary.direction == "minimize"
    series = tables.series.get(chosen.trial, {}).get(measure)
    last = float(series[-1]) if series is not None and series.size else math.nan
    return last, (True if measure == "valid_loss" else None)


def _trials_text(tables: StudyTables) -> str:
    counts = Counter(t.word for t in tables.trials)
    parts = [f"{counts[w]} {w}" for w in words.WORDS if counts[w]]
    budget = tables.summary.budget
    text = f"Chosen from {len(tables.trials)} trials ({', '.join(parts)})"
    if budget:
        searched = [t for t in tables.trials if t.confirms is None]
        settled = sum(1 for t in searched if t.state in ("COMPLETE", "PRUNED"))
        text += f"; {settled} of a budget of {budget} settled (failures and confirmation "
        text += "trials do not count)"
    return text + "."


def _trials_line(tables: StudyTables) -> str:
    return para(_trials_text(tables), "context") if tables.trials else ""


def _task_line(tables: StudyTables) -> str:
    s = tables.summary
    bits = [f"Study {s.name} on {s.location}"]
    if s.task:
        bits.append(f"task {s.task}" + (f": {s.task_description}" if s.task_description else ""))
    if s.metric_name:
        bits.append(f"metric {s.metric_name}")
    return para("; ".join(bits) + ".", "context")


def ranked_table(tables: StudyTables) -> str:
    """Every trial, best first, sortable by any column."""
    if not tables.trials:
        return missing("The study has no trials yet.")
    names = [p.name for p in tables.params]
    headers = ["rank", "trial", "state", "value", "epochs", "compute s", "worker", *names]
    headers.append("end reason")
    rows = []
    rank = 0
    for trial in ranked(tables):
        done = trial.state == "COMPLETE" and math.isfinite(trial.value)
        rank += done
        rows.append(
            [
                Cell(str(rank), str(rank), "num") if done else Cell("", ""),
                Cell(f"#{trial.number}", str(trial.number), "num"),
                Cell(trial.word, css=f"state {trial.word.replace(' ', '-')}"),
                num(trial.value),
                Cell(str(trial.epochs), str(trial.epochs), "num"),
                num(trial.seconds, 3),
                trial.worker,
                *[
                    _param_cell(name, trial.params[name]) if name in trial.params else ""
                    for name in names
                ],
                trial.end_reason,
            ]
        )
    hint = para("Click a column heading to sort by it; click again to reverse.", "hint")
    return f'<div id="ranked">{hint}{table(headers, rows, sortable=True)}</div>'


def _param_cell(name: str, value: Any) -> Cell:
    if name == "clip" and value == 0:
        return Cell("off", "0", "num")  # our convention: a zero threshold turns clipping off
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return num(float(value))
    return Cell(str(value))
