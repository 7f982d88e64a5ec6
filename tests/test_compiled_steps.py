"""The compiled step loops (step_kernels.cpp): their nonlinearities, the build, the fallback.

The references are torch's own functions: torch.exp, torch.tanh and torch.sigmoid evaluated in
float64. The loops' agreement with nn.RNN / nn.GRU is tests/test_recurrence.py's job.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
import torch

from sweeper.training import compiled_steps
from sweeper.training.numerics import (
    COMPILED,
    WINDOW,
    RevisionUnavailable,
    current_revision,
)
from sweeper.training.params import TrialParams
from sweeper.training.trial_run import TrialRun
from tests.test_train import regression_task

FLOAT32_EPS = 2.0**-23


@pytest.fixture
def kernels() -> compiled_steps.Kernels:
    loaded = compiled_steps.loaded()
    if loaded is None:
        pytest.skip(f"no compiled step loops here: {compiled_steps.why_not()}")
    return loaded


@pytest.fixture
def fresh_build(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> Iterator[Path]:
    """A new, empty kernel cache; the process's loaded kernels are restored afterwards."""
    monkeypatch.setenv("SWEEPER_KERNEL_CACHE", str(tmp_path / "kernels"))
    compiled_steps._load.cache_clear()
    yield tmp_path / "kernels"
    monkeypatch.undo()
    compiled_steps._load.cache_clear()


@pytest.mark.parametrize(
    ("which", "reference", "low", "high"),
    [
        ("exp", torch.exp, -80.0, 80.0),
        ("tanh", torch.tanh, -20.0, 20.0),
        ("sigmoid", torch.sigmoid, -80.0, 30.0),
    ],
)
def test_nonlinearities_are_within_a_few_float32_roundings_of_torchs(
    kernels: compiled_steps.Kernels, which: str, reference: object, low: float, high: float
) -> None:
    x = torch.linspace(low, high, 400_001)
    x = torch.cat((x, torch.tensor([0.0, -1e-7, 1e-30, 0.6249, 0.6251, -0.625])))
    got = kernels.activation(x, which).double()
    want = reference(x.double())  # type: ignore[operator]
    relative = ((got - want).abs() / want.abs().clamp_min(1e-30)).max()
    assert float(relative) <= 4 * FLOAT32_EPS


def test_nonlinearities_keep_nan_and_saturate_at_infinity(kernels: compiled_steps.Kernels) -> None:
    x = torch.tensor([float("nan"), float("inf"), -float("inf")])
    tanh, sigmoid = kernels.activation(x, "tanh"), kernels.activation(x, "sigmoid")
    assert torch.isnan(tanh[0]) and torch.isnan(sigmoid[0])  # a diverged trial stays visible
    assert tanh[1:].tolist() == [1.0, -1.0]
    assert sigmoid[1] == 1.0 and 0.0 <= float(sigmoid[2]) < 1e-37


def test_a_non_contiguous_tensor_is_refused(kernels: compiled_steps.Kernels) -> None:
    out = torch.zeros(4, 2, 3).transpose(0, 1)
    with pytest.raises(ValueError, match="contiguous"):
        kernels.call("elman_forward", (2, 4, 3), torch.zeros(4, 3), torch.zeros(3, 3), out)


def test_a_new_cache_builds_the_library_once(
    kernels: compiled_steps.Kernels, fresh_build: Path
) -> None:
    assert compiled_steps.loaded() is not None
    built = list(fresh_build.glob("step_kernels-*.so"))
    assert len(built) == 1 and not list(fresh_build.glob("tmp*"))
    stamp = built[0].stat().st_mtime_ns
    compiled_steps._load.cache_clear()
    assert compiled_steps.loaded() is not None  # a second process finds it built
    assert built[0].stat().st_mtime_ns == stamp


def test_without_a_working_compiler_new_trials_take_the_python_loops(
    fresh_build: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("CXX", "false")  # a "compiler" that always fails
    assert compiled_steps.loaded() is None
    assert "failed" in compiled_steps.why_not()
    assert current_revision() == WINDOW
    task = regression_task(n=10)
    params = TrialParams(cell="gru", hidden=4, unroll=5, batch=5)
    assert TrialRun(task, params, seed=1).revision == WINDOW
    with pytest.raises(RevisionUnavailable, match="trainer revision window-2 needs the compiled"):
        TrialRun(task, params, seed=1, revision=COMPILED)


def test_the_switch_turns_the_kernels_off(
    fresh_build: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("SWEEPER_KERNELS", "off")
    assert compiled_steps.loaded() is None and compiled_steps.why_not() == "SWEEPER_KERNELS=off"


def test_other_dtypes_run_the_python_loops(kernels: compiled_steps.Kernels) -> None:
    # bfloat16 is not one the kernels take: the same node runs the Python loops instead
    from sweeper.training.gru_window import GRUWindow

    assert not kernels.supports(torch.zeros(1, dtype=torch.bfloat16))
    x = torch.randn(3, 2, 4, dtype=torch.bfloat16)
    weights = [torch.randn(shape, dtype=torch.bfloat16) for shape in ((9, 4), (9, 3), (9,), (9,))]
    out, h = GRUWindow.apply(x, torch.zeros(2, 3, dtype=torch.bfloat16), *weights, kernels)
    assert out.shape == (3, 2, 3) and torch.equal(h, out[-1])
