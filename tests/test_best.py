"""`sweeper best STUDY [--retrain --save PATH]` and `sweeper.load_model`."""

from __future__ import annotations

import math
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import optuna
import pytest
import torch

import sweeper
from sweeper.results.best import refit_best
from sweeper.results.fixed_spec import SpecEdit, edited_data, fixed_text, toml_value
from sweeper.seeds import trial_seed
from sweeper.spec.loading import load_spec, parse_spec
from sweeper.store.connect import open_storage
from sweeper.sweep.study import load_existing
from sweeper.training.params import TrialParams
from tests.conftest import invoke, write_tiny_spec

SERIES = """
[study]
name = "tanks"
trials = 3
seed = 8

[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "series"
file = "tanks.csv"
columns = ["level", "inflow"]
target = "level"
horizon = 2
window = 16
stride = 4
valid_fraction = 0.2
test_fraction = 0.2

[training]
epochs = 8
threads = 1
cell = "gru"

[search]
unroll = { one_of = [8, 16] }
hidden = { one_of = [8, 16] }
lr = { between = [0.005, 0.03], scale = "log" }
"""


def tanks(folder: Path) -> np.ndarray:
    """A water tank: the level follows the inflow with a lag (an invented plant)."""
    t = np.arange(400)
    inflow = 2 + np.sin(t / 9) + 0.3 * np.cos(t / 2.3)
    level = 10 + np.convolve(inflow, np.ones(6) / 6, mode="full")[: len(t)] * 3
    raw = np.column_stack([level, inflow])
    lines = ["hour,level,inflow"] + [f"{i},{a!r},{b!r}" for i, (a, b) in enumerate(raw.tolist())]
    (folder / "tanks.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (folder / "tanks.toml").write_text(SERIES, encoding="utf-8")
    assert invoke("run", "tanks.toml", "--report", "tanks.html").exit_code == 0
    return raw


def test_fragment_is_toml_with_the_best_trials_training_parameters(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=3, epochs=2, extra="")
    spec.write_text(spec.read_text().replace("batch = 32", "batch = 32\nthreads = 1"))
    assert invoke("run", spec.name, "--report", "t.html").exit_code == 0
    result = invoke("best", "runs/tiny.db")
    assert result.exit_code == 0, result.output
    study = optuna.load_study(study_name="tiny", storage=open_storage("runs/tiny.db"))
    best = study.best_trial
    first = result.output.splitlines()[0]
    assert first == (
        f"# best of 'tiny': trial {best.number}, valid_loss {best.value!r} "
        "at its last epoch, 2, "
        f"seed {best.user_attrs['seed']}"
    )
    table = tomllib.loads(result.output)["training"]
    assert table == {"epochs": 2, **best.user_attrs["training"]}
    # pasted over the spec's [training] and [search], it fixes the best configuration
    head = spec.read_text().split("[training]")[0]
    fixed = parse_spec(head + result.output, "fixed.toml")
    assert not fixed.search and fixed.training.epochs == 2
    assert (
        TrialParams.from_mapping(fixed.training.defaults).as_dict() == best.user_attrs["training"]
    )


@pytest.mark.parametrize("value", [1e-05, 0.1, 1 / 3, 2.0, -7.25e300, math.inf, 3, True, "lstm"])
def test_toml_values_read_back_exactly(value: object) -> None:
    assert tomllib.loads(f"x = {toml_value(value)}")["x"] == value


def test_retrain_and_save_go_together(in_tmp: Path) -> None:
    assert invoke("best", "x.db", "--retrain").exit_code == 2
    assert invoke("best", "x.db", "--save", "m.pt").exit_code == 2


def test_no_completed_trial_exits_2(in_tmp: Path) -> None:
    (in_tmp / "best_flaky.py").write_text(
        "def score(params, report):\n    raise RuntimeError('sensor offline')\n", encoding="utf-8"
    )
    (in_tmp / "flaky.toml").write_text(
        '[study]\nname = "flaky"\ntrials = 1\nmax_failures = 1\n\n'
        "[confirm]\nconfigurations = 0\n"
        '[task]\nkind = "objective"\n'
        'function = "best_flaky:score"\n\n[search]\nx = { between = [0.0, 1.0] }\n',
        encoding="utf-8",
    )
    assert invoke("run", "flaky.toml", "--report", "f.html").exit_code == 1
    result = invoke("best", "runs/flaky.db")
    assert result.exit_code == 2
    assert result.output == (
        "sweeper: error: study 'flaky' has no completed trial yet; run or resume it first\n"
    )


def test_objective_plugin_best_is_a_search_table_of_fixed_values(in_tmp: Path) -> None:
    (in_tmp / "best_bowl.py").write_text(
        "def score(params, report):\n    return (params['x'] - 1) ** 2\n", encoding="utf-8"
    )
    (in_tmp / "bowl.toml").write_text(
        '[study]\nname = "bowl"\ntrials = 4\n\n'
        "[confirm]\nconfigurations = 0\n"
        '[task]\nkind = "objective"\n'
        'function = "best_bowl:score"\n\n[search]\nx = { between = [-2.0, 2.0] }\n',
        encoding="utf-8",
    )
    ran = invoke("run", "bowl.toml", "--report", "b.html")
    assert ran.exit_code == 0, ran.output
    result = invoke("best", "runs/bowl.db")
    assert result.exit_code == 0, result.output
    study = optuna.load_study(study_name="bowl", storage=open_storage("runs/bowl.db"))
    assert tomllib.loads(result.output) == {"search": {"x": study.best_trial.params["x"]}}
    # refused before anything is printed: no fragment, no "final fit of trial ..." line
    refit = invoke("best", "runs/bowl.db", "--retrain", "--save", "m.pt")
    assert refit.exit_code == 2
    assert refit.output == (
        "sweeper: error: study 'bowl' runs an objective plugin (best_bowl:score); "
        "only trials that sweeper trains can be retrained\n"
    )
    # the fixed spec: [search] holds the best value, and it checks where its plugin is found
    written = invoke("best", "runs/bowl.db", "--spec", "bowl_best.toml")
    assert written.exit_code == 0, written.output
    fixed = tomllib.loads((in_tmp / "bowl_best.toml").read_text())
    assert fixed["search"] == {"x": study.best_trial.params["x"]}
    assert fixed["study"] == {
        "name": f"bowl-trial-{study.best_trial.number}",
        "trials": 1,
        "workers": 1,
    }
    assert invoke("check", "bowl_best.toml").exit_code == 0
    taken = invoke("best", "runs/bowl.db", "--spec", "bowl_best.toml")
    assert taken.exit_code == 2 and "already exists" in taken.output


def test_retrain_fits_train_plus_valid_and_scores_the_test_tail(in_tmp: Path) -> None:
    tanks(in_tmp)
    # a fixed spec away from tanks.csv would not find it: refused in one line, nothing written
    (in_tmp / "elsewhere").mkdir()
    away = invoke("best", "runs/tanks.db", "--spec", "elsewhere/tanks.toml")
    assert away.exit_code == 2
    line = away.output.splitlines()[-1]
    assert line.startswith("sweeper: error: elsewhere/tanks.toml: task.file: ")
    assert line.endswith(f"write the fixed spec beside the study's spec, in {in_tmp}/")
    assert not (in_tmp / "elsewhere" / "tanks.toml").exists()
    study, spec = load_existing("runs/tanks.db")
    refit = refit_best(study, spec)
    # trained for the best trial's score epoch, as the study recorded it (the default score:
    # the last epoch)
    assert refit.refit.held_out == "test"
    assert len(refit.run.records) == study.best_trial.user_attrs["score_epoch"]
    joined = len(refit.task.data("train")) + len(refit.task.data("valid"))
    assert len(refit.refit.data("train")) == joined
    assert refit.held_out.valid_loss < refit.baseline().value  # beats persistence on the tail


CHILD = """
import sys, numpy, torch, sweeper
torch.set_num_threads(int(sys.argv[3]))
model = sweeper.load_model(sys.argv[1])
numpy.save(sys.argv[2], model(numpy.load(sys.argv[2] + ".in.npy")).numpy())
"""


def test_saved_model_forecasts_in_a_fresh_process_equal_the_refit_models(in_tmp: Path) -> None:
    raw = tanks(in_tmp)
    result = invoke("best", "runs/tanks.db", "--retrain", "--save", "final/tanks.pt")
    assert result.exit_code == 0, result.output
    assert result.output.splitlines()[-1] == "# saved: final/tanks.pt"
    tomllib.loads(result.output)  # the progress lines are comments: still one TOML fragment
    # the sweep's final fit, in this process, on the raw test windows (rows 320..399)
    study, spec = load_existing("runs/tanks.db")
    refit = refit_best(study, spec)
    task = refit.task
    windows = np.stack([raw[s : s + 16] for s in task.starts("test")])
    scaled = torch.from_numpy(task.input_scaling.apply(windows)).float()
    with torch.no_grad():
        refit.run.model.eval()
        outputs, _ = refit.run.model(scaled, refit.run.model.initial_state(len(windows)))
    expected = task.target_scaling.invert(outputs.numpy())
    # the saved model, loaded by a fresh interpreter
    np.save(in_tmp / "out.npy.in.npy", windows)
    threads = str(torch.get_num_threads())
    child = [sys.executable, "-c", CHILD, "final/tanks.pt", str(in_tmp / "out.npy"), threads]
    done = subprocess.run(child, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    forecasts = np.load(in_tmp / "out.npy")
    assert forecasts.shape == (len(windows), 16, 1)
    assert np.array_equal(forecasts, expected)
    # in the units of the file: close to the level two hours on
    truth = np.stack([raw[s + 2 : s + 18, :1] for s in task.starts("test")])
    assert np.mean((forecasts - truth) ** 2) < np.mean((windows[..., :1] - truth) ** 2)


def test_loaded_model_describes_its_task_and_scaling(in_tmp: Path) -> None:
    tanks(in_tmp)
    assert invoke("best", "runs/tanks.db", "--retrain", "--save", "m.pt").exit_code == 0
    model = sweeper.load_model("m.pt")
    info = model.info
    assert (info["task"], info["kind"], info["horizon"]) == ("series", "regression", 2)
    assert (info["columns"], info["target"]) == (["level", "inflow"], ["level"])
    assert info["held_out"] == "test" and info["study"] == "tanks"
    assert info["spec_text"] == SERIES
    _study, spec = load_existing("runs/tanks.db")
    task = sweeper.tasks.registry.build_section_task(spec.task, spec.base_dir, spec.source)
    mean, std = model.target_scaling
    assert mean.tolist() == task.target_scaling.mean.tolist()
    assert std.tolist() == task.target_scaling.std.tolist()
    one = model(np.ones((16, 2)))  # a single sequence without a batch axis
    assert one.shape == (16, 1) and one.dtype == torch.float64
    with pytest.raises(ValueError, match="inputs must be"):
        model(np.ones((16, 3)))


def test_loading_something_else_is_a_one_line_input_error(tmp_path: Path) -> None:
    with pytest.raises(sweeper.InputError, match="no such file"):
        sweeper.load_model(tmp_path / "absent.pt")
    (tmp_path / "notes.pt").write_text("not a model")
    with pytest.raises(sweeper.InputError, match="is not a model saved by sweeper"):
        sweeper.load_model(tmp_path / "notes.pt")
    torch.save({"weights": torch.ones(2)}, tmp_path / "other.pt")
    with pytest.raises(sweeper.InputError, match="is not a model saved by sweeper"):
        sweeper.load_model(tmp_path / "other.pt")


SEQUENCES = """
[study]
name = "parcels"
better = "higher"
objective = "valid_metric"
trials = 2
seed = 4

[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "sequences"
file = "parcels.npz"
lengths = "lengths"
test_fraction = 0.2

[training]
epochs = 5
threads = 1
cell = "gru"
unroll = 10
lr = 0.02

[search]
hidden = { one_of = [8, 16] }
"""


def test_a_ragged_classifier_is_saved_and_predicts_at_each_last_step(in_tmp: Path) -> None:
    # parcel scans of varying length: the class is the sign of the last reading (invented)
    rng = np.random.default_rng(1)
    inputs = rng.normal(size=(300, 10, 1))
    lengths = rng.integers(2, 11, size=300)
    labels = (inputs[np.arange(300), lengths - 1, 0] > 0).astype(int)
    np.savez(in_tmp / "parcels.npz", inputs=inputs, labels=labels, lengths=lengths)
    (in_tmp / "parcels.toml").write_text(SEQUENCES, encoding="utf-8")
    assert invoke("run", "parcels.toml", "--report", "p.html").exit_code == 0
    result = invoke("best", "runs/parcels.db", "--retrain", "--save", "p.pt")
    assert result.exit_code == 0, result.output
    model = sweeper.load_model("p.pt")
    assert model.info["per_step"] is False and model.info["output_size"] == 2
    study, spec = load_existing("runs/parcels.db")
    refit = refit_best(study, spec)
    test = refit.task.index["test"]
    predicted = model.predict(inputs[test], lengths[test])
    assert predicted.shape == (len(test),)
    data = refit.task.data("test")
    with torch.no_grad():
        logits, _ = refit.run.model(data.inputs, refit.run.model.initial_state(len(test)))
    expected = logits.argmax(dim=-1)[torch.arange(len(test)), torch.as_tensor(lengths[test]) - 1]
    assert torch.equal(predicted, expected)
    assert float((predicted.numpy() == labels[test]).mean()) > 0.9


COMMENTED = """# a sweep worth keeping
[study]
name = "tiny"
trials = 1
seed = 3
sampler = "cmaes"

[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "adding"
length = 12  # short, so the test is quick
train_sequences = 64
valid_sequences = 32

[training]
epochs = 3
batch = 32  # small batches
threads = 1

[search]
unroll = { between = [3, 12] }
lr = { between = [0.001, 0.05], scale = "log" }

# every trial runs its epochs
[stopping]
rule = "none"
"""


def test_the_fixed_spec_checks_keeps_comments_and_reruns_trial_0_exactly(in_tmp: Path) -> None:
    (in_tmp / "tiny.toml").write_text(COMMENTED, encoding="utf-8")
    assert invoke("run", "tiny.toml", "--report", "t.html").exit_code == 0
    result = invoke("best", "runs/tiny.db", "--spec", "tiny_best.toml")
    assert result.exit_code == 0, result.output
    assert result.output.splitlines()[-1] == (
        "# spec with the search fixed: tiny_best.toml (run it with: sweeper run tiny_best.toml)"
    )
    text = (in_tmp / "tiny_best.toml").read_text()
    for comment in ("# a sweep worth keeping", "# short, so", "# small batches", "# every trial"):
        assert comment in text
    assert "its one trial trains with trial 0's seed" in text
    checked = invoke("check", "tiny_best.toml")
    assert checked.exit_code == 0, checked.output
    fixed = tomllib.loads(text)
    assert "search" not in fixed and fixed["study"]["sampler"] == "random"  # cmaes needs a range
    ran = invoke("run", "tiny_best.toml", "--report", "b.html")
    assert ran.exit_code == 0, ran.output
    old = optuna.load_study(study_name="tiny", storage=open_storage("runs/tiny.db")).best_trial
    new = optuna.load_study(
        study_name="tiny-trial-0", storage=open_storage("runs/tiny-trial-0.db")
    ).trials
    assert len(new) == 1
    assert new[0].user_attrs["training"] == old.user_attrs["training"]
    assert new[0].user_attrs["seed"] == old.user_attrs["seed"]
    assert new[0].value == old.value  # one machine, one thread: bit for bit


def test_a_later_best_trial_gives_its_parameters_and_names_the_seed_that_differs(
    in_tmp: Path,
) -> None:
    spec = write_tiny_spec(in_tmp, trials=2, epochs=2, sampler="grid", extra="")
    text = spec.read_text().replace("batch = 32", "batch = 32\nthreads = 1")
    search = text[text.index("[search]") : text.index("[stopping]")]
    # grid points run in order: trial 0's tiny rate learns nothing, so trial 1 is the best
    grid = "[search]\nunroll = 6\nhidden = 8\nclip = 1.0\nlr = { one_of = [1e-7, 0.03] }\n\n"
    spec.write_text(text.replace(search, grid))
    assert invoke("run", spec.name, "--report", "t.html").exit_code == 0
    study, _spec = load_existing("runs/tiny.db")
    best = study.best_trial
    assert best.number == 1
    assert invoke("best", "runs/tiny.db", "--spec", "best.toml").exit_code == 0
    fixed = load_spec("best.toml")
    assert not fixed.search and fixed.training.epochs == 2
    params = TrialParams.from_mapping(fixed.training.defaults).as_dict()
    assert params == best.user_attrs["training"]
    head = Path("best.toml").read_text().splitlines()[:3]
    zero = trial_seed(3, 0)  # the study seed of write_tiny_spec, trial 0: what a run trains with
    assert head[1] == f"# its one trial trains with seed {zero} (study seed 3, trial 0); but"
    assert head[2] == (
        f"# trial {best.number} trained with seed {best.user_attrs['seed']}, "
        f"as sweeper replay runs/tiny.db {best.number} does"
    )


def test_a_layout_beyond_a_line_edit_is_written_anew_without_comments() -> None:
    text = COMMENTED.replace('name = "tiny"', 'name = """\ntiny"""')
    edit = SpecEdit({"name": "t2", "trials": 1}, ("storage",), {"unroll": 5, "lr": 0.01}, None)
    written = fixed_text(text, edit, ["# head"])
    assert tomllib.loads(written) == edited_data(text, edit)
    assert written.startswith("# head\n") and "# small batches" not in written


def test_the_fragment_leaves_out_cell_for_an_own_model(in_tmp: Path) -> None:
    (in_tmp / "best_own.py").write_text(OWN_MODEL, encoding="utf-8")
    spec = write_tiny_spec(in_tmp, name="own", trials=1, epochs=1, extra="")
    text = spec.read_text().replace('kind = "adding"', 'kind = "adding"\nmodel = "best_own:build"')
    spec.write_text(text.replace("batch = 32", "batch = 32\nthreads = 1"))
    assert invoke("run", spec.name, "--report", "own.html").exit_code == 0
    result = invoke("best", "runs/own.db", "--spec", "own_best.toml")
    assert result.exit_code == 0, result.output
    assert "cell" not in tomllib.loads(result.output)["training"]
    assert "cell" not in tomllib.loads((in_tmp / "own_best.toml").read_text())["training"]
    assert invoke("check", "own_best.toml").exit_code == 0


OWN_MODEL = """
import torch
from torch import nn


class Plain(nn.Module):
    def __init__(self, input_size, hidden, output_size):
        super().__init__()
        self.hidden = hidden
        self.cell = nn.RNN(input_size, hidden, batch_first=True)
        self.head = nn.Linear(hidden, output_size)

    def forward(self, x, state):
        features, state = self.cell(x, state)
        return self.head(features), state

    def initial_state(self, batch):
        return torch.zeros(1, batch, self.hidden)

    def detach_state(self, state):
        return state.detach()


def build(params, input_size, output_size):
    return Plain(input_size, params["hidden"], output_size)
"""
