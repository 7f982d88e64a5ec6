"""build_task: dispatch, option checking, determinism, and the plugin and objective loaders."""

import sys
import uuid
from pathlib import Path

import pytest
import torch

from sweeper.did_you_mean import closest
from sweeper.errors import SpecError
from sweeper.spec import sections
from sweeper.tasks import options as task_options
from sweeper.tasks.base import Task
from sweeper.tasks.objective import load_objective
from sweeper.tasks.options import OptionError, unknown_key_message
from sweeper.tasks.registry import TASK_KINDS, build_task
from sweeper.tasks.section import TaskSection, section_from_table

GENERATED = {
    "adding": {"length": 12},
    "copy": {"delay": 5},
    "recall": {"length": 12, "delay": 3},
    "reber": {"length": 20},
}


def build(options, base_dir=Path(".")):
    return build_task(options, base_dir, "spec.toml")


def spec_error(options, base_dir=Path(".")) -> SpecError:
    with pytest.raises(SpecError) as caught:
        build(options, base_dir)
    assert "\n" not in str(caught.value)
    return caught.value


def test_kinds():
    assert TASK_KINDS == (
        "adding",
        "copy",
        "recall",
        "reber",
        "series",
        "text",
        "sequences",
        "plugin",
    )


def test_unknown_and_missing_kind():
    error = spec_error({"kind": "adder"})
    assert error.key == "task.kind"
    assert "did you mean 'adding'?" in error.message
    assert str(error).startswith("spec.toml: task.kind: ")
    assert spec_error({"length": 5}).key == "task.kind"
    assert "must be a string" in spec_error({"kind": 3}).message


@pytest.mark.parametrize(
    ("options", "key", "hint"),
    [
        ({"kind": "adding", "lenght": 10}, "task.lenght", "did you mean 'length'?"),
        ({"kind": "copy", "dealy": 10}, "task.dealy", "did you mean 'delay'?"),
        ({"kind": "recall", "symbol": 3}, "task.symbol", "did you mean 'symbols'?"),
        ({"kind": "reber", "train_sequence": 3}, "task.train_sequence", "'train_sequences'?"),
        ({"kind": "series", "file": "x.csv", "colums": ["a"]}, "task.colums", "'columns'?"),
        ({"kind": "text", "valid_fractoin": 0.1}, "task.valid_fractoin", "'valid_fraction'?"),
    ],
)
def test_misspelt_option_suggests_the_nearest(options, key, hint):
    error = spec_error(options)
    assert error.key == key
    assert hint in error.message


@pytest.mark.parametrize(
    ("options", "key", "words"),
    [
        ({"kind": "adding", "length": "10"}, "task.length", "whole number, got '10' (str)"),
        ({"kind": "adding", "length": 10.0}, "task.length", "whole number, got 10.0"),
        ({"kind": "adding", "seed": True}, "task.seed", "whole number, got True"),
        ({"kind": "adding", "length": 1}, "task.length", "must be >= 2, got 1"),
        ({"kind": "copy", "valid_sequences": 0}, "task.valid_sequences", ">= 1, got 0"),
        ({"kind": "text", "file": 3}, "task.file", "must be a string"),
        ({"kind": "series", "columns": [1, 2]}, "task.columns", "list of names"),
    ],
)
def test_wrong_type_or_range(options, key, words):
    error = spec_error(options)
    assert error.key == key
    assert words in error.message


@pytest.mark.parametrize("kind", GENERATED)
def test_same_options_give_identical_tensors(kind):
    options = {"kind": kind, "seed": 4, "train_sequences": 30, "valid_sequences": 20}
    options.update(GENERATED[kind])
    first, second = build(options), build(options)
    for split in ("train", "valid"):
        a, b = first.data(split), second.data(split)
        for name in ("inputs", "targets", "weights"):
            assert torch.equal(getattr(a, name), getattr(b, name))
        assert a.extras.keys() == b.extras.keys()
        assert all(torch.equal(a.extras[k], b.extras[k]) for k in a.extras)
        assert first.data(split) is a  # cached after the first call
    assert not torch.equal(first.data("train").inputs[:20], first.data("valid").inputs)
    other = build({**options, "seed": 5}).data("train")
    assert not torch.equal(other.inputs, first.data("train").inputs)


@pytest.mark.parametrize("kind", GENERATED)
def test_shapes_agree_with_the_declared_sizes(kind):
    task = build({"kind": kind, "train_sequences": 8, **GENERATED[kind]})
    data = task.data("train")
    assert data.inputs.shape == (8, task.length, task.input_size)
    assert data.inputs.dtype == torch.float32 and data.weights.shape == (8, task.length)
    if task.kind == "classification":
        assert data.targets.shape == (8, task.length)
        assert int(data.targets.max()) < task.output_size
    else:
        assert data.targets.shape == (8, task.length, task.output_size)


def write_module(folder: Path, body: str) -> str:
    """A uniquely named module in ``folder`` (imports are cached process-wide by name)."""
    name = f"plugin_{uuid.uuid4().hex}"
    (folder / f"{name}.py").write_text(body, encoding="utf-8")
    return name


PLUGIN = """
from sweeper.tasks.registry import build_task
from pathlib import Path

def make(options):
    return build_task({"kind": "adding", **options}, Path("."), "plugin")

def not_a_task(options):
    return {"kind": "adding"}

def broken(options):
    raise RuntimeError("no data today")
"""


def test_plugin_passes_options_and_restores_sys_path(tmp_path):
    (tmp_path / "lib").mkdir()
    name = write_module(tmp_path / "lib", PLUGIN)
    before = list(sys.path)
    task = build(
        {"kind": "plugin", "factory": f"{name}:make", "path": "lib", "length": 7}, tmp_path
    )
    assert isinstance(task, Task)
    assert task.name == "adding" and task.length == 7
    assert sys.path == before


@pytest.mark.parametrize(
    ("factory", "words"),
    [
        ("missing_module_zz:make", "cannot import 'missing_module_zz'"),
        ("{name}:absent", "has no attribute 'absent'"),
        ("{name}", "must look like 'module:function'"),
        ("{name}:not_a_task", "returned a dict; it must return a sweeper.tasks.Task"),
        ("{name}:broken", "raised RuntimeError: no data today"),
    ],
)
def test_plugin_errors_name_the_factory(tmp_path, factory, words):
    name = write_module(tmp_path, PLUGIN)
    error = spec_error({"kind": "plugin", "factory": factory.format(name=name)}, tmp_path)
    assert error.key == "task.factory"
    assert words in error.message


def test_plugin_needs_a_factory_and_an_existing_path(tmp_path):
    assert spec_error({"kind": "plugin"}, tmp_path).key == "task.factory"
    error = spec_error({"kind": "plugin", "factory": "a:b", "path": "nowhere"}, tmp_path)
    assert error.key == "task.path"


OBJECTIVE = """
def score(params, report):
    for epoch in range(3):
        report(epoch, params["x"] * epoch)
    return params["x"] ** 2

def lonely(params):
    return 0.0
"""


def test_load_objective_calls_with_params_and_report(tmp_path):
    name = write_module(tmp_path, OBJECTIVE)
    objective = load_objective(f"{name}:score", tmp_path, "o.toml", "task.function")
    reports: list[tuple[int, float]] = []
    assert objective({"x": 3.0}, lambda epoch, value: reports.append((epoch, value))) == 9.0
    assert reports == [(0, 0.0), (1, 3.0), (2, 6.0)]


@pytest.mark.parametrize(
    ("ref", "words"),
    [
        ("not_here_zz:score", "cannot import 'not_here_zz'"),
        ("{name}:lonely", "must accept two arguments (params, report)"),
        ("{name}:nothing", "no attribute 'nothing'"),
    ],
)
def test_load_objective_errors_name_the_key(tmp_path, ref, words):
    name = write_module(tmp_path, OBJECTIVE)
    with pytest.raises(SpecError) as caught:
        load_objective(ref.format(name=name), tmp_path, "o.toml", "task.function")
    assert caught.value.key == "task.function"
    assert words in caught.value.message


def test_one_did_you_mean_for_spec_keys_and_task_options():
    # the spec's keys and the task options share one helper and so one cut-off
    assert closest("adder", TASK_KINDS) == "adding"  # difflib ratio 0.545, above the cut-off
    assert closest("xyz", TASK_KINDS) is None
    assert "did you mean 'adding'?" in unknown_key_message("adder", TASK_KINDS, "task kind")
    assert sections.closest is closest and task_options.closest is closest


def test_task_section_keeps_the_model_keys_out_of_the_options():
    section = section_from_table({"kind": "adding", "length": 9, "model": "m:f"})
    assert section.options == {"length": 9}
    assert (section.model, section.model_path) == ("m:f", None)
    assert build(section.table()).length == 9


@pytest.mark.parametrize(
    ("make", "key"),
    [
        (lambda: TaskSection(3), "kind"),  # type: ignore[arg-type]
        (lambda: TaskSection("adding", model_path="nets"), "model_path"),
        (lambda: TaskSection("adding", model=3), "model"),  # type: ignore[arg-type]
        (lambda: TaskSection("objective"), "function"),
        (lambda: TaskSection("objective", {"fn": "a:b"}, function="a:b"), "fn"),
        (lambda: TaskSection("objective", function="a:b", path=1), "path"),  # type: ignore[arg-type]
    ],
)
def test_task_section_checks_its_own_shape(make, key):
    with pytest.raises(OptionError) as caught:
        make()
    assert caught.value.key == key


def test_an_objective_is_no_task_kind_to_build():
    error = spec_error({"kind": "objective", "function": "a:b"})
    assert error.key == "task.kind" and "unknown task kind 'objective'" in error.message
