"""The numbers behind the question-led sections: the task's dependency length, the stability
classes, intervals that cannot be ranked, and the cost of a longer unroll."""

from __future__ import annotations

import math
import tomllib

import pytest
from optuna.distributions import FloatDistribution, IntDistribution

from benchmarks.synthetic_study import synthetic_trial
from sweeper.report.collect import build_tables
from sweeper.report.figures_memory import memory_figure
from sweeper.report.figures_stability import health
from sweeper.report.gradient_findings import TrialGradients
from sweeper.report.importance import Importance
from sweeper.report.sections_choice import chosen_from_trials, spec_fragment
from sweeper.report.sections_search import _unroll_cost_line, overlapping
from sweeper.report.task_facts import dependency_length
from sweeper.report.theme import log_ticks

SPACE = {"unroll": IntDistribution(2, 64), "lr": FloatDistribution(1e-4, 1.0, log=True)}


def _tables(spec_text: str = "", trials: list | None = None):
    attrs = {"spec_text": spec_text, "objective": "valid_loss"}
    return build_tables("s", "x.db", "minimize", attrs, trials or [], [])


@pytest.mark.parametrize(
    ("task", "steps"),
    [
        ('kind = "recall"\ndelay = 7', 7),
        ('kind = "recall"', 10),  # RecallOptions' own default delay
        ('kind = "copy"', 100),  # CopyOptions' default, the T of the copy task
        ('kind = "adding"\nlength = 50', None),  # no single dependency length
        ('kind = "series"\nfile = "a.csv"\nseason = 52', 52),  # a weekly series' year
        ('kind = "series"\nfile = "a.csv"', None),  # no season set
    ],
)
def test_the_dependency_length_comes_from_the_stored_spec(task: str, steps: int | None) -> None:
    found = dependency_length(_tables(f'[study]\nname = "s"\n[task]\n{task}\n').summary)
    assert (found.steps if found else None) == steps


def _unroll_trials(seconds_per_step: float = 0.5) -> list:
    # compute grows in proportion to the unroll: each epoch costs seconds_per_step * unroll
    return [
        synthetic_trial(
            i,
            value=1.0 / unroll,
            params={"unroll": unroll, "lr": 0.01},
            distributions=SPACE,
            user_attrs={"epochs": 4, "compute_seconds": 4 * seconds_per_step * unroll},
        )
        for i, unroll in enumerate((4, 8, 16, 32))
    ]


def test_the_memory_figure_marks_the_delay_and_the_best_trial() -> None:
    tables = _tables('[task]\nkind = "recall"\ndelay = 12\n', _unroll_trials())
    figure = memory_figure(tables, dependency_length(tables.summary))
    assert [shape.x0 for shape in figure.layout.shapes] == [12, 12]  # on score and on cost
    names = [trace.name for trace in figure.data]
    assert "best" in names and "finished" in names


def test_a_longer_unroll_costs_what_the_fit_says() -> None:
    # seconds per epoch exactly proportional to unroll: doubling the unroll doubles the cost
    line = _unroll_cost_line(_tables("", _unroll_trials()))
    assert "2.00× when the unroll doubles" in line and "exponent 1.00" in line


def test_intervals_that_overlap_cannot_be_ranked() -> None:
    rows = [
        Importance("lr", 0.6, 0.45, 0.8),
        Importance("hidden", 0.3, 0.1, 0.5),  # overlaps lr's interval
        Importance("clip", 0.1, 0.0, 0.05),  # below both
    ]
    assert overlapping(rows) == {"lr": ["hidden"], "hidden": ["lr"], "clip": []}


def _gradients(**change: float) -> TrialGradients:
    values = dict(
        number=0,
        state="finished",
        diverged=False,
        value=0.1,
        clip=1.0,
        lr=0.01,
        peak_p95=2.0,
        clip_rate=0.1,
        growth=1.0,
        typical_norm=0.5,
        loss_change=0.5,
        nonfinite_steps=0,
    )
    values.update(change)
    return TrialGradients(**values)  # type: ignore[arg-type]


def test_the_stability_classes() -> None:
    assert health(_gradients()) == "healthy"
    assert health(_gradients(clip_rate=0.8)) == "clipped most steps"
    assert health(_gradients(clip_rate=0.8, clip=0.0)) == "healthy"  # clipping off
    assert health(_gradients(diverged=True, clip_rate=0.8)) == "diverged"


def test_the_spec_fragment_reads_back_as_the_chosen_values() -> None:
    chosen = chosen_from_trials(_tables("", _unroll_trials()))
    assert chosen is not None and chosen.trial == 3
    table = tomllib.loads(spec_fragment(chosen))["training"]
    assert table == {"unroll": 32, "lr": 0.01}
    assert math.isnan(chosen.spread) and not chosen.confirmed


@pytest.mark.parametrize(
    ("values", "ticks"),
    [
        ([0.5, 5.0], [0.5, 1, 2, 5]),
        ([0.001, 0.02], [0.001, 0.002, 0.005, 0.01, 0.02]),
        ([1e-4, 1.0], [1e-4, 1e-3, 1e-2, 1e-1, 1]),
        ([1e-6, 1e3], [1e-6, 1e-4, 1e-2, 1, 1e2]),  # whole decades, every other one
        ([0.31, 0.47], [0.31, 0.47]),  # narrower than one step: its rounded ends
        ([math.nan, -1.0], []),
    ],
)
def test_log_axes_get_few_round_ticks(values: list[float], ticks: list[float]) -> None:
    assert log_ticks(values) == pytest.approx(ticks)
