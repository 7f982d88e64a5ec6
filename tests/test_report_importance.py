"""Importance from PED-ANOVA with bootstrap intervals, checked against known answers."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import optuna
import pytest
from optuna.distributions import CategoricalDistribution, FloatDistribution, IntDistribution
from SALib.test_functions import Ishigami

from benchmarks.synthetic_study import synthetic_trial
from sweeper.report.collect import read_study
from sweeper.report.importance import MIN_TRIALS, param_importance
from sweeper.store.connect import open_storage


def _optimize(location: Path, name: str, objective, trials: int, seed: int) -> None:
    storage = open_storage(str(location), heartbeat=False)
    try:
        study = optuna.create_study(
            study_name=name, storage=storage, sampler=optuna.samplers.RandomSampler(seed=seed)
        )
        study.optimize(objective, n_trials=trials)
    finally:
        storage.engine.dispose()


def _ishigami(trial: optuna.Trial) -> float:
    x = np.array([[trial.suggest_float(f"x{i}", -math.pi, math.pi) for i in (1, 2, 3)]])
    return float(Ishigami.evaluate(x, A=7.0, B=0.1)[0])


def test_ishigami_x3_has_the_least_first_order_importance(tmp_path: Path) -> None:
    _optimize(tmp_path / "ishigami.db", "ishigami", _ishigami, trials=300, seed=11)
    result = param_importance(read_study(str(tmp_path / "ishigami.db")), replicates=20)
    # Analytic first-order Sobol indices for a=7, b=0.1 are x1 0.3139, x2 0.4424, x3 0
    # (Ishigami & Homma 1990); estimators disagree on values, so only the ranking is checked.
    assert [r.name for r in result.rows][-1] == "x3"
    assert sum(r.share for r in result.rows) == pytest.approx(1.0)
    assert result.trials_used == 300


def _one_parameter(trial: optuna.Trial) -> float:
    lr = trial.suggest_float("lr", 1e-4, 1.0, log=True)
    trial.suggest_int("hidden", 8, 256, log=True)
    trial.suggest_int("unroll", 5, 100)
    trial.suggest_categorical("cell", ["elman", "gru", "lstm"])
    return (math.log10(lr) + 2.0) ** 2


@pytest.fixture(scope="module")
def one_parameter_tables(tmp_path_factory: pytest.TempPathFactory):
    location = tmp_path_factory.mktemp("one") / "one.db"
    _optimize(location, "one", _one_parameter, trials=120, seed=5)
    return read_study(str(location))


def test_the_only_parameter_that_matters_ranks_first_with_a_separate_interval(
    one_parameter_tables,
) -> None:
    result = param_importance(one_parameter_tables, replicates=60, seed=1)
    top, *rest = result.rows
    assert top.name == "lr"
    # lr is the only input the objective reads; 0.7 leaves the estimator room for the noise
    # it spreads over the three parameters that do nothing (common practice, no source)
    assert top.share > 0.7
    assert top.low > max(r.high for r in rest)
    # the interval is about the estimate it is printed beside, and even its low end gives lr
    # more than all the other parameters together
    assert top.low <= top.share <= top.high
    assert top.low > 0.5
    assert result.ranked and result.note == ""  # lr's interval stands clear of the rest


def test_bootstrap_is_seeded(one_parameter_tables) -> None:
    first = param_importance(one_parameter_tables, replicates=15, seed=3)
    again = param_importance(one_parameter_tables, replicates=15, seed=3)
    other = param_importance(one_parameter_tables, replicates=15, seed=4)
    assert first == again
    assert [r.low for r in first.rows] != [r.low for r in other.rows]


def _tables(tmp_path: Path, trials: list[optuna.trial.FrozenTrial]):
    storage = open_storage(str(tmp_path / "s.db"), heartbeat=False)
    study = optuna.create_study(study_name="s", storage=storage)
    study.add_trials(trials)
    storage.engine.dispose()
    return read_study(str(tmp_path / "s.db"))


SPACE = {"lr": FloatDistribution(1e-4, 1.0, log=True), "cell": CategoricalDistribution(["gru"])}


def test_too_few_trials_gives_a_reason_instead_of_numbers(tmp_path: Path) -> None:
    trials = [
        synthetic_trial(
            i,
            value=float(i),
            params={"lr": 10.0 ** -(1 + i / 2), "cell": "gru"},
            distributions=SPACE,
        )
        for i in range(MIN_TRIALS - 1)
    ]
    result = param_importance(_tables(tmp_path, trials))
    assert result.rows == ()
    assert f"at least {MIN_TRIALS} completed trials" in result.note


def test_a_parameter_held_at_one_value_is_listed_not_ranked(tmp_path: Path) -> None:
    trials = [
        synthetic_trial(
            i,
            value=float(i % 7),
            params={"lr": 10.0 ** -(1 + i / 10), "cell": "gru"},
            distributions=SPACE,
        )
        for i in range(30)
    ]
    result = param_importance(_tables(tmp_path, trials), replicates=5)
    assert [r.name for r in result.rows] == ["lr"]
    assert result.fixed == ("cell",)


def test_no_varying_parameter_gives_a_reason(tmp_path: Path) -> None:
    space = {"hidden": IntDistribution(8, 8)}
    trials = [
        synthetic_trial(i, value=float(i), params={"hidden": 8}, distributions=space)
        for i in range(12)
    ]
    result = param_importance(_tables(tmp_path, trials))
    assert result.rows == ()
    assert result.fixed == ("hidden",)
    assert "more than one value" in result.note


def _curve_trial(number: int, x: float, c: str, epochs: int, confirms: int | None = None):
    """A trial with a learning curve: the level is set by x, and c="b" is a little better."""
    curve = {
        e: (x - 0.6) ** 2 + (0.0 if c == "b" else 0.05) + 1.0 / e for e in range(1, epochs + 1)
    }
    return optuna.trial.create_trial(
        state=optuna.trial.TrialState.COMPLETE if epochs == 4 else optuna.trial.TrialState.PRUNED,
        value=curve[epochs],
        params={"x": x, "c": c},
        distributions={"x": FloatDistribution(0.0, 1.0), "c": CategoricalDistribution(["a", "b"])},
        intermediate_values=curve,
        user_attrs={} if confirms is None else {"confirms": confirms, "confirm_round": 1},
    )


def test_importance_at_the_deepest_shared_epoch_counts_stopped_trials(tmp_path: Path) -> None:
    rng = np.random.default_rng(7)
    xs = rng.uniform(0.0, 1.0, 14)
    # 6 ran all 4 epochs, 8 were stopped after epoch 2: only epoch 2 has 8 or more values
    trials = [_curve_trial(i, float(x), "ab"[i % 2], 4 if i < 6 else 2) for i, x in enumerate(xs)]
    repeats = [_curve_trial(14 + k, float(xs[0]), "a", 4, confirms=0) for k in range(3)]
    result = param_importance(_tables(tmp_path, trials + repeats), replicates=10)
    assert (result.epoch, result.trials_used, result.stopped_used) == (2, 14, 8)
    assert "epoch 2 of 14 trials, 8 of them stopped early" in result.basis

    # the reference: optuna's own PED-ANOVA evaluator, run directly on the 14 searched
    # trials' values at epoch 2 (confirmation repeats left out), normalised to shares
    reference = optuna.create_study()
    for trial in trials:
        reference.add_trial(
            optuna.trial.create_trial(
                value=trial.intermediate_values[2],
                params=trial.params,
                distributions=trial.distributions,
            )
        )
    expected = optuna.importance.get_param_importances(
        reference,
        evaluator=optuna.importance.PedAnovaImportanceEvaluator(target_quantile=0.25),
        normalize=True,
    )
    assert {r.name: r.share for r in result.rows} == pytest.approx(dict(expected))


def test_overlapping_intervals_say_the_parameters_cannot_be_ranked(tmp_path: Path) -> None:
    # two parameters that matter equally: the value is the sum of their distances from 0.5
    space = {"x": FloatDistribution(0.0, 1.0), "y": FloatDistribution(0.0, 1.0)}
    rng = np.random.default_rng(3)
    trials = [
        synthetic_trial(i, value=abs(x - 0.5) + abs(y - 0.5), params={"x": x, "y": y},
                        distributions=space)
        for i, (x, y) in enumerate(rng.uniform(0.0, 1.0, (40, 2)).tolist())
    ]  # fmt: skip
    result = param_importance(_tables(tmp_path, trials), replicates=30)
    assert not result.ranked
    assert "cannot be ranked" in result.note and len(result.rows) == 2
    first, second = result.rows
    assert second.high >= first.low  # the intervals overlap indeed
