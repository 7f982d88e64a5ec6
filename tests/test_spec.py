"""Spec files: valid files load into frozen dataclasses; every bad input names file, key, fix."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

from sweeper.errors import SpecError
from sweeper.spec.loading import load_spec, parse_spec
from sweeper.spec.space import Choices, Fixed, Range

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
