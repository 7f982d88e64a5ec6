"""Command-line overrides hold only for the launch that names them; where a study is stored."""

from __future__ import annotations

from pathlib import Path

import optuna
from optuna.trial import TrialState

from sweeper.spec.loading import load_spec
from sweeper.store.attrs import StudyInfo, TrialInfo, record_interrupted
from sweeper.store.connect import open_storage
from sweeper.sweep.study import load_existing, tally, top_up
from tests.conftest import invoke, write_tiny_spec


def _info(location: str, name: str = "tiny") -> tuple[StudyInfo, list[optuna.trial.FrozenTrial]]:
    study = optuna.load_study(study_name=name, storage=open_storage(location))
    return StudyInfo.of(study), study.get_trials(deepcopy=False)


def test_a_workers_override_is_not_stored_as_the_spec_s(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=1, epochs=1, workers=1)
    assert invoke("run", spec.name, "--workers", "2", "--report", "p.html").exit_code == 0
    info, _trials = _info("runs/tiny.db")
    assert info.workers == 1  # what the report calls "planned in the spec"
    assert info.spec_data["study"]["workers"] == 1
    _study, stored = load_existing("runs/tiny.db")
    assert stored.study.workers == 1  # resume without --workers: the spec's count


def test_a_run_that_adds_no_trials_keeps_the_stored_budget(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=10, epochs=1)
    assert invoke("run", spec.name, "--trials", "2", "--report", "p.html").exit_code == 0
    assert invoke("run", spec.name, "--workers", "0").exit_code == 0  # queues for workers
    info, trials = _info("runs/tiny.db")
    assert info.budget == 2
    assert tally(trials).waiting == 0
    assert _status_row("runs/tiny.db") == {"budget": "2", "finished": "2", "waiting": "0"}


def _status_row(location: str) -> dict[str, str]:
    """The budget, complete and waiting cells of `sweeper status`'s table."""
    lines = invoke("status", location).output.splitlines()
    header = [cell.strip() for cell in lines[2].strip("┃").split("┃")]
    row = [cell.strip() for cell in lines[4].strip("│").split("│")]
    cells = dict(zip(header, row, strict=True))
    return {key: cells[key] for key in ("budget", "finished", "waiting")}


def test_a_lower_trials_override_leaves_the_budget(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=2, epochs=1)
    assert invoke("run", spec.name, "--report", "p.html").exit_code == 0
    result = invoke("run", spec.name, "--trials", "1", "--report", "p.html")
    assert "budget already met (2 finished trials)" in result.output
    assert _info("runs/tiny.db")[0].budget == 2


def test_a_raised_budget_and_an_edited_file_both_add_trials(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=1, epochs=1)
    assert invoke("run", spec.name, "--trials", "2", "--report", "p.html").exit_code == 0
    assert _info("runs/tiny.db")[0].budget == 2
    write_tiny_spec(in_tmp, trials=3, epochs=1)  # the file's budget edited
    assert invoke("run", spec.name, "--report", "p.html").exit_code == 0
    info, trials = _info("runs/tiny.db")
    assert info.budget == 3 and tally(trials).finished == 3


def test_storage_in_a_spec_is_relative_to_the_spec_s_folder(in_tmp: Path) -> None:
    folder = in_tmp / "specs"
    folder.mkdir()
    write_tiny_spec(folder, extra="")
    default = load_spec("specs/tiny.toml")
    assert Path(default.storage_location) == Path("specs/runs/tiny.db")
    text = (folder / "tiny.toml").read_text().replace("seed = 3", 'seed = 3\nstorage = "db/t.db"')
    (folder / "tiny.toml").write_text(text)
    named = load_spec("specs/tiny.toml")
    assert Path(named.storage_location) == Path("specs/db/t.db")
    # the command line's path is the shell's: relative to the current folder
    assert named.with_overrides(storage="here.db").storage_location == "here.db"


def test_a_run_says_where_the_study_is(in_tmp: Path) -> None:
    folder = in_tmp / "specs"
    folder.mkdir()
    write_tiny_spec(folder, trials=1, epochs=1)
    result = invoke("run", "specs/tiny.toml", "--report", "p.html")
    assert result.exit_code == 0, result.output
    assert f"study: {Path('specs/runs/tiny.db')}" in result.stdout.splitlines()
    assert (folder / "runs" / "tiny.db").is_file() and not (in_tmp / "runs").exists()


def test_no_continuation_is_queued_beyond_a_met_budget(in_tmp: Path) -> None:
    spec = load_spec(str(write_tiny_spec(in_tmp, trials=2)))
    study = optuna.create_study(study_name="tiny", storage=f"sqlite:///{in_tmp / 't.db'}")
    cut = study.ask()
    record_interrupted(cut, 1)
    study.tell(cut, state=TrialState.FAIL)
    for value in (0.5, 0.4):
        study.tell(study.ask(), value)
    assert top_up(study, spec) == 0
    assert tally(study.get_trials(deepcopy=False)).waiting == 0
    raised = spec.with_overrides(trials=3)  # room for one: the interrupted trial continues
    top_up(study, raised)
    (waiting,) = study.get_trials(deepcopy=False, states=(TrialState.WAITING,))
    assert TrialInfo.of(waiting).failed_trial == cut.number
