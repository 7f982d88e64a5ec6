"""One trial: truncated BPTT against autograd, clipping, steps, learning, divergence, resume."""

from __future__ import annotations

import copy
import dataclasses
import io
import math
from collections.abc import Iterator
from contextlib import contextmanager
from types import SimpleNamespace

import numpy as np
import pytest
import torch
import torch.nn.functional as F

from sweeper.tasks.base import Baseline, Kind, SequenceSet, Split, Task
from sweeper.training import compiled_steps
from sweeper.training.compiled_optimizers import COMPILED_OPTIMIZERS
from sweeper.training.epoch_loop import run_epochs
from sweeper.training.epoch_record import EpochRecord
from sweeper.training.models import build_model
from sweeper.training.numerics import COMPILED, LATEST, TORCH_MODULES, WINDOW, numerics
from sweeper.training.params import CELLS, TrialParams
from sweeper.training.recurrence import WindowGRU
from sweeper.training.trial_run import (
    TrainingInterrupted,
    TrialRun,
    build_optimizer,
    clip_gradients,
    divergence_reason,
    global_norm,
    saved_revision,
    scale_above,
    step_losses,
    weighted_mean,
)


class TensorTask(Task):
    """A task over fixed tensors; the metric is accuracy or mean squared error."""

    name = "tensors"
    metric_name = "score"
    metric_higher_is_better = True

    def __init__(self, kind: Kind, train: SequenceSet, valid: SequenceSet, outputs: int) -> None:
        self.kind = kind
        self.input_size = int(train.inputs.shape[2])
        self.output_size = outputs
        self.length = int(train.inputs.shape[1])
        self._splits = {"train": train, "valid": valid}

    def data(self, split: Split) -> SequenceSet:
        return self._splits[split]

    def baseline(self) -> Baseline:
        return Baseline(0.0, "valid_loss", "nothing to beat")

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        if self.kind == "classification":
            hits = (outputs.argmax(dim=-1) == data.targets).float()
            return float((hits * data.weights).sum() / data.weights.sum())
        return float(((outputs - data.targets) ** 2).mean())


def regression_task(n: int = 6, length: int = 12, weights: str = "every", seed: int = 0) -> Task:
    generator = torch.Generator().manual_seed(seed)

    def split(count: int) -> SequenceSet:
        x = torch.randn(count, length, 3, generator=generator)
        y = torch.stack((x[..., 0].cumsum(dim=1) / 4, x[..., 1] * x[..., 2]), dim=-1)
        w = torch.ones(count, length)
        if weights == "last":
            w[:, :-1] = 0
        elif weights == "late":
            w[:, : length // 2] = 0
        return SequenceSet(x, y, w)

    return TensorTask("regression", split(n), split(n), outputs=2)


def recall_task(n_train: int, symbols: int, delay: int, length: int, seed: int) -> Task:
    """Each step's target is the symbol seen ``delay`` steps earlier (one-hot inputs)."""
    generator = torch.Generator().manual_seed(seed)

    def split(count: int) -> SequenceSet:
        seen = torch.randint(0, symbols, (count, length), generator=generator)
        targets = torch.zeros_like(seen)
        targets[:, delay:] = seen[:, :-delay]
        weights = torch.zeros(count, length)
        weights[:, delay:] = 1
        return SequenceSet(F.one_hot(seen, symbols).float(), targets, weights)

    return TensorTask("classification", split(n_train), split(256), outputs=symbols)


def sgd(**changes: object) -> TrialParams:
    """Plain SGD without clipping: each step is exactly ``p -= lr * grad``."""
    base = {"optimizer": "sgd", "momentum": 0.0, "clip": 0.0, "lr": 0.1, "hidden": 5}
    return TrialParams(**{**base, **changes})  # type: ignore[arg-type]


def watch_steps(run: TrialRun, freeze: bool = False) -> list[list[torch.Tensor]]:
    """The gradients each optimizer step receives; ``freeze`` zeroes them so nothing moves."""
    seen: list[list[torch.Tensor]] = []

    def before_step(optimizer: object, args: object, kwargs: object) -> None:
        seen.append([p.grad.detach().clone() for p in run.model.parameters()])
        if freeze:
            for p in run.model.parameters():
                p.grad.zero_()

    run.optimizer.register_step_pre_hook(before_step)
    return seen


def window_loss(outputs: torch.Tensor, data: SequenceSet, a: int, b: int) -> torch.Tensor:
    """The weighted mean squared error of steps a..b, written out independently."""
    errors = ((outputs - data.targets[:, a:b]) ** 2).mean(dim=-1)
    weights = data.weights[:, a:b]
    return (errors * weights).sum() / weights.sum()


def detached(state: torch.Tensor | tuple[torch.Tensor, ...]) -> torch.Tensor | tuple:
    return tuple(s.detach() for s in state) if isinstance(state, tuple) else state.detach()


def timeless(records: tuple[EpochRecord, ...]) -> list[dict[str, object]]:
    return [
        dataclasses.replace(r, seconds=0.0, sequences_per_second=0.0).as_dict() for r in records
    ]


def trained(task: Task, params: TrialParams, epochs: int, seed: int) -> tuple[EpochRecord, ...]:
    """The records of a fresh run through the one epoch loop."""
    run = TrialRun(task, params, seed)
    run_epochs(run, epochs)
    return run.records


@contextmanager
def one_thread() -> Iterator[None]:
    threads = torch.get_num_threads()
    torch.set_num_threads(1)
    try:
        yield
    finally:
        torch.set_num_threads(threads)


# --- gradients --------------------------------------------------------------------------


@pytest.mark.parametrize("cell", CELLS)
@pytest.mark.parametrize("unroll", [12, 20])
def test_full_unroll_gradient_is_full_bptt(cell: str, unroll: int) -> None:
    # DESIGN.md check values: BPTT gradients equal torch autograd on the full unrolled graph
    # when unroll >= sequence length.
    task = regression_task(length=12)
    run = TrialRun(task, sgd(cell=cell, layers=2, unroll=unroll, batch=6), seed=1)
    reference = copy.deepcopy(run.model)
    steps = watch_steps(run)
    run.run_epoch()
    data = task.data("train")
    outputs, _ = reference(data.inputs, reference.initial_state(len(data)))
    window_loss(outputs, data, 0, 12).backward()
    assert len(steps) == 1
    for got, p in zip(steps[0], reference.parameters(), strict=True):
        torch.testing.assert_close(got, p.grad)


def _training_order(seen: list[torch.Tensor], data: SequenceSet) -> torch.Tensor:
    """Recover the shuffled order from the inputs the model was given."""
    first = seen[0]
    matches = (first[:, None] == data.inputs[None, :, : first.shape[1]]).flatten(2).all(dim=2)
    return matches.float().argmax(dim=1)


def test_truncation_sums_detached_window_gradients_and_carries_the_state() -> None:
    task = regression_task(n=5, length=12)
    run = TrialRun(task, sgd(cell="lstm", unroll=4, batch=5), seed=2)
    reference = copy.deepcopy(run.model)
    steps = watch_steps(run, freeze=True)  # frozen weights: every window sees the same model
    seen_inputs, seen_outputs = [], []

    def on_forward(module: object, args: tuple, output: tuple) -> None:
        if run.model.training:
            seen_inputs.append(args[0].clone())
            seen_outputs.append(output[0].detach().clone())

    run.model.register_forward_hook(on_forward)
    run.run_epoch()
    data = task.data("train").subset(_training_order(seen_inputs, task.data("train")))
    assert torch.equal(torch.cat(seen_inputs, dim=1), data.inputs)
    # forward: the state carried across windows gives the uninterrupted forward
    whole, _ = reference(data.inputs, reference.initial_state(5))
    torch.testing.assert_close(torch.cat(seen_outputs, dim=1), whole, rtol=0, atol=1e-6)
    # expected by hand: each window's loss, with the state detached where the window starts
    state, per_window = reference.initial_state(5), []
    for a in range(0, 12, 4):
        outputs, state = reference(data.inputs[:, a : a + 4], detached(state))
        loss = window_loss(outputs, data, a, a + 4)
        per_window.append(torch.autograd.grad(loss, list(reference.parameters())))
    assert len(steps) == 3
    for got, expected in zip(steps, per_window, strict=True):
        for g, e in zip(got, expected, strict=True):
            torch.testing.assert_close(g, e)
    for i, p in enumerate(reference.parameters()):
        total = sum(step[i] for step in steps)
        torch.testing.assert_close(total, sum(window[i] for window in per_window))
        assert p.grad is None
    # and it truncates: the last window's loss through the whole graph has another gradient
    untruncated = torch.autograd.grad(
        window_loss(whole[:, 8:12], data, 8, 12), list(reference.parameters())
    )
    gap = sum(float((u - t).norm()) for u, t in zip(untruncated, per_window[-1], strict=True))
    assert gap > 1e-3


@pytest.mark.parametrize("kind", ["classification", "regression"])
def test_window_loss_passes_gradcheck_in_float64(kind: Kind) -> None:
    # DESIGN.md check values: finite differences in float64 (torch.autograd.gradcheck).
    torch.manual_seed(0)
    run = TrialRun(regression_task(), sgd(cell="elman", hidden=3), seed=0)
    model = run.model.double()
    names = [name for name, _ in model.named_parameters()]
    weights = [p.detach().clone().requires_grad_() for p in model.parameters()]
    x = torch.randn(2, 4, 3, dtype=torch.float64, requires_grad=True)
    h0 = torch.randn(1, 2, 3, dtype=torch.float64, requires_grad=True)
    if kind == "classification":
        targets = torch.randint(0, 2, (2, 4))
    else:
        targets = torch.randn(2, 4, 2, dtype=torch.float64)
    step_weights = torch.tensor([[0.0, 1.0, 0.5, 1.0], [1.0, 0.0, 2.0, 1.0]], dtype=torch.float64)

    def loss(x: torch.Tensor, h0: torch.Tensor, *values: torch.Tensor) -> torch.Tensor:
        outputs, _ = torch.func.functional_call(
            model, dict(zip(names, values, strict=True)), (x, h0)
        )
        return weighted_mean(step_losses(outputs, targets, kind), step_weights)

    assert torch.autograd.gradcheck(loss, (x, h0, *weights))


# --- clipping ---------------------------------------------------------------------------


def _pascanu(grads: list[np.ndarray], threshold: float) -> list[np.ndarray]:
    # Pascanu, Mikolov & Bengio 2013, Algorithm 1: if ||g|| >= threshold then
    # g <- threshold * g / ||g||.
    norm = math.sqrt(sum(float((g.astype(np.float64) ** 2).sum()) for g in grads))
    return [threshold * g / norm for g in grads] if norm >= threshold else grads


def _global_norm(grads: list[np.ndarray]) -> float:
    """||g|| over all parameters together, by hand in float64."""
    return math.sqrt(sum(float((g.astype(np.float64) ** 2).sum()) for g in grads))


def _with_grads(values: list[torch.Tensor]) -> list[torch.Tensor]:
    weights = [torch.zeros(v.shape, dtype=v.dtype, requires_grad=True) for v in values]
    for w, v in zip(weights, values, strict=True):
        w.grad = v.clone()
    return weights


def _normal_grads(seed: int) -> list[torch.Tensor]:
    generator = torch.Generator().manual_seed(seed)
    shapes = [(4, 3), (3,), (2, 2, 2)]
    return _with_grads([torch.randn(s, generator=generator, dtype=torch.float64) for s in shapes])


def _grads(weights: list[torch.Tensor]) -> list[np.ndarray]:
    return [w.grad.numpy().copy() for w in weights]


def test_clip_rescales_every_parameter_by_the_global_norm() -> None:
    # Worked by hand: gradients (3, 4) and (12,) have the global L2 norm
    # sqrt(9 + 16 + 144) = 13, though each alone is below 13 (5 and 12). Pascanu, Mikolov &
    # Bengio 2013, Algorithm 1, threshold 6.5: 13 >= 6.5, so g <- 6.5 * g / 13 = g / 2 for
    # both at once. Clipping each parameter by its own norm would give (3, 4) and (6.5,).
    weights = _with_grads([torch.tensor([3.0, 4.0]), torch.tensor([12.0])])
    norm = clip_gradients(weights, 6.5)
    assert float(norm) == pytest.approx(13.0, rel=1e-6)  # the norm from before clipping
    first, second = _grads(weights)
    np.testing.assert_allclose(first, [1.5, 2.0], rtol=1e-6)
    np.testing.assert_allclose(second, [6.0], rtol=1e-6)


@pytest.mark.parametrize("ratio", [0.25, 0.5, 1.0])
def test_clip_at_or_above_the_threshold_follows_pascanu(ratio: float) -> None:
    weights = _normal_grads(seed=0)
    before = _grads(weights)
    norm = _global_norm(before)
    threshold = ratio * norm  # ratio 1.0: exactly at the threshold, where g stays g
    returned = clip_gradients(weights, threshold)
    assert float(returned) == pytest.approx(norm, rel=1e-12)
    after = _grads(weights)
    for got, expected in zip(after, _pascanu(before, threshold), strict=True):
        np.testing.assert_allclose(got, expected, rtol=1e-6)
    assert _global_norm(after) == pytest.approx(threshold, rel=1e-6)


@pytest.mark.parametrize("ratio", [0.0, 4.0])
def test_clip_off_or_below_the_threshold_leaves_gradients_bit_identical(ratio: float) -> None:
    # ratio 0: clip = 0 turns clipping off (DESIGN, "One trial"); ratio 4: ||g|| < threshold,
    # where Algorithm 1 leaves g alone. Either way the pre-clip norm is still returned.
    weights = _normal_grads(seed=1)
    before = _grads(weights)
    norm = _global_norm(before)
    returned = clip_gradients(weights, ratio * norm)
    assert float(returned) == pytest.approx(norm, rel=1e-12)
    for got, unchanged in zip(_grads(weights), before, strict=True):
        assert np.array_equal(got, unchanged)


def _float32_grads(seed: int) -> list[torch.Tensor]:
    generator = torch.Generator().manual_seed(seed)
    shapes = [(96, 16), (96, 32), (96,), (1, 32)]
    return _with_grads([torch.randn(s, generator=generator) for s in shapes])


@pytest.mark.parametrize("ratio", [0.0, 0.5, 1.0 - 1e-7, 1.0, 1.0 + 1e-7, 3.0])
def test_lean_clipping_gives_clip_grad_norms_bits(ratio: float) -> None:
    # reference: torch.nn.utils.clip_grad_norm_ on a copy, compared bit for bit, also within
    # float32 rounding of the threshold, where torch's factor is just below or at 1
    ours, theirs = _float32_grads(seed=2), _float32_grads(seed=2)
    clip = ratio * float(global_norm([w.grad for w in theirs]))
    want = torch.nn.utils.clip_grad_norm_(theirs, clip if clip > 0 else math.inf)
    grads = [w.grad for w in ours]
    norm = global_norm(grads)
    scale_above(grads, norm, float(norm), clip)
    assert torch.equal(norm, want)
    for a, b in zip(ours, theirs, strict=True):
        assert torch.equal(a.grad, b.grad)


OPTIMIZER_CASES = [
    (name, momentum, decay)
    for name in ("adam", "sgd", "rmsprop")
    for momentum, decay in ((0.9, 1e-3), (0.0, 0.0))
    if not (name == "adam" and momentum == 0.0)  # Adam has no momentum setting
]


@pytest.mark.parametrize("revision", [WINDOW, COMPILED])
@pytest.mark.parametrize(("name", "momentum", "decay"), OPTIMIZER_CASES)
def test_the_lean_optimizers_step_as_torchs_plain_ones(
    name: str, momentum: float, decay: float, revision: str
) -> None:
    # reference: torch's own single-tensor implementation (foreach=False) from the same state;
    # window-1 runs torch's fused or foreach kernels, window-2 our compiled updates
    if revision == COMPILED and compiled_steps.loaded() is None:
        pytest.skip(f"no compiled kernels here: {compiled_steps.why_not()}")
    params = TrialParams(optimizer=name, lr=1e-2, momentum=momentum, weight_decay=decay)
    ours, theirs = _float32_grads(seed=3), _float32_grads(seed=3)
    holder = SimpleNamespace(parameters=lambda: iter(ours))  # all build_optimizer reads
    fast = build_optimizer(params, holder, revision)  # type: ignore[arg-type]
    settings = {**fast.defaults, "foreach": False}
    if "fused" in settings:
        settings["fused"] = None
    reference = {"adam": torch.optim.Adam, "sgd": torch.optim.SGD}.get(name, torch.optim.RMSprop)
    plain = reference(theirs, **settings)
    if revision == WINDOW:
        assert type(fast) is reference and (fast.defaults.get("fused") or fast.defaults["foreach"])
    else:
        assert type(fast) is COMPILED_OPTIMIZERS[name]
    for _ in range(5):
        fast.step()
        plain.step()
    for a, b in zip(ours, theirs, strict=True):
        torch.testing.assert_close(a, b, rtol=1e-6, atol=1e-7)
    # the state is torch's, under torch's names: a checkpoint loads into torch's class
    again = reference(_float32_grads(seed=3), **settings)
    again.load_state_dict(fast.state_dict())
    assert again.state_dict()["state"].keys() == plain.state_dict()["state"].keys()
    loaded = again.state_dict()["state"]
    for index, entry in plain.state_dict()["state"].items():
        assert loaded[index].keys() == entry.keys()
        for key, value in entry.items():
            torch.testing.assert_close(loaded[index][key], value, rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("clip", [0.0, 0.02])
def test_trial_clips_and_records_the_pre_clip_norm(clip: float) -> None:
    task = regression_task(length=8)
    run = TrialRun(task, sgd(cell="gru", unroll=8, batch=6, clip=clip), seed=3)
    reference = copy.deepcopy(run.model)
    steps = watch_steps(run)
    record = run.run_epoch()
    data = task.data("train")
    outputs, _ = reference(data.inputs, reference.initial_state(len(data)))
    window_loss(outputs, data, 0, 8).backward()
    raw = [p.grad.numpy() for p in reference.parameters()]
    norm = math.sqrt(sum(float((g.astype(np.float64) ** 2).sum()) for g in raw))
    assert run.epoch_norms == pytest.approx([norm], rel=1e-5)
    assert norm > 0.02  # so that the clipped case really clips
    expected = _pascanu(raw, clip) if clip else raw
    for got, e in zip(steps[0], expected, strict=True):
        np.testing.assert_allclose(got.numpy(), e, rtol=1e-4, atol=1e-7)
    assert record.clip_fraction == (1.0 if clip else 0.0)


# --- optimizer steps --------------------------------------------------------------------


@pytest.mark.parametrize(
    ("weights", "unroll", "per_batch"),
    [
        ("last", 3, 1),  # targets on the final step only: one step per batch
        ("last", 12, 1),
        ("every", 3, 4),  # 12 steps in windows of 3
        ("every", 5, 3),  # windows of 5, 5 and 2
        ("late", 2, 3),  # steps 0..5 have no target: windows 1-3 only carry the state
    ],
)
def test_one_optimizer_step_per_window_with_targets(
    weights: str, unroll: int, per_batch: int
) -> None:
    task = regression_task(n=10, length=12, weights=weights)
    run = TrialRun(task, sgd(unroll=unroll, batch=4), seed=0)
    steps = watch_steps(run)
    record = run.run_epoch()
    assert len(steps) == record.steps == 3 * per_batch  # 10 sequences in batches of 4, 4, 2
    assert len(run.epoch_norms) == record.steps


def test_build_optimizer_follows_the_parameters() -> None:
    model = torch.nn.Linear(2, 2)
    made = {
        name: build_optimizer(
            TrialParams(optimizer=name, lr=0.3, momentum=0.5, weight_decay=0.01), model
        )
        for name in ("sgd", "adam", "rmsprop")
    }
    assert isinstance(made["sgd"], torch.optim.SGD)
    assert isinstance(made["adam"], torch.optim.Adam)
    assert isinstance(made["rmsprop"], torch.optim.RMSprop)
    for name, optimizer in made.items():
        group = optimizer.param_groups[0]
        assert (group["lr"], group["weight_decay"]) == (0.3, 0.01)
        if name != "adam":
            assert group["momentum"] == 0.5


# --- learning ---------------------------------------------------------------------------


def test_only_an_unroll_that_spans_the_delay_learns_recall() -> None:
    # Recall of 1 of 4 symbols 6 steps back: gradients must flow 6 steps to learn it.
    task = recall_task(n_train=1024, symbols=4, delay=6, length=32, seed=10)
    accuracy = {}
    with one_thread():
        for unroll in (32, 2):
            params = TrialParams(unroll=unroll, hidden=64, lr=1e-2, clip=1.0, cell="lstm")
            accuracy[unroll] = trained(task, params, epochs=8, seed=0)[-1].valid_metric
    assert accuracy[32] >= 0.95
    assert accuracy[2] <= 0.4  # chance is 1/4


# --- divergence -------------------------------------------------------------------------


def test_a_non_finite_step_is_counted_and_skipped() -> None:
    task = regression_task(n=4, length=6)
    task.data("train").targets[1, 2, 0] = math.nan  # poisons the only window's loss
    run = TrialRun(task, sgd(momentum=0.9, unroll=6, batch=4), seed=0)
    before = copy.deepcopy(run.model.state_dict())
    record = run.run_epoch()
    assert (record.steps, record.nonfinite_steps) == (1, 1)
    assert math.isnan(record.train_loss)
    for name, value in run.model.state_dict().items():
        assert torch.equal(value, before[name])
    assert run.optimizer.state_dict()["state"] == {}  # no momentum was built from NaN
    assert divergence_reason(record) is not None


def _record(**changes: float) -> EpochRecord:
    values = {field: 1.0 for field in EpochRecord.__dataclass_fields__}
    values.update(epoch=3, nonfinite_steps=0, steps=10)
    values.update(changes)
    return EpochRecord(**values)  # type: ignore[arg-type]


def test_divergence_reason_names_the_epoch_and_the_cause() -> None:
    assert divergence_reason(_record()) is None
    assert divergence_reason(_record(nonfinite_steps=1)) == (
        "diverged at epoch 3: 1 non-finite step of 10 (loss or gradient norm)"
    )
    assert (
        divergence_reason(_record(train_loss=math.inf)) == "diverged at epoch 3: train loss is inf"
    )
    assert divergence_reason(_record(valid_loss=math.nan)) == (
        "diverged at epoch 3: validation loss is nan"
    )


# --- determinism and resume -------------------------------------------------------------

LIVELY = TrialParams(unroll=4, hidden=8, layers=2, dropout=0.3, batch=4, clip=0.5, lr=1e-2)


def test_same_parameters_and_seed_give_the_same_records() -> None:
    task = regression_task(n=10)
    first = trained(task, LIVELY, epochs=3, seed=7)
    torch.rand(5)  # moves the caller's stream; the trial's own streams must not care
    second = trained(task, LIVELY, epochs=3, seed=7)
    other = trained(task, LIVELY, epochs=3, seed=8)
    assert timeless(first) == timeless(second)
    assert timeless(first) != timeless(other)


def test_resume_from_a_saved_state_continues_bit_for_bit() -> None:
    task = regression_task(n=10)
    whole = TrialRun(task, LIVELY, seed=5)
    for _ in range(4):
        whole.run_epoch()
    first = TrialRun(task, LIVELY, seed=5)
    first.run_epoch()
    first.run_epoch()
    buffer = io.BytesIO()
    torch.save(first.state_dict(), buffer)
    first.run_epoch()  # the saved state is a copy; later training must not change it
    buffer.seek(0)
    resumed = TrialRun(task, LIVELY, seed=5)
    resumed.load_state_dict(torch.load(buffer, weights_only=True))
    assert resumed.epoch == 2
    resumed.run_epoch()
    resumed.run_epoch()
    assert timeless(resumed.records) == timeless(whole.records)
    for a, b in zip(resumed.model.parameters(), whole.model.parameters(), strict=True):
        assert torch.equal(a, b)


def test_a_state_from_other_parameters_is_refused() -> None:
    task = regression_task()
    state = TrialRun(task, LIVELY, seed=5).state_dict()
    with pytest.raises(ValueError, match="other parameters or another seed"):
        TrialRun(task, LIVELY, seed=6).load_state_dict(state)


LIVELY_GRU = dataclasses.replace(LIVELY, cell="gru")


def revision_records(revision: str, epochs: int = 3) -> list[dict[str, object]]:
    run = TrialRun(regression_task(n=10), LIVELY_GRU, seed=5, revision=revision)
    rnn = run.model.rnn  # type: ignore[attr-defined]
    assert (type(rnn) is WindowGRU) == (revision != TORCH_MODULES)
    assert getattr(rnn, "compiled", False) == numerics(revision).compiled_steps
    for _ in range(epochs):
        run.run_epoch()
    return timeless(run.records)


def test_each_revision_repeats_itself_exactly_and_they_differ() -> None:
    revisions = [TORCH_MODULES, WINDOW]
    if compiled_steps.loaded() is not None:
        revisions.append(COMPILED)
    first = [revision_records(revision) for revision in revisions]
    assert [revision_records(revision) for revision in revisions] == first
    # each sums in another order (our recurrence; the compiled loops' own exp and tanh):
    # close, not bit for bit
    assert all(a != b for i, a in enumerate(first) for b in first[i + 1 :])


def test_a_state_continues_in_the_revision_it_was_trained_with() -> None:
    task = regression_task(n=10)
    first = TrialRun(task, LIVELY_GRU, seed=5, revision=TORCH_MODULES)
    first.run_epoch()
    state = first.state_dict()
    del state["revision"]  # a checkpoint written before revisions were recorded
    assert saved_revision(state) == TORCH_MODULES
    with pytest.raises(ValueError, match="trainer revision 'torch-modules'"):
        TrialRun(task, LIVELY_GRU, seed=5, revision=LATEST).load_state_dict(state)
    resumed = TrialRun(task, LIVELY_GRU, seed=5, revision=saved_revision(state))
    resumed.load_state_dict(state)
    resumed.run_epoch()
    resumed.run_epoch()
    assert timeless(resumed.records) == revision_records(TORCH_MODULES)


def test_trial_seeds_the_model_and_leaves_the_callers_streams_alone() -> None:
    torch.manual_seed(0)
    np.random.seed(0)
    before = (torch.get_rng_state(), np.random.get_state()[1].copy())
    task = regression_task()
    run = TrialRun(task, LIVELY, seed=11)
    run.run_epoch()
    assert torch.equal(torch.get_rng_state(), before[0])
    assert np.array_equal(np.random.get_state()[1], before[1])
    torch.manual_seed(11)  # model initialisation draws from torch.manual_seed(seed)
    expected = build_model(LIVELY, task.input_size, task.output_size)
    for a, b in zip(run.model.parameters(), expected.parameters(), strict=True):
        assert not torch.equal(a, b)  # trained
    fresh = TrialRun(task, LIVELY, seed=11).model
    for a, b in zip(fresh.parameters(), expected.parameters(), strict=True):
        assert torch.equal(a, b)


# --- stopping and telemetry -------------------------------------------------------------


def test_should_stop_interrupts_at_a_window_boundary() -> None:
    run = TrialRun(regression_task(n=8), sgd(unroll=4, batch=4), seed=0)
    run.run_epoch()
    calls = []

    def stop_on_fourth() -> bool:
        calls.append(1)
        return len(calls) == 4

    with pytest.raises(TrainingInterrupted, match="during epoch 2") as caught:
        run.run_epoch(stop_on_fourth)
    assert caught.value.epoch == 2 and len(calls) == 4
    assert run.epoch == 1
    with pytest.raises(RuntimeError, match="interrupted"):
        run.state_dict()


def test_gradient_statistics_match_numpy_on_the_recorded_norms() -> None:
    run = TrialRun(regression_task(n=24, length=12), LIVELY, seed=4)
    for _ in range(2):
        record = run.run_epoch()
        norms = np.asarray(run.epoch_norms)
        assert record.steps == norms.size == 18
        assert record.grad_norm_mean == pytest.approx(norms.mean())
        assert record.grad_norm_median == pytest.approx(np.median(norms))
        assert record.grad_norm_p95 == pytest.approx(np.percentile(norms, 95))
        assert record.grad_norm_max == norms.max()
        assert record.clip_fraction == pytest.approx(np.mean(norms >= LIVELY.clip))
        assert record.nonfinite_steps == 0
        assert record.seconds > 0 and record.sequences_per_second > 0


def test_validation_loss_is_the_weighted_mean_over_whole_sequences() -> None:
    task = regression_task(n=6, length=12, weights="late")
    run = TrialRun(task, sgd(unroll=3, batch=6), seed=0)
    record = run.run_epoch()
    assert run.model.training  # evaluation switched dropout off only for itself
    valid = task.data("valid")
    run.model.eval()
    with torch.no_grad():
        outputs, _ = run.model(valid.inputs, run.model.initial_state(len(valid)))
    assert record.valid_loss == pytest.approx(float(window_loss(outputs, valid, 0, 12)), rel=1e-6)
    assert record.valid_metric == pytest.approx(task.metric(outputs, valid), rel=1e-6)
