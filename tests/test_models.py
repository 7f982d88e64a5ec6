"""The recurrent models: shapes, states, dropout placement, and windowed forwards."""

from __future__ import annotations

import pytest
import torch
from torch import nn

from sweeper.training.models import SequenceModel, build_model
from sweeper.training.params import CELLS, TrialParams

MODULES = {"elman": nn.RNN, "gru": nn.GRU, "lstm": nn.LSTM}


def _model(cell: str, layers: int = 1, dropout: float = 0.0, seed: int = 0) -> SequenceModel:
    torch.manual_seed(seed)
    params = TrialParams(cell=cell, hidden=6, layers=layers, dropout=dropout)
    return build_model(params, input_size=3, output_size=2)


@pytest.mark.parametrize("cell", CELLS)
@pytest.mark.parametrize("layers", [1, 2])
def test_forward_shapes_and_state(cell: str, layers: int) -> None:
    model = _model(cell, layers)
    outputs, state = model(torch.randn(4, 7, 3), model.initial_state(4))
    assert outputs.shape == (4, 7, 2)
    states = state if isinstance(state, tuple) else (state,)
    assert len(states) == (2 if cell == "lstm" else 1)
    assert all(s.shape == (layers, 4, 6) for s in states)


@pytest.mark.parametrize("cell", CELLS)
def test_build_model_uses_the_trial_parameters(cell: str) -> None:
    model = build_model(TrialParams(cell=cell, hidden=5, layers=3, dropout=0.25), 4, 9)
    assert isinstance(model.rnn, MODULES[cell])  # ours subclass torch's (test_recurrence.py)
    assert model.rnn.batch_first
    assert (model.rnn.input_size, model.rnn.hidden_size, model.rnn.num_layers) == (4, 5, 3)
    assert model.rnn.dropout == 0.25
    assert isinstance(model.dropout, nn.Dropout) and model.dropout.p == 0.25
    assert (model.head.in_features, model.head.out_features) == (5, 9)
    if cell == "elman":
        assert model.rnn.nonlinearity == "tanh"


def test_one_layer_keeps_dropout_only_before_the_head() -> None:
    # torch warns about (and ignores) between-layer dropout with one layer; pytest makes
    # warnings errors, so building this model at all shows that none was raised.
    model = _model("gru", layers=1, dropout=0.5)
    assert model.rnn.dropout == 0.0
    assert isinstance(model.dropout, nn.Dropout) and model.dropout.p == 0.5
    assert isinstance(_model("gru").dropout, nn.Identity)


def test_dropout_is_random_in_training_and_off_in_evaluation() -> None:
    model = _model("lstm", layers=2, dropout=0.5)
    x = torch.randn(3, 5, 3)
    first, _ = model(x, model.initial_state(3))
    second, _ = model(x, model.initial_state(3))
    assert not torch.equal(first, second)
    model.eval()
    with torch.no_grad():
        third, _ = model(x, model.initial_state(3))
        fourth, _ = model(x, model.initial_state(3))
    assert torch.equal(third, fourth)


@pytest.mark.parametrize("cell", CELLS)
def test_initial_state_is_zero_in_the_model_dtype(cell: str) -> None:
    model = _model(cell, layers=2).double()
    state = model.initial_state(5)
    states = state if isinstance(state, tuple) else (state,)
    for s in states:
        assert s.dtype == torch.float64
        assert s.shape == (2, 5, 6)
        assert not s.any()


@pytest.mark.parametrize("cell", CELLS)
def test_detach_state_cuts_the_graph_and_keeps_values(cell: str) -> None:
    model = _model(cell)
    _, state = model(torch.randn(2, 4, 3), model.initial_state(2))
    detached = model.detach_state(state)
    pairs = zip(state, detached, strict=True) if cell == "lstm" else [(state, detached)]
    for before, after in pairs:
        assert before.requires_grad and not after.requires_grad
        assert torch.equal(before, after)


@pytest.mark.parametrize("cell", CELLS)
def test_windowed_forward_equals_one_forward(cell: str) -> None:
    # Carrying the detached state across windows must reproduce the uninterrupted forward.
    model = _model(cell, layers=2)
    x = torch.randn(3, 10, 3)
    whole, _ = model(x, model.initial_state(3))
    state = model.initial_state(3)
    pieces = []
    for start in range(0, 10, 4):
        state = model.detach_state(state)
        out, state = model(x[:, start : start + 4], state)
        pieces.append(out)
    torch.testing.assert_close(torch.cat(pieces, dim=1), whole, rtol=0, atol=1e-6)


def test_unknown_cell_is_refused() -> None:
    with pytest.raises(ValueError, match="cell must be one of"):
        SequenceModel("transformer", 3, 4, 2)
