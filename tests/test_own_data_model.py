"""A spec's own model (``[task] model = "module:function"``): loading, contract checks, sweeps."""

from __future__ import annotations

import sys
import uuid
from pathlib import Path

import optuna
import pytest
import torch
from optuna.trial import TrialState

from sweeper.errors import SpecError
from sweeper.store.connect import open_storage
from sweeper.tasks.section import task_section
from sweeper.training.model_plugin import PluginBuilder, build_task_with_model, model_builder
from sweeper.training.models import build_model
from sweeper.training.params import TrialParams
from tests.conftest import invoke, write_tiny_spec

MODELS = """
import torch
from torch import nn

calls = []


class Wide(nn.Module):
    def __init__(self, input_size, hidden, output_size):
        super().__init__()
        self.hidden = hidden
        self.cell = nn.GRU(input_size, hidden, batch_first=True)
        self.head = nn.Linear(hidden, output_size)

    def forward(self, x, state):
        features, state = self.cell(x, state)
        return self.head(features), state

    def initial_state(self, batch):
        return torch.zeros(1, batch, self.hidden)

    def detach_state(self, state):
        return state.detach()


def build(params, input_size, output_size):
    calls.append((dict(params), input_size, output_size))
    return Wide(input_size, params["hidden"], output_size)


def linear(params, input_size, output_size):
    return nn.Linear(input_size, output_size)


class NoState(nn.Module):
    def forward(self, x, state):
        return x, state


def stateless(params, input_size, output_size):
    return NoState()


def wrong_width(params, input_size, output_size):
    return Wide(input_size, 4, output_size + 1)


def one_argument(params):
    return None


def crashes(params, input_size, output_size):
    raise RuntimeError("out of ideas")
"""


def write_module(folder: Path) -> str:
    """A uniquely named module (imports are cached process-wide by name)."""
    name = f"models_{uuid.uuid4().hex}"
    (folder / f"{name}.py").write_text(MODELS, encoding="utf-8")
    return name


def adding(folder: Path, **options):
    section = task_section({"kind": "adding", "length": 6, **options}, "m.toml")
    return build_task_with_model(section, folder, "m.toml")


def test_the_function_gets_the_trial_params_and_the_task_sizes(tmp_path: Path) -> None:
    name = write_module(tmp_path)
    build = model_builder(f"{name}:build", None, tmp_path, "m.toml")
    assert isinstance(build, PluginBuilder)
    model = build(TrialParams(hidden=7, lr=0.5), 2, 1)
    params, input_size, output_size = sys.modules[name].calls[-1]
    assert params == TrialParams(hidden=7, lr=0.5).as_dict()
    assert (input_size, output_size, model.hidden) == (2, 1, 7)


def test_without_a_model_key_the_builtin_model_is_used(tmp_path: Path) -> None:
    assert model_builder(None, None, tmp_path, "m.toml") is build_model


def test_a_model_path_folder_is_searched_and_sys_path_restored(tmp_path: Path) -> None:
    (tmp_path / "nets").mkdir()
    name = write_module(tmp_path / "nets")
    before = list(sys.path)
    task = adding(tmp_path, model=f"{name}:build", model_path="nets")
    assert task.name == "adding" and sys.path == before


def test_checking_the_model_keeps_the_callers_random_streams(tmp_path: Path) -> None:
    name = write_module(tmp_path)
    torch.manual_seed(5)
    before = torch.get_rng_state()
    adding(tmp_path, model=f"{name}:build")
    assert torch.equal(torch.get_rng_state(), before)


@pytest.mark.parametrize(
    ("function", "key", "words"),
    [
        ("linear", "task.model", "returned a Linear without initial_state, detach_state"),
        ("stateless", "task.model", "returned a NoState without initial_state, detach_state"),
        ("wrong_width", "task.model", "outputs of shape (2, 3, 2)"),
        ("one_argument", "task.model", "must accept (params, input_size, output_size)"),
        ("crashes", "task.model", "failed a trial run: RuntimeError: out of ideas"),
        ("absent", "task.model", "has no attribute 'absent'"),
    ],
)
def test_a_broken_model_is_a_one_line_spec_error(
    tmp_path: Path, function: str, key: str, words: str
) -> None:
    name = write_module(tmp_path)
    with pytest.raises(SpecError) as caught:
        adding(tmp_path, model=f"{name}:{function}")
    assert caught.value.key == key
    assert words in caught.value.message
    assert "\n" not in str(caught.value)


def test_model_path_alone_is_refused(tmp_path: Path) -> None:
    with pytest.raises(SpecError) as caught:
        adding(tmp_path, model_path=".")
    assert caught.value.key == "task.model_path"


def test_check_exits_2_naming_the_spec_and_key(in_tmp: Path) -> None:
    name = write_module(in_tmp)
    spec = write_tiny_spec(in_tmp, name="broken")
    text = spec.read_text().replace('kind = "adding"', f'kind = "adding"\nmodel = "{name}:linear"')
    spec.write_text(text)
    result = invoke("check", spec.name)
    assert result.exit_code == 2
    assert result.output.startswith("sweeper: error: broken.toml: task.model: ")
    assert len(result.output.strip().splitlines()) == 1


def test_a_sweep_trains_the_plugin_model_and_records_it(in_tmp: Path) -> None:
    name = write_module(in_tmp)
    spec = write_tiny_spec(in_tmp, name="own", trials=2, epochs=2, extra="")
    text = spec.read_text().replace('kind = "adding"', f'kind = "adding"\nmodel = "{name}:build"')
    spec.write_text(text.replace("batch = 32", "batch = 32\nthreads = 1"))
    result = invoke("run", spec.name, "--report", "own.html")
    assert result.exit_code == 0, result.output
    study = optuna.load_study(study_name="own", storage=open_storage("runs/own.db"))
    trials = study.get_trials()
    assert [t.state for t in trials] == [TrialState.COMPLETE] * 2
    built = [call[0]["hidden"] for call in sys.modules[name].calls]
    for trial in trials:
        assert trial.params["hidden"] in built  # each trial built the plugin at its width
