"""Confirmation trials: the best configurations trained again with fresh seeds after the search,
outside its budget, never stopped early, resumable; and the choice they lead to."""

from __future__ import annotations

import io
import math
import signal
from collections import Counter
from pathlib import Path

import optuna
import pytest
from optuna.distributions import FloatDistribution
from optuna.trial import TrialState

from sweeper.results.choice import Candidate, cannot_tell_apart, confirmed_choice
from sweeper.seeds import confirmation_seed
from sweeper.spec.loading import parse_spec
from sweeper.store.attrs import StudyInfo, TrialInfo
from sweeper.sweep.confirmation import plan
from sweeper.sweep.launcher import run_sweep
from sweeper.sweep.progress import ProgressDisplay
from sweeper.sweep.study import load_existing, tally
from tests import processes as proc

REPO = Path(__file__).resolve().parents[1]
CALLS: Counter[float] = Counter()


def worse_when_repeated(params: dict, report) -> float:
    """A bowl around x = 0.3 whose every repeat of a configuration is far worse at every step:
    a stopping rule would stop each repeat at its first decision."""
    CALLS[params["x"]] += 1
    penalty = 10.0 * (CALLS[params["x"]] - 1)
    value = math.nan
    for step in range(1, 4):
        value = (params["x"] - 0.3) ** 2 + penalty + 1 / step
        report(step, value)
    return value


def _plugin_spec(storage: str, trials: int) -> str:
    return (
        f'[study]\nname = "conf"\ntrials = {trials}\nseed = 5\nsampler = "random"\n'
        f'storage = "{storage}"\n[task]\nkind = "objective"\n'
        f'function = "tests.test_confirmation:worse_when_repeated"\npath = "{REPO.as_posix()}"\n'
        "[search]\nx = { between = [0.0, 1.0] }\n"
        '[stopping]\nrule = "median"\nwarmup_trials = 0\nmin_epochs = 1\n'
        "[confirm]\nconfigurations = 2\nseeds = 2\n"
    )


def test_the_rule_against_a_hand_computed_case() -> None:
    # means 1.15 and 1.45; each sample variance 0.05 / 3, so the standard error of the
    # difference is sqrt(2 * (0.05 / 3) / 4) = 0.0913 (Welch's formula, by hand): a gap of
    # 0.3 is over two of them (0.183), a gap of 0.1 is not
    a = Candidate(0, {}, (1.0, 1.2, 1.1, 1.3))
    far = Candidate(1, {}, (1.4, 1.5, 1.3, 1.6))
    near = Candidate(2, {}, (1.2, 1.3, 1.1, 1.4))
    assert a.mean == pytest.approx(1.15) and a.std == pytest.approx(math.sqrt(0.05 / 3))
    assert a.stderr == pytest.approx(math.sqrt(0.05 / 3) / 2)
    assert not cannot_tell_apart(a, far)
    assert cannot_tell_apart(a, near)
    # a configuration that diverged on one seed is told apart from a finite one
    assert not cannot_tell_apart(a, Candidate(3, {}, (1.0, math.inf)))


def test_confirmation_runs_after_the_search_outside_its_budget_and_is_never_stopped(
    storage_location: str,
) -> None:
    CALLS.clear()
    spec = parse_spec(_plugin_spec(storage_location, trials=6), "<conf>")
    run_sweep(spec, ProgressDisplay(io.StringIO()))
    study, stored = load_existing(spec.storage_location)
    trials = study.get_trials(deepcopy=False)
    searched = [t for t in trials if not TrialInfo.of(t).is_confirmation]
    confirming = [t for t in trials if TrialInfo.of(t).is_confirmation]
    assert len(searched) == 6 and tally(trials).finished == 6  # the budget counts these only
    assert StudyInfo.of(study).budget == 6

    complete = [t for t in searched if t.state == TrialState.COMPLETE]
    top = sorted(complete, key=lambda t: (t.value, t.number))[:2]
    rounds = {(TrialInfo.of(t).confirms, TrialInfo.of(t).confirm_round) for t in confirming}
    assert rounds == {(t.number, k) for t in top for k in (1, 2)}
    by_number = {t.number: t for t in trials}
    for trial in confirming:
        info = TrialInfo.of(trial)
        assert info.confirms is not None and info.confirm_round is not None
        assert trial.params == by_number[info.confirms].params
        assert info.seed == confirmation_seed(5, info.confirms, info.confirm_round)
        # every repeat is worse than any searched trial at every step: a stopping rule would
        # have stopped it, and none did
        assert trial.state == TrialState.COMPLETE, info.end_reason
        assert trial.value is not None and trial.value > 10

    # a top-up of the search confirms what is best now, and only that
    run_sweep(spec.with_overrides(trials=9), ProgressDisplay(io.StringIO()))
    study, stored = load_existing(spec.storage_location)
    trials = study.get_trials(deepcopy=False)
    assert tally(trials).finished == 9
    complete = [t for t in trials if t.state == TrialState.COMPLETE]
    best_two = sorted(
        (t for t in complete if not TrialInfo.of(t).is_confirmation),
        key=lambda t: (t.value, t.number),
    )[:2]
    confirmed = {TrialInfo.of(t).confirms for t in trials if TrialInfo.of(t).is_confirmation}
    assert {t.number for t in best_two} <= confirmed

    choice = confirmed_choice(study, stored)
    assert choice.confirmed and choice.seeds == 3
    assert choice.mean == pytest.approx(sum(choice.candidates[0].values) / 3)


def _training_spec(folder: Path) -> Path:
    path = folder / "k.toml"
    path.write_text(
        '[study]\nname = "k"\ntrials = 3\nseed = 13\nheartbeat = 1\n'
        '[task]\nkind = "adding"\nlength = 40\ntrain_sequences = 2048\nvalid_sequences = 64\n'
        "[training]\nepochs = 3\nhidden = 16\nthreads = 1\n"
        '[search]\nlr = { between = [0.002, 0.02], scale = "log" }\n'
        '[stopping]\nrule = "none"\n'
        "[confirm]\nconfigurations = 1\nseeds = 2\n"
    )
    return path


def _confirmation_checkpointed(db: Path) -> bool:
    """A running confirmation trial has checkpointed an epoch (plain reads: no lock taken)."""
    rows = proc.query(
        db,
        "SELECT c.epoch FROM sweeper_checkpoints c JOIN trials t ON t.number = c.trial_number "
        "JOIN trial_user_attributes a ON a.trial_id = t.trial_id "
        "WHERE a.key = 'confirms' AND t.state = 'RUNNING'",
    )
    return any(epoch >= 1 for (epoch,) in rows)


@pytest.mark.slow  # about 30 s: a whole sweep, a kill inside a confirmation trial, a resume
@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGINT])
def test_a_confirmation_trial_survives_a_kill_and_resumes(tmp_path: Path, sig: int) -> None:
    db = tmp_path / "runs" / "k.db"
    launcher = proc.start(tmp_path, "run", _training_spec(tmp_path).name)
    try:
        proc.wait_for(lambda: _confirmation_checkpointed(db), 180, "a confirmation trial's epoch")
        launcher.send_signal(sig)
        launcher.wait(timeout=60)
    finally:
        if launcher.poll() is None:
            launcher.kill()
            launcher.wait()
    resumed = proc.run(tmp_path, "resume", "runs/k.db")
    assert resumed.returncode == 0, resumed.stderr

    trials = proc.trials(db, "k")
    assert tally(trials).finished == 3  # the searched trials alone meet the budget
    done = [t for t in trials if TrialInfo.of(t).is_confirmation and t.state.is_finished()]
    finished = [t for t in done if t.state == TrialState.COMPLETE]
    rounds = sorted(TrialInfo.of(t).confirm_round or 0 for t in finished)
    assert rounds == [1, 2], "each confirmation seed finished once"
    # the one that was cut short went on from its checkpoint, as the same confirmation trial
    (again,) = [t for t in finished if TrialInfo.of(t).retry_of is not None]
    cut = next(t for t in trials if t.number == TrialInfo.of(again).retry_of)
    assert TrialInfo.of(again).confirms == TrialInfo.of(cut).confirms
    assert TrialInfo.of(again).seed == TrialInfo.of(cut).seed
    assert (TrialInfo.of(again).resumed_from_epoch or 0) >= 1
    assert "chosen: trial" in resumed.stdout and "over 3 seeds" in resumed.stdout


def test_a_higher_is_better_study_confirms_its_highest_configurations() -> None:
    spec = parse_spec(
        '[study]\nname = "up"\nbetter = "higher"\n[task]\nkind = "adding"\n'
        "[search]\nlr = { between = [0.001, 0.1] }\n[confirm]\nconfigurations = 2\nseeds = 3\n",
        "<up>",
    )
    trials = []
    for number, value in enumerate([0.2, 0.9, 0.5, 0.7]):
        trial = optuna.trial.create_trial(
            value=value, params={"lr": 0.001 * (number + 1)},
            distributions={"lr": FloatDistribution(0.001, 0.1)},
        )  # fmt: skip
        trial.number = number
        trials.append(trial)
    assert [(p.searched, p.round) for p in plan(trials, spec)] == [
        (1, 1), (1, 2), (1, 3), (3, 1), (3, 2), (3, 3)
    ]  # fmt: skip


def test_by_default_the_best_three_configurations_get_one_fresh_seed_each() -> None:
    # chosen by benchmarks/selection.py (docs/benchmarks.md): at equal compute every fresh
    # seed costs the search a trial, so the default confirms three with two seeds each
    spec = parse_spec(
        '[study]\nname = "d"\n[task]\nkind = "adding"\n[search]\nlr = { between = [0.001, 0.1] }\n',
        "<d>",
    )
    trials = []
    for number, value in enumerate([0.5, 0.2, 0.9, 0.4, 0.3]):
        trial = optuna.trial.create_trial(
            value=value, params={"lr": 0.001 * (number + 1)},
            distributions={"lr": FloatDistribution(0.001, 0.1)},
        )  # fmt: skip
        trial.number = number
        trials.append(trial)
    assert [(p.searched, p.round) for p in plan(trials, spec)] == [(1, 1), (4, 1), (3, 1)]


@pytest.mark.parametrize(
    ("tied", "words"), [((3,), "from trial 3:"), ((3, 13), "from trials 3, 13:")]
)
def test_the_choice_names_the_trials_it_cannot_be_told_apart_from(tied, words) -> None:
    from sweeper.results.choice import Choice

    choice = Choice(11, {}, 0.13, 0.05, 0.027, 4, True, tied, (), 0, "valid_loss")
    (line,) = [text for text in choice.lines() if text.startswith("cannot be told apart")]
    assert words in line
