"""Our window recurrence for Elman and GRU against torch's own nn.RNN / nn.GRU.

The reference throughout is torch itself: nn.RNN(nonlinearity="tanh") and nn.GRU with the
same weights for the forward pass, torch autograd through those modules for the gradients,
and torch.autograd.gradcheck (finite differences) for the hand-written backward. Each check
runs with both step loops: the Python ones (revision window-1) and the compiled ones
(step_kernels.cpp, revision window-2).
"""

from __future__ import annotations

import pytest
import torch
from torch import nn

from sweeper.tasks.copy_memory import CopyOptions, CopyTask
from sweeper.training import compiled_steps
from sweeper.training.elman_window import ElmanWindow
from sweeper.training.gru_window import GRUWindow
from sweeper.training.models import build_model
from sweeper.training.numerics import COMPILED, SWITCH, TORCH_MODULES, WINDOW
from sweeper.training.params import TrialParams
from sweeper.training.recurrence import WindowGRU, WindowRNN
from sweeper.training.trial_run import TrialRun

PAIRS = {"elman": (WindowRNN, nn.RNN), "gru": (WindowGRU, nn.GRU)}
# float32 to 1e-5 and float64 to 1e-12 of the largest reference value (issue 18's tolerances)
RELATIVE = {torch.float32: 1e-5, torch.float64: 1e-12}
LOOPS = ("python", "compiled")


@pytest.fixture(params=LOOPS)
def loops(request: pytest.FixtureRequest) -> str:
    """Which step loops a test runs; the compiled ones must build wherever a compiler is."""
    if request.param == "compiled" and compiled_steps.loaded() is None:
        pytest.skip(f"no compiled step loops here: {compiled_steps.why_not()}")
    return str(request.param)


def _kernels(loops: str) -> compiled_steps.Kernels | None:
    return compiled_steps.loaded() if loops == "compiled" else None


def _pair(
    cell: str, dtype: torch.dtype, loops: str, layers: int = 2, dropout: float = 0.0
) -> tuple:
    ours_type, torch_type = PAIRS[cell]
    torch.manual_seed(0)
    compiled = loops == "compiled"
    ours = ours_type(4, 6, num_layers=layers, dropout=dropout, batch_first=True, compiled=compiled)
    ours = ours.to(dtype)
    theirs = torch_type(4, 6, num_layers=layers, dropout=dropout, batch_first=True).to(dtype)
    theirs.load_state_dict(ours.state_dict())
    return ours, theirs


def _inputs(dtype: torch.dtype, layers: int = 2) -> tuple[torch.Tensor, torch.Tensor]:
    gen = torch.Generator().manual_seed(1)
    x = torch.randn(3, 9, 4, generator=gen, dtype=dtype, requires_grad=True)
    # a carried, non-zero state, as the second window of a sequence starts from
    h = torch.randn(layers, 3, 6, generator=gen, dtype=dtype, requires_grad=True)
    return x, h


def _assert_relative(got: torch.Tensor, want: torch.Tensor, dtype: torch.dtype) -> None:
    error = float((got - want).abs().max().detach() / want.abs().max().detach())
    assert error <= RELATIVE[dtype], f"relative error {error:.2e}"


@pytest.mark.parametrize("cell", PAIRS)
@pytest.mark.parametrize("dtype", RELATIVE)
def test_outputs_and_states_match_torchs_module(cell: str, dtype: torch.dtype, loops: str) -> None:
    ours, theirs = _pair(cell, dtype, loops)
    x, h = _inputs(dtype)
    out, state = ours(x, h)
    want_out, want_state = theirs(x, h)
    assert out.shape == want_out.shape and state.shape == want_state.shape
    _assert_relative(out, want_out, dtype)
    _assert_relative(state, want_state, dtype)


@pytest.mark.parametrize("cell", PAIRS)
@pytest.mark.parametrize("dtype", RELATIVE)
def test_gradients_match_torch_autograd_through_torchs_module(
    cell: str, dtype: torch.dtype, loops: str
) -> None:
    ours, theirs = _pair(cell, dtype, loops)
    x, h = _inputs(dtype)
    gen = torch.Generator().manual_seed(2)
    out_weight = torch.randn(3, 9, 6, generator=gen, dtype=dtype)
    state_weight = torch.randn(2, 3, 6, generator=gen, dtype=dtype)

    def grads(module: nn.Module) -> tuple[torch.Tensor, ...]:
        out, state = module(x, h)
        loss = (out * out_weight).sum() + (state * state_weight).sum()
        return torch.autograd.grad(loss, [x, h, *module.parameters()])

    for got, want in zip(grads(ours), grads(theirs), strict=True):
        _assert_relative(got, want, dtype)


@pytest.mark.parametrize("cell", PAIRS)
def test_without_a_gradient_the_outputs_are_the_same(cell: str, loops: str) -> None:
    # the validation pass and windows without targets run under no_grad (GRU with the Python
    # loops: torch's own C++ loop; with the compiled ones: ours)
    ours, theirs = _pair(cell, torch.float64, loops)
    x, h = _inputs(torch.float64)
    with torch.no_grad():
        out, state = ours(x, h)
        want_out, want_state = theirs(x, h)
    assert not out.requires_grad
    _assert_relative(out, want_out, torch.float64)
    _assert_relative(state, want_state, torch.float64)


@pytest.mark.parametrize("window", [ElmanWindow, GRUWindow])
def test_hand_written_backward_passes_gradcheck(
    window: type[torch.autograd.Function], loops: str
) -> None:
    gates = 3 if window is GRUWindow else 1
    gen = torch.Generator().manual_seed(3)

    def tensor(*shape: int) -> torch.Tensor:
        return torch.randn(*shape, generator=gen, dtype=torch.float64, requires_grad=True)

    inputs = (tensor(5, 2, 3), tensor(2, 4), tensor(gates * 4, 3), tensor(gates * 4, 4))
    inputs += (tensor(gates * 4), tensor(gates * 4))
    kernels = _kernels(loops)
    assert torch.autograd.gradcheck(lambda *t: window.apply(*t, kernels), inputs)


@pytest.mark.parametrize("cell", PAIRS)
def test_dropout_between_layers_draws_torchs_masks(cell: str, loops: str) -> None:
    ours, theirs = _pair(cell, torch.float64, loops, layers=3, dropout=0.5)
    x, h = _inputs(torch.float64, layers=3)
    torch.manual_seed(7)
    out, _ = ours(x, h)
    torch.manual_seed(7)
    want, _ = theirs(x, h)
    _assert_relative(out, want, torch.float64)
    ours.eval()
    torch.manual_seed(8)
    assert not torch.equal(ours(x, h)[0], out)  # no dropout in evaluation


@pytest.mark.parametrize("cell", PAIRS)
def test_a_saved_state_dict_loads_into_torchs_own_module(
    cell: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    params = TrialParams(cell=cell, hidden=5, layers=2)
    ours = build_model(params, 3, 2)
    assert type(ours.rnn) is PAIRS[cell][0]
    monkeypatch.setenv(SWITCH, "torch")
    theirs = build_model(params, 3, 2)
    assert type(theirs.rnn) is PAIRS[cell][1]
    theirs.load_state_dict(ours.state_dict())
    assert list(theirs.state_dict()) == list(ours.state_dict())
    x = torch.randn(2, 7, 3)
    with torch.no_grad():
        got, want = ours(x, ours.initial_state(2))[0], theirs(x, theirs.initial_state(2))[0]
    _assert_relative(got, want, torch.float32)


@pytest.mark.parametrize("cell", PAIRS)
def test_a_trial_trains_to_torchs_losses_from_the_same_seed(cell: str, loops: str) -> None:
    # 40-step sequences in windows of 15 (the last one short), carried state, clipping
    task = CopyTask(CopyOptions(delay=20, train_sequences=64, valid_sequences=32, seed=4))
    params = TrialParams(cell=cell, hidden=12, unroll=15, batch=16, lr=3e-3, clip=1.0)

    def losses(revision: str) -> list[tuple[float, float]]:
        run = TrialRun(task, params, seed=11, revision=revision)
        return [(r.train_loss, r.valid_loss) for r in (run.run_epoch() for _ in range(4))]

    ours = losses(COMPILED if loops == "compiled" else WINDOW)
    theirs = losses(TORCH_MODULES)
    assert ours[-1] != ours[0]  # it trained
    for got, want in zip(ours, theirs, strict=True):
        assert got == pytest.approx(want, rel=1e-5)
