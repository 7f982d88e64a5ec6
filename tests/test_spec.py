"""Spec files: valid files load into frozen dataclasses; every bad input names file, key, fix."""

from __future__ import annotations

import dataclasses
import os
import tomllib
from pathlib import Path

import pytest

from sweeper.errors import SpecError
from sweeper.spec.checks import build_spec_task
from sweeper.spec.loading import load_spec, parse_spec
from sweeper.spec.sections import (
    StoppingSection,
    StudySection,
    TrainingSection,
    renamed_keys_upgraded,
)
from sweeper.spec.space import Choices, Fixed, Range
from sweeper.tasks import series
from sweeper.tasks.section import TaskSection
from tests.conftest import invoke

GOOD = """
[study]
name = "t"
trials = 4
[task]
kind = "adding"
length = 20
train_sequences = 64
valid_sequences = 32
[training]
epochs = 2
cell = "gru"
[search]
unroll = { between = [2, 20] }
hidden = { one_of = [8, 16] }
clip = { between = [0.1, 10.0], scale = "log" }
lr = { between = [1e-3, 1e-1], scale = "log" }
dropout = 0.0
"""


def test_good_spec_loads_into_frozen_dataclasses() -> None:
    spec = parse_spec(GOOD, "good.toml")
    assert spec.study.name == "t" and spec.study.trials == 4
    assert spec.search["unroll"] == Range(2.0, 20.0, integer=True)
    assert spec.search["hidden"] == Choices((8, 16))
    assert spec.search["clip"] == Range(0.1, 10.0, log=True)
    assert spec.search["dropout"] == Fixed(0.0)
    assert spec.training.defaults == {"cell": "gru"}
    with pytest.raises(dataclasses.FrozenInstanceError):
        spec.study.trials = 5  # type: ignore[misc]


def test_digest_ignores_budget_and_workers_but_not_the_space() -> None:
    spec = parse_spec(GOOD, "good.toml")
    assert spec.with_overrides(trials=40, workers=2).digest() == spec.digest()
    other = parse_spec(GOOD.replace("[8, 16]", "[8, 32]"), "good.toml")
    assert other.digest() != spec.digest()


def _error(text: str) -> str:
    with pytest.raises(SpecError) as caught:
        parse_spec(text, "bad.toml")
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith("bad.toml: ")
    return message


@pytest.mark.parametrize(
    ("change", "expected"),
    [
        (
            ("[study]", "[study]\nnmae = 1"),
            "bad.toml: study.nmae: unknown key; did you mean 'name'?",
        ),
        (
            ("[study]", '[study]\ngoal = "maximize"'),  # the key's earlier name
            "bad.toml: study.goal: unknown key; did you mean 'better'?",
        ),
        (
            ("[study]", '[study]\nbetter = "minimize"'),
            "bad.toml: study.better: must be one of lower, higher, got 'minimize'; "
            "did you mean 'lower'?",
        ),
        (("trials = 4", 'trials = "four"'), "bad.toml: study.trials: must be an integer"),
        (("[2, 20]", "[20, 2]"), "bad.toml: search.unroll.between: empty range [20, 2]"),
        (("[0.1, 10.0], scale", "[0.0, 10.0], scale"), "bad.toml: search.clip.between: a log"),
        (("[2, 20]", "[2, 40]"), "bad.toml: search.unroll: unroll 40 is longer than the task"),
        (("hidden =", "hiden ="), "bad.toml: search.hiden: not a training parameter; did you mean"),
        (('kind = "adding"', 'kind = "adder"'), "bad.toml: task.kind"),
        (("length = 20", "lenght = 20"), "bad.toml: task.lenght"),
        (('cell = "gru"', 'cell = "tree"'), "bad.toml: training.cell: cell must be one of"),
        (("epochs = 2", "epochs = 0"), "bad.toml: training.epochs: must be at least 1"),
        (("[8, 16]", "[8, 8]"), "bad.toml: search.hidden.one_of: lists a value twice"),
        (("[2, 20] }", "[2.5, 20] }"), "bad.toml: search.unroll.between: must be whole numbers"),
        (("dropout = 0.0", 'cell = "lstm"'), "bad.toml: search.cell: also set as training.cell"),
    ],
)
def test_bad_specs_name_the_key_and_the_fix(change: tuple[str, str], expected: str) -> None:
    old, new = change
    assert old in GOOD
    assert _error(GOOD.replace(old, new, 1)).startswith(expected)


def test_malformed_toml_gives_line_and_column() -> None:
    message = _error(GOOD.replace("trials = 4", "trials = = 4"))
    assert "not valid TOML" in message and "line 4" in message and "column" in message


def test_missing_sections_and_files(tmp_path: Path) -> None:
    assert "missing section" in _error('[study]\nname = "x"\n')
    with pytest.raises(SpecError, match="no such spec file"):
        load_spec(tmp_path / "absent.toml")


def test_grid_needs_steps() -> None:
    text = GOOD.replace("trials = 4", 'trials = 4\nsampler = "grid"')
    assert "search.clip: the grid sampler needs every range to have a step" in _error(text)
    stepped = text.replace('{ between = [0.1, 10.0], scale = "log" }', "0.5").replace(
        '{ between = [1e-3, 1e-1], scale = "log" }', "{ between = [0.01, 0.03], step = 0.01 }"
    )
    spec = parse_spec(stepped, "grid.toml")
    from sweeper.spec.sections import budget_of

    assert budget_of(spec) == 4  # the trial budget is below the 19 * 2 * 3 grid points


def test_a_first_look_checks_sections_but_not_the_task(tmp_path: Path) -> None:
    # `sweeper run` reads the sections first (to start its pool), then checks the task
    path = tmp_path / "bad.toml"
    path.write_text(GOOD.replace("[2, 20]", "[2, 40]", 1))
    assert load_spec(path, check_task=False).search["unroll"].describe()
    with pytest.raises(SpecError, match="unroll 40 is longer than the task"):
        load_spec(path)
    path.write_text(GOOD.replace("trials = 4", 'trials = "four"'))
    with pytest.raises(SpecError, match=r"study\.trials: must be an integer"):
        load_spec(path, check_task=False)


# --- sections check their own rules ---------------------------------------------------------


@pytest.mark.parametrize(
    ("build", "expected"),
    [
        (lambda: StudySection(name="x", workers=0), "study.workers: must be at least 1, got 0"),
        (lambda: StudySection(name=" "), "study.name: must not be empty"),
        (lambda: StudySection(name="x", trials="4"), "study.trials: must be an integer"),
        (
            lambda: StudySection(name="x", better="hihger"),
            "study.better: must be one of lower, higher, got 'hihger'; did you mean 'higher'?",
        ),
        (
            lambda: StudySection(name="x", better="maximize"),
            "study.better: must be one of lower, higher, got 'maximize'; did you mean 'higher'?",
        ),
        (lambda: TrainingSection(epochs=0), "training.epochs: must be at least 1, got 0"),
        (lambda: TrainingSection(defaults={"hiden": 8}), "training.hiden: unknown key; did you"),
        (lambda: TrainingSection(defaults={"cell": "tree"}), "training.cell: cell must be one of"),
        (lambda: StoppingSection(reduction=1), "stopping.reduction: must be at least 2, got 1"),
    ],
)
def test_building_a_section_in_code_checks_the_same_rules(build, expected: str) -> None:
    with pytest.raises(SpecError) as caught:
        build()
    assert str(caught.value).startswith(expected)
    assert "\n" not in str(caught.value)


def test_a_file_names_itself_in_the_message_its_section_raised(tmp_path: Path) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(GOOD.replace("trials = 4", "trials = 4\nworkers = 0"))
    with pytest.raises(SpecError) as caught:
        load_spec(path, check_task=False)
    assert str(caught.value) == f"{path}: study.workers: must be at least 1, got 0"
    assert (caught.value.source, caught.value.key) == (str(path), "study.workers")


def test_sections_take_whole_numbers_as_real_ones() -> None:
    assert StudySection(name="x", compute_hours=2).compute_hours == 2.0
    assert isinstance(TrainingSection(defaults={"lr": 1}).defaults["lr"], float)


def test_overrides_are_checked_under_their_option_names() -> None:
    spec = parse_spec(GOOD, "good.toml")
    with pytest.raises(SpecError, match=r"good\.toml: --workers: must be at least 1, got 0"):
        spec.with_overrides(workers=0)


# --- the [task] section and the spec's digest -----------------------------------------------


OBJECTIVE_SPEC = """
[study]
name = "bowl"
trials = 3
[task]
kind = "objective"
function = "bowl:score"
path = "lib"
[search]
x = { between = [-1.0, 1.0] }
"""


def test_task_section_is_typed() -> None:
    spec = parse_spec(GOOD, "good.toml")
    assert spec.task == TaskSection(
        "adding", {"length": 20, "train_sequences": 64, "valid_sequences": 32}
    )
    own = parse_spec(
        GOOD.replace('kind = "adding"', 'kind = "adding"\nmodel = "nets:make"'), check_task=False
    )
    assert (own.task.model, own.task.model_path, own.task.options["length"]) == (
        "nets:make",
        None,
        20,
    )
    objective = parse_spec(OBJECTIVE_SPEC, "o.toml", check_task=False)
    assert objective.is_objective_plugin
    assert (objective.task.function, objective.task.path, objective.task.options) == (
        "bowl:score",
        "lib",
        {},
    )


def test_task_table_is_the_table_as_written() -> None:
    for text in (GOOD, OBJECTIVE_SPEC):
        spec = parse_spec(text, "x.toml", check_task=False)
        assert spec.task.table() == tomllib.loads(text)["task"]


# Digests that the code before [task] became typed gave (recorded from it): studies store the
# digest and refuse a spec whose digest changed, so these must never move.
DIGESTS_BEFORE = {
    "good": "5ef85d46192fd480b58af95c8decccd0c77d3bd50b6378a1744cd04d34a92610",
    "objective": "d5fb3f9bac7ebb833d9f1425e9d12780234e332def2bad6c18fa25bb05e6191d",
    "adding_lstm_demo": "b8d1210be153848d5684848fe318b29579bf8b48f1ef79dd52d8095f10c2f010",
    "copy_gru": "157a6b1f6dbd2c102a42c7750ac712e27aed866029f1ced42c55e9707a8f9f90",
    "greenhouse_forecast": "a43f08db7b881a7b1318d37f872ad483610d8c51765522c506631fd754c7a736",
    "greenhouse_own_model": "1d0e4fe0d236035a74fde85e384362086d4f7066f4be1fccb4f5efbba70f8cf6",
    "reber_grammar": "30b9494f82ae8a64b612cf7cdc634fc5c34333f2426a35e9de8ebba2f8c18ad0",
    "recall_unroll": "a417694536eec6a0bfa3e72223d97a32127c917bea3247c2f8c32a56bb2e65a8",
}
SEARCH_SPACES = Path(__file__).resolve().parent.parent / "search_spaces"


@pytest.mark.parametrize("name", DIGESTS_BEFORE)
def test_digest_is_unchanged_so_existing_studies_continue(name: str) -> None:
    if name == "good":
        spec = parse_spec(GOOD, "good.toml", check_task=False)
    elif name == "objective":
        spec = parse_spec(OBJECTIVE_SPEC, "o.toml", check_task=False)
    else:
        spec = load_spec(SEARCH_SPACES / f"{name}.toml", check_task=False)
    assert spec.digest() == DIGESTS_BEFORE[name]


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        (GOOD.replace('kind = "adding"\n', ""), "bad.toml: task.kind: missing; name the task"),
        (GOOD.replace('kind = "adding"', "kind = 3"), "bad.toml: task.kind: must be a string"),
        (
            GOOD.replace('kind = "adding"', 'kind = "adding"\nmodel_path = "nets"'),
            "bad.toml: task.model_path: set only with model = 'module:function'",
        ),
        (
            OBJECTIVE_SPEC.replace("function =", "fuction ="),
            "bad.toml: task.fuction: unknown key; did you mean 'function'?",
        ),
        (
            OBJECTIVE_SPEC.replace('function = "bowl:score"\n', ""),
            'bad.toml: task.function: missing; give "module:function"',
        ),
    ],
)
def test_task_section_errors_name_the_key(text: str, expected: str) -> None:
    with pytest.raises(SpecError) as caught:
        parse_spec(text, "bad.toml", check_task=False)
    assert str(caught.value).startswith(expected)


# --- a process builds a spec's task once ----------------------------------------------------


SERIES_SPEC = """
[study]
name = "plant"
trials = 2
seed = 1
[task]
kind = "series"
file = "plant.csv"
window = 8
[training]
epochs = 1
batch = 8
[search]
hidden = { one_of = [4, 8] }
unroll = 4
[stopping]
rule = "none"
"""


def write_series_spec(folder: Path) -> Path:
    rows = ["level,flow"] + [f"{0.1 * t + (t % 5)},{5 + (t % 3)}" for t in range(120)]
    (folder / "plant.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    path = folder / "plant.toml"
    path.write_text(SERIES_SPEC, encoding="utf-8")
    return path


def count_csv_reads(monkeypatch: pytest.MonkeyPatch) -> list[Path]:
    reads: list[Path] = []
    real = series.read_columns

    def counted(path: Path, source: str):
        reads.append(path)
        return real(path, source)

    monkeypatch.setattr(series, "read_columns", counted)
    return reads


def test_a_series_run_reads_its_csv_once(in_tmp: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the check, the launcher's baseline (twice) and the in-process worker (which re-reads
    # the study's stored spec) each read it before the task was built once per process
    reads = count_csv_reads(monkeypatch)
    result = invoke("run", write_series_spec(in_tmp).name)
    assert result.exit_code == 0, result.output
    assert len(reads) == 1


def test_the_task_is_built_again_after_its_data_file_changed(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    reads = count_csv_reads(monkeypatch)
    path = write_series_spec(tmp_path)
    first = build_spec_task(load_spec(path))
    assert build_spec_task(load_spec(path)) is first
    assert len(reads) == 1
    data = tmp_path / "plant.csv"
    data.write_text(data.read_text() + "99,5\n", encoding="utf-8")
    os.utime(data, ns=(0, data.stat().st_mtime_ns + 10**9))  # a new time, even on coarse clocks
    rebuilt = build_spec_task(load_spec(path))
    assert rebuilt is not first and len(reads) == 2


def test_a_stored_spec_with_the_earlier_key_name_still_resumes() -> None:
    # a study made before `goal` became `better` stores its text with the old key
    old = GOOD.replace("[study]", '[study]\ngoal = "maximize"', 1)
    upgraded = parse_spec(renamed_keys_upgraded(old), "stored", check_task=False)
    assert upgraded.study.better == "higher"
    assert (
        upgraded.digest()
        == parse_spec(
            GOOD.replace("[study]", '[study]\nbetter = "higher"', 1), "x", check_task=False
        ).digest()
    )
