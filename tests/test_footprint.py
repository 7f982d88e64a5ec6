"""Absurd sizes are refused by check (and run, before any file is written), and check shows
the planned compute, so that a spec that cannot fit or cannot finish is seen at once."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
import torch

from sweeper.errors import SpecError
from sweeper.spec import checks
from sweeper.spec.footprint import footprint, optimizer_copies, parameter_count
from sweeper.spec.loading import parse_spec
from sweeper.training.models import build_model
from sweeper.training.params import TrialParams
from sweeper.training.trial_run import build_optimizer
from tests.conftest import invoke

SPEC = """
[study]
name = "big"
trials = 5
workers = {workers}
[task]
kind = "adding"
length = 12
train_sequences = 64
valid_sequences = 32
[training]
epochs = {epochs}
unroll = 6
[search]
hidden = {{ between = [8, {hidden}] }}
lr = {{ between = [0.001, 0.05], scale = "log" }}
"""


def _write(folder: Path, hidden: int = 64, epochs: int = 2, workers: int = 1) -> Path:
    path = folder / "big.toml"
    path.write_text(SPEC.format(hidden=hidden, epochs=epochs, workers=workers))
    return path


@pytest.mark.parametrize("cell", ["elman", "gru", "lstm"])
@pytest.mark.parametrize("layers", [1, 3])
def test_parameter_term_matches_torchs_own_count(cell: str, layers: int) -> None:
    # reference: torch, the sum of numel over a built model's parameters
    params = TrialParams(cell=cell, layers=layers, hidden=17)
    model = build_model(params, 5, 3)
    assert parameter_count(cell, 5, 17, layers, 3) == sum(p.numel() for p in model.parameters())


@pytest.mark.parametrize(
    ("optimizer", "momentum"), [("adam", 0.9), ("sgd", 0.9), ("sgd", 0.0), ("rmsprop", 0.5)]
)
def test_optimizer_term_matches_the_buffers_torch_keeps(optimizer: str, momentum: float) -> None:
    # reference: torch.optim's own state after one step, counting weight-sized buffers
    params = TrialParams(optimizer=optimizer, momentum=momentum, hidden=9)
    model = build_model(params, 2, 1)
    step = build_optimizer(params, model)
    outputs, _ = model(torch.randn(4, 3, 2), model.initial_state(4))
    outputs.sum().backward()
    step.step()
    kept = sum(
        value.numel()
        for weight, state in step.state.items()
        for value in state.values()
        if torch.is_tensor(value) and value.shape == weight.shape
    )
    weights = sum(p.numel() for p in model.parameters())
    assert kept == optimizer_copies(optimizer, momentum) * weights


def test_ten_million_hidden_units_are_refused_by_check_and_run(in_tmp: Path) -> None:
    spec = _write(in_tmp, hidden=10_000_000)
    for command in ("check", "run"):
        result = invoke(command, spec.name)
        assert result.exit_code == 2, result.output
        lines = result.output.strip().splitlines()
        assert len(lines) == 1 and "Traceback" not in result.output
        assert "big.toml: search.hidden" in lines[0]
        assert re.search(r"needs about [\d.e+]+ GiB .* but [\d.]+ GiB is available", lines[0])
    assert not (in_tmp / "runs").exists(), "nothing may be written for a refused spec"


def test_the_estimate_is_per_worker(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    one = footprint(TrialParams(hidden=256, unroll=6), 2, 1).total_bytes
    monkeypatch.setattr(checks, "available_memory", lambda: int(one * 2.5))
    parse_spec(_write(tmp_path, hidden=256, workers=2).read_text(), "big.toml")
    with pytest.raises(SpecError, match=r"on 3 worker\(s\)"):
        parse_spec(_write(tmp_path, hidden=256, workers=3).read_text(), "big.toml")


def _core_hours(output: str) -> float:
    found = re.search(
        r"planned compute about ([\d.e+-]+) core-hours \(from a [\d.]+ ms probe\)", output
    )
    assert found, output
    return float(found.group(1))


def test_check_shows_an_absurd_epoch_budget_as_planned_compute(in_tmp: Path) -> None:
    modest = invoke("check", _write(in_tmp, epochs=2).name)
    assert modest.exit_code == 0, modest.output
    absurd = invoke("check", _write(in_tmp, epochs=1_000_000_000).name)
    assert absurd.exit_code == 0, absurd.output
    # 5 trials x 1e9 epochs x (64 / 32 batches x 2 windows) at well over 1 microsecond each
    assert _core_hours(absurd.output) > 1000 > _core_hours(modest.output)
