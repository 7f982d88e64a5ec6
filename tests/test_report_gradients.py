"""Gradient health numbers and advice, ranking and the Pareto front, on hand-built tables."""

from __future__ import annotations

import math

from optuna.distributions import CategoricalDistribution, FloatDistribution
from optuna.trial import TrialState

from benchmarks.synthetic_study import synthetic_trial
from sweeper.report.collect import build_tables
from sweeper.report.gradient_findings import advice, gradient_table
from sweeper.report.ranking import pareto_front, ranked
from sweeper.training.epoch_record import EPOCH_FIELDS

SPACE = {"lr": FloatDistribution(1e-4, 1.0, log=True), "clip": CategoricalDistribution([0.0, 1.0])}


def _epochs(number: int, norms: list[float], losses: list[float], clipped: float) -> list[dict]:
    rows = []
    for index, (norm, loss) in enumerate(zip(norms, losses, strict=True)):
        row = dict.fromkeys(EPOCH_FIELDS, 0.0)
        row.update(
            trial_number=number,
            epoch=index + 1,
            train_loss=loss,
            valid_loss=loss,
            grad_norm_mean=norm,
            grad_norm_median=norm,
            grad_norm_p95=norm * 2,
            grad_norm_max=norm * 3,
            clip_fraction=clipped,
            steps=10,
        )
        rows.append(row)
    return rows


def _tables(specs: list[dict], direction: str = "minimize", attrs: dict | None = None):
    """specs: value, lr, clip, norms, losses, clipped, state, diverged per trial."""
    trials, epochs = [], []
    for number, spec in enumerate(specs):
        state = spec.get("state", TrialState.COMPLETE)
        user = {
            "diverged": spec.get("diverged", False),
            "compute_seconds": spec.get("seconds", 10.0),
        }
        params = {"lr": spec.get("lr", 0.01), "clip": spec.get("clip", 1.0)}
        trials.append(
            synthetic_trial(
                number,
                state=state,
                value=spec.get("value"),
                params=params,
                distributions=SPACE,
                user_attrs=user,
            )
        )
        norms = spec.get("norms", [1.0, 1.0, 1.0])
        losses = spec.get("losses", [1.0, 0.5, 0.25][: len(norms)])
        epochs += _epochs(number, norms, losses, spec.get("clipped", 0.1))
    return build_tables("s", "s.db", direction, attrs or {}, trials, epochs)


def _texts(tables) -> list[str]:
    return [a.text for a in advice(tables, gradient_table(tables))]


def test_healthy_norms_give_one_reassuring_line() -> None:
    tables = _tables([{"value": float(i)} for i in range(6)])
    found = advice(tables, gradient_table(tables))
    assert [a.level for a in found] == ["ok"]
    assert "No warning signs" in found[0].text


def test_leaders_that_clip_on_most_steps_get_told_to_raise_clip_or_lower_lr() -> None:
    specs = [{"value": float(i), "clipped": 0.9} for i in range(5)]
    specs += [{"value": 10.0 + i, "clipped": 0.0} for i in range(5)]
    texts = _texts(_tables(specs))
    assert any(
        "clip on most steps (median 90% of steps)" in t and "Raise clip or lower lr" in t
        for t in texts
    )


def test_clipping_on_a_minority_of_steps_is_not_flagged() -> None:
    texts = _texts(_tables([{"value": float(i), "clipped": 0.4} for i in range(6)]))
    assert not any("Raise clip" in t for t in texts)


def test_norms_growing_by_orders_of_magnitude_are_called_exploding() -> None:
    specs = [{"value": 1.0, "norms": [1.0, 30.0, 2000.0]}, {"value": 2.0}]
    texts = _texts(_tables(specs))
    assert any(t.startswith("Exploding gradients") and "2,000×" in t and "#0" in t for t in texts)


def test_growth_below_three_orders_of_magnitude_is_not_exploding() -> None:
    texts = _texts(_tables([{"value": 1.0, "norms": [1.0, 30.0, 900.0]}]))
    assert not any("Exploding" in t for t in texts)


def test_tiny_norms_with_a_flat_loss_are_called_vanishing() -> None:
    flat = {"value": 1.0, "norms": [1e-6, 2e-6, 1e-6], "losses": [0.7, 0.7, 0.699]}
    texts = _texts(_tables([flat, {"value": 2.0}]))
    assert any(t.startswith("Vanishing gradients: 1 trial") and "#0" in t for t in texts)


def test_tiny_norms_with_a_falling_loss_are_not_vanishing() -> None:
    falling = {"value": 1.0, "norms": [1e-6, 2e-6, 1e-6], "losses": [0.7, 0.5, 0.3]}
    assert not any("Vanishing" in t for t in _texts(_tables([falling])))


def test_divergence_advice_names_high_lr_and_clipping_off() -> None:
    calm = [{"value": float(i), "lr": 1e-3} for i in range(6)]
    wild = [
        {
            "state": TrialState.PRUNED,
            "diverged": True,
            "lr": 0.5,
            "clip": 0.0,
            "norms": [1.0, math.nan],
        }
        for _ in range(3)
    ]
    texts = _texts(_tables(calm + wild))
    (line,) = [t for t in texts if "diverged" in t]
    assert line.startswith("3 of the 9 trials that ran to an end diverged")
    assert "lower the top of the lr range" in line
    assert "3 of them ran with clipping off: turn clipping on" in line


def test_gradient_table_summarises_epochs() -> None:
    tables = _tables([{"value": 1.0, "norms": [2.0, 4.0, 8.0], "clipped": 0.25}])
    (row,) = gradient_table(tables)
    assert row.peak_p95 == 16.0
    assert row.growth == 4.0
    assert row.typical_norm == 4.0
    assert row.clip_rate == 0.25
    assert row.loss_change == 0.75


def test_pareto_front_keeps_trials_no_cheaper_trial_beats() -> None:
    # (seconds, value): the front by hand is trials 0 (10 s, 5), 2 (20 s, 3) and 4 (40 s, 1).
    points = [(10, 5.0), (15, 6.0), (20, 3.0), (30, 3.5), (40, 1.0), (50, 1.0)]
    tables = _tables([{"value": v, "seconds": s} for s, v in points])
    assert [t.number for t in pareto_front(tables.completed(), "minimize")] == [0, 2, 4]
    assert [t.number for t in pareto_front(tables.completed(), "maximize")] == [0, 1]


def test_ranking_follows_the_direction_and_puts_unfinished_trials_last() -> None:
    specs = [{"value": 1.0}, {"value": 3.0}, {"state": TrialState.FAIL}, {"value": 2.0}]
    assert [t.number for t in ranked(_tables(specs, "maximize"))] == [1, 3, 0, 2]
    assert [t.number for t in ranked(_tables(specs, "minimize"))] == [0, 3, 1, 2]
