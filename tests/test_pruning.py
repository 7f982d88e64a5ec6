"""Early-stopping rules: their published schedules, and whole sweeps that stop trials early."""

from __future__ import annotations

import io
import math
import random
import sqlite3
from collections import Counter
from pathlib import Path

import optuna
import pytest
from optuna.trial import TrialState

from sweeper.spec.loading import parse_spec
from sweeper.spec.sections import Spec
from sweeper.sweep.launcher import run_sweep
from sweeper.sweep.progress import ProgressDisplay
from sweeper.sweep.study import load_existing, make_pruner

REPO = Path(__file__).resolve().parents[1]
TRAINING_SPEC = """
[study]
name = "rules"
better = "{better}"
trials = 4
[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "adding"
length = 12
train_sequences = 32
valid_sequences = 16
[training]
epochs = {epochs}
unroll = 6
[stopping]
{stopping}
"""


def _training_spec(stopping: str, epochs: int = 6, better: str = "lower") -> Spec:
    return parse_spec(TRAINING_SPEC.format(better=better, epochs=epochs, stopping=stopping), "<t>")


def _first_stop(study: optuna.Study, value: float, epochs: int) -> int:
    """Run one trial as sweeper's trainer does: report every epoch, ask the rule after every
    epoch but the last. The epoch it was stopped at, or ``epochs`` when it ran to the end."""
    trial = study.ask()
    for epoch in range(1, epochs + 1):
        trial.report(value, epoch)
        if epoch < epochs and trial.should_prune():
            study.tell(trial, state=TrialState.PRUNED)
            return epoch
    study.tell(trial, value)
    return epochs


def test_hyperband_brackets_follow_li_et_al_2018() -> None:
    # Li et al. 2018 (JMLR 18, "Hyperband"), Table 1, R = 81 and eta = 3: five brackets
    # that start 81, 34, 15, 8 and 5 configurations on 1, 3, 9, 27 and 81 epochs each; the
    # last never stops anything. Every trial here is worse than all before it, so each one is
    # stopped at the first decision of its bracket (unless it is alone in that rung): the
    # epochs trials stop at are the brackets' first budgets, in shares of 81 : 34 : 15 : 8 : 5.
    R, trials = 81, 1430
    spec = _training_spec('rule = "hyperband"\nmin_epochs = 1\nreduction = 3', epochs=R)
    study = optuna.create_study(study_name="brackets", pruner=make_pruner(spec))
    ends = Counter(_first_stop(study, float(number), R) for number in range(trials))
    assert sorted(ends) == [1, 3, 9, 27, 81]
    sizes = {1: 81, 3: 34, 9: 15, 27: 8, 81: 5}
    for epoch, size in sizes.items():
        # a trial's bracket comes from a hash of the study name and trial number (optuna's
        # HyperbandPruner docs), which spreads trials like independent draws with these
        # shares: allow three binomial standard deviations
        share = size / sum(sizes.values())
        spread = 3 * math.sqrt(share * (1 - share) / trials)
        assert ends[epoch] / trials == pytest.approx(share, abs=spread), (epoch, ends)


def _asha_study(goal: str = "minimize") -> optuna.Study:
    better = "lower" if goal == "minimize" else "higher"
    spec = _training_spec('rule = "asha"\nmin_epochs = 1\nreduction = 3', epochs=9, better=better)
    return optuna.create_study(direction=goal, pruner=make_pruner(spec))


def _promoted(study: optuna.Study, values: list[float]) -> bool:
    """Run one trial through the rungs at epochs 1, 3, 9; whether it passed the last decision."""
    trial = study.ask()
    for epoch, value in zip((1, 3), values, strict=False):
        trial.report(value, epoch)
        if trial.should_prune():
            study.tell(trial, state=TrialState.PRUNED)
            return False
    study.tell(trial, values[-1])
    return True


@pytest.mark.parametrize("goal", ["minimize", "maximize"])
@pytest.mark.parametrize("rank", range(1, 10))
def test_asha_promotes_the_top_third_of_a_rung(goal: str, rank: int) -> None:
    # Li et al. 2020 (MLSys, "A System for Massively Parallel Hyperparameter Tuning"),
    # Algorithm 2: a configuration leaves rung k when it is in the top 1/eta of that rung.
    study = _asha_study(goal)
    sign = 1 if goal == "minimize" else -1
    for value in (1, 2, 3, 4, 5, 6, 7, 8):  # eight trials already in rung 0
        _promoted(study, [sign * value])
    newcomer = sign * (rank - 0.5)  # the rank-th best of the nine
    assert _promoted(study, [newcomer, newcomer]) == (rank <= 9 // 3)


def test_asha_decides_each_trial_against_the_rung_so_far() -> None:
    # Li et al. 2020: promotion from rung 0 to rung 1 takes the top floor(n / eta) of the n
    # trials in rung 0. optuna decides as each trial arrives (it cannot pause one), and lets
    # the best through while n < eta.
    study = _asha_study()
    draws = random.Random(5)
    seen: list[float] = []
    for _ in range(30):
        value = draws.random()
        seen.append(value)
        rank = sorted(seen).index(value) + 1
        trial = study.ask()
        trial.report(value, 1)
        assert trial.should_prune() == (rank > max(1, len(seen) // 3))
        study.tell(trial, state=TrialState.PRUNED)


# --- whole sweeps -----------------------------------------------------------------------


def curve(params: dict, report) -> float:
    """A learning curve whose level is set by x: the further from 0.3, the worse every epoch."""
    value = math.nan
    for epoch in range(1, params["epochs"] + 1):
        value = (params["x"] - 0.3) ** 2 + 1 / epoch
        if params.get("turn") and epoch > params["turn"]:  # gets worse after its best epoch
            value = (params["x"] - 0.3) ** 2 + 1 / params["turn"] + 0.01 * (epoch - params["turn"])
        report(epoch, value)
    return value


def _curve_sweep(folder: Path, stopping: str, search: str, trials: int = 12) -> optuna.Study:
    text = (
        f'[study]\nname = "curves"\ntrials = {trials}\nseed = 2\nsampler = "random"\n'
        f'storage = "{(folder / "curves.db").as_posix()}"\n'
        "[confirm]\nconfigurations = 0\n"
        f'[task]\nkind = "objective"\nfunction = "tests.test_pruning:curve"\n'
        f'path = "{REPO.as_posix()}"\n[search]\n{search}\n[stopping]\n{stopping}\n'
    )
    spec = parse_spec(text, "<curves>")
    run_sweep(spec, ProgressDisplay(io.StringIO()))
    return load_existing(spec.storage_location)[0]


def _epoch_rows(folder: Path) -> dict[int, list[int]]:
    with sqlite3.connect(folder / "curves.db") as connection:
        rows = connection.execute("SELECT trial_number, epoch FROM sweeper_epochs").fetchall()
    epochs: dict[int, list[int]] = {}
    for number, epoch in sorted(rows):
        epochs.setdefault(number, []).append(epoch)
    return epochs


@pytest.mark.parametrize(
    "stopping",
    [
        'rule = "median"\nmin_epochs = 2\nwarmup_trials = 2',
        'rule = "asha"\nmin_epochs = 2\nreduction = 2',
        'rule = "hyperband"\nmin_epochs = 2\nreduction = 2',
    ],
)
def test_each_rule_stops_trials_that_keep_their_curves(tmp_path: Path, stopping: str) -> None:
    study = _curve_sweep(tmp_path, stopping, "x = { between = [0.0, 1.0] }\nepochs = 8")
    trials = study.trials
    # stopped trials count toward the budget, and none was stopped before min_epochs
    assert sum(t.state in (TrialState.COMPLETE, TrialState.PRUNED) for t in trials) == 12
    stopped = [t for t in trials if t.state == TrialState.PRUNED]
    assert stopped and len(stopped) < 12
    rows = _epoch_rows(tmp_path)
    for trial in stopped:
        last = max(trial.intermediate_values)
        assert 2 <= last <= 8
        assert sorted(trial.intermediate_values) == rows[trial.number] == list(range(1, last + 1))
        assert trial.user_attrs["end_reason"] == f"stopped early after step {last}"
    for trial in trials:
        if trial.state == TrialState.COMPLETE:
            assert rows[trial.number] == list(range(1, 9))


def test_patience_alone_stops_a_trial_that_stopped_improving(tmp_path: Path) -> None:
    # best at epoch 3, worse after: with patience 2, epochs 4 and 5 are tolerated, 6 is not
    search = "x = { between = [0.0, 1.0] }\nepochs = 10\nturn = 3"
    study = _curve_sweep(tmp_path, 'rule = "none"\npatience = 2', search, trials=2)
    assert [max(t.intermediate_values) for t in study.trials] == [6, 6]
    assert all(t.state == TrialState.PRUNED for t in study.trials)


def test_patience_keeps_improving_trials_from_the_rule(tmp_path: Path) -> None:
    search = "x = { between = [0.0, 1.0] }\nepochs = 8"
    study = _curve_sweep(tmp_path, 'rule = "asha"\nreduction = 2\npatience = 2', search, 6)
    assert all(t.state == TrialState.COMPLETE for t in study.trials)


DIVERGING_SPEC = """
[study]
name = "diverges"
sampler = "grid"
[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "adding"
length = 8
train_sequences = 32
valid_sequences = 16
[training]
epochs = 3
cell = "elman"
optimizer = "sgd"
unroll = 4
batch = 4
[search]
lr = { one_of = [1e30, 0.01] }
[stopping]
rule = "asha"
min_epochs = 1  # a rung at epoch 1, where the diverged trial ends
"""


def test_a_diverged_trial_counts_as_the_worst_value_of_its_epoch(in_tmp: Path) -> None:
    spec = parse_spec(DIVERGING_SPEC, "<diverges>")
    run_sweep(spec, ProgressDisplay(io.StringIO()))
    study, _ = load_existing(spec.storage_location)
    (diverged,) = [t for t in study.trials if t.params["lr"] == 1e30]
    assert diverged.state == TrialState.PRUNED and diverged.user_attrs["diverged"] is True
    assert diverged.intermediate_values == {1: math.inf}
    assert diverged.system_attrs["completed_rung_0"] == math.inf  # ranked last in its rung
    (healthy,) = [t for t in study.trials if t.params["lr"] == 0.01]
    assert healthy.state == TrialState.COMPLETE
