"""One trial: truncated BPTT over a task's sequences, clipping, evaluation, divergence.

A ``TrialRun`` owns everything a trial needs to continue bit-for-bit after a restart: the
model, the optimizer, the records so far and its random streams. Its global random states
(python, numpy, torch) are swapped in for each epoch and the caller's put back afterwards, so
nothing else in the process can shift a trial's draws.
"""

from __future__ import annotations

import copy
import math
import random
import time
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import torch
import torch.nn.functional as F

from sweeper.errors import Interrupted
from sweeper.seeds import derive_seed
from sweeper.tasks.base import Kind, SequenceSet, Task
from sweeper.training import compiled_steps
from sweeper.training.compiled_optimizers import COMPILED_OPTIMIZERS
from sweeper.training.epoch_record import EpochRecord, summarize_norms
from sweeper.training.models import ModelBuilder, Recurrent, State, build_model
from sweeper.training.numerics import TORCH_MODULES, building, current_revision, numerics
from sweeper.training.params import TrialParams

STATE_FORMAT = 1


class TrainingInterrupted(Interrupted):
    """``should_stop()`` said stop at a window boundary; the unfinished epoch is abandoned."""

    def __init__(self, epoch: int) -> None:
        self.epoch = epoch
        super().__init__(f"training was asked to stop during epoch {epoch}")


def _never() -> bool:
    return False


def step_losses(outputs: torch.Tensor, targets: torch.Tensor, kind: Kind) -> torch.Tensor:
    """Per-step losses [B, T]: cross-entropy of logits, or squared error averaged over outputs."""
    if kind == "classification":
        return F.cross_entropy(outputs.transpose(1, 2), targets, reduction="none")
    return (outputs - targets).square().mean(dim=-1)


def weighted_mean(losses: torch.Tensor, weights: torch.Tensor) -> torch.Tensor:
    """Sum of weighted per-step losses divided by the total weight."""
    return (losses * weights).sum() / weights.sum()


def clip_gradients(parameters: Sequence[torch.Tensor], clip: float) -> torch.Tensor:
    """Clip by the global L2 norm when ``clip > 0``; return the norm from before clipping.

    Pascanu, Mikolov & Bengio 2013, Algorithm 1, as ``torch.nn.utils.clip_grad_norm_`` does it.
    ``clip = 0`` leaves the gradients alone and measures them the same way.
    """
    # An infinite threshold scales by exactly 1.0, so the gradients stay bit-for-bit as they
    # are (and this works on every torch the package allows, unlike get_total_norm).
    return torch.nn.utils.clip_grad_norm_(parameters, clip if clip > 0 else math.inf)


def global_norm(grads: Sequence[torch.Tensor]) -> torch.Tensor:
    """The global L2 norm of ``grads``, with the same operations (so the same bits) as
    ``torch.nn.utils.clip_grad_norm_``'s foreach path on CPU."""
    if not grads:
        return torch.zeros(())
    return torch.linalg.vector_norm(torch.stack(torch._foreach_norm(list(grads))))


def scale_above(
    grads: Sequence[torch.Tensor], norm: torch.Tensor, value: float, clip: float
) -> None:
    """Pascanu et al.'s step as ``clip_grad_norm_`` computes it (factor clip / (norm + 1e-6),
    at most 1) given the norm and its value, but only where the factor can be below 1: below
    the threshold torch multiplies by exactly 1.0, which changes no bit. The 1e-6 margin
    covers float32 rounding of the factor."""
    if clip <= 0 or not math.isfinite(value) or value + 1e-6 < clip * (1 - 1e-6):
        return
    torch._foreach_mul_(list(grads), torch.clamp(clip / (norm + 1e-6), max=1.0))


def build_optimizer(
    params: TrialParams, model: Recurrent, revision: str | None = None
) -> torch.optim.Optimizer:
    """The trial's optimizer; in revision window-1 with torch's fused (or foreach) kernels, a
    few calls a step instead of a dozen small ones per parameter tensor; from window-2 on with
    our compiled updates (float32 and float64 weights on the CPU)."""
    weights = list(model.parameters())
    lr, decay = params.lr, params.weight_decay
    chosen = numerics(current_revision() if revision is None else revision)
    kernels = compiled_steps.loaded() if chosen.compiled_steps else None
    if kernels is not None and weights and kernels.supports(*weights):
        # window-2: the update of each tensor in one compiled loop (compiled_optimizers.py)
        kind = COMPILED_OPTIMIZERS[params.optimizer]
        options: dict[str, Any] = {"lr": lr, "weight_decay": decay}
        if params.optimizer != "adam":
            options["momentum"] = params.momentum
        return kind(weights, **options)
    fused = True if chosen.lean_step else None  # None: torch's default, as before window-1
    if params.optimizer == "sgd":
        return torch.optim.SGD(
            weights, lr=lr, momentum=params.momentum, weight_decay=decay, fused=fused
        )
    if params.optimizer == "rmsprop":  # torch has no fused RMSprop
        return torch.optim.RMSprop(
            weights, lr=lr, momentum=params.momentum, weight_decay=decay, foreach=fused
        )
    return torch.optim.Adam(weights, lr=lr, weight_decay=decay, fused=fused)


def divergence_reason(record: EpochRecord) -> str | None:
    """Why the trial must end after this epoch, or ``None`` while it is healthy."""
    where = f"diverged at epoch {record.epoch}"
    if record.nonfinite_steps:
        plural = "" if record.nonfinite_steps == 1 else "s"
        return (
            f"{where}: {record.nonfinite_steps} non-finite step{plural} "
            f"of {record.steps} (loss or gradient norm)"
        )
    if not math.isfinite(record.train_loss):
        return f"{where}: train loss is {record.train_loss}"
    if not math.isfinite(record.valid_loss):
        return f"{where}: validation loss is {record.valid_loss}"
    return None


@dataclass
class _Tally:
    """What one epoch's optimizer steps leave behind."""

    norms: list[float] = field(default_factory=list)
    loss_sum: float = 0.0
    weight_sum: float = 0.0
    nonfinite: int = 0

    def add(self, loss: float, norm: float, weight: float) -> None:
        self.norms.append(norm)
        self.loss_sum += loss * weight
        self.weight_sum += weight
        if not (math.isfinite(loss) and math.isfinite(norm)):
            self.nonfinite += 1

    @property
    def train_loss(self) -> float:
        return self.loss_sum / self.weight_sum if self.weight_sum else math.nan


class TrialRun:
    """One trial, an epoch at a time (``run_epochs`` drives it); ``state_dict()`` between.

    ``revision`` (training/numerics.py) picks the code paths; a replay or a continuation
    passes the one the trial recorded, a new trial the current one.
    """

    def __init__(
        self,
        task: Task,
        params: TrialParams,
        seed: int,
        build: ModelBuilder = build_model,
        revision: str | None = None,
    ) -> None:
        self.task = task
        self.params = params
        self.seed = seed
        self.revision = current_revision() if revision is None else revision
        self.numerics = numerics(self.revision)
        self._train = _contiguous(task.data("train"))
        self._valid = _contiguous(task.data("valid"))
        length = self._train.inputs.shape[1]
        self._windows = [
            (s, min(s + params.unroll, length)) for s in range(0, length, params.unroll)
        ]
        self._window_weights = _window_weights(self._train.weights, self._windows)
        self._epoch = 0
        self._records: list[EpochRecord] = []
        self._norms: tuple[float, ...] = ()
        self._in_epoch = False
        self._shuffle = torch.Generator().manual_seed(derive_seed("shuffle", seed))
        outside = _global_rng()
        random.seed(seed)
        np.random.seed(seed)
        torch.manual_seed(seed)
        try:
            with building(self.revision):
                self.model: Recurrent = build(params, task.input_size, task.output_size)
            self.optimizer = build_optimizer(params, self.model, self.revision)
            self._rng = _global_rng()
        finally:
            _set_global_rng(outside)
        self._parameters = list(self.model.parameters())

    @property
    def records(self) -> tuple[EpochRecord, ...]:
        return tuple(self._records)

    @property
    def epoch(self) -> int:
        """Epochs completed so far."""
        return self._epoch

    @property
    def epoch_norms(self) -> tuple[float, ...]:
        """Pre-clip global gradient norms of the last epoch's optimizer steps, in order."""
        return self._norms

    def run_epoch(self, should_stop: Callable[[], bool] = _never) -> EpochRecord:
        """Train on every training sequence once, then evaluate; raises TrainingInterrupted."""
        self._require_epoch_boundary()
        self._in_epoch = True
        with self._own_random_streams():
            started = time.perf_counter()
            tally = self._train_epoch(should_stop)
            trained = time.perf_counter()
            valid_loss, valid_metric = self._evaluate()
            ended = time.perf_counter()
        stats = summarize_norms(tally.norms, self.params.clip)
        record = EpochRecord(
            epoch=self._epoch + 1,
            train_loss=tally.train_loss,
            valid_loss=valid_loss,
            valid_metric=valid_metric,
            grad_norm_mean=stats.mean,
            grad_norm_median=stats.median,
            grad_norm_p95=stats.p95,
            grad_norm_max=stats.max,
            clip_fraction=stats.clip_fraction,
            nonfinite_steps=tally.nonfinite,
            steps=stats.steps,
            seconds=ended - started,
            sequences_per_second=len(self._train) / max(trained - started, 1e-9),
        )
        self._epoch += 1
        self._records.append(record)
        self._norms = tuple(tally.norms)
        self._in_epoch = False
        return record

    def _train_epoch(self, should_stop: Callable[[], bool]) -> _Tally:
        # shuffle: one permuted copy per epoch, so every batch below is a contiguous slice
        order = torch.randperm(len(self._train), generator=self._shuffle)
        train = self._train
        data = SequenceSet(train.inputs[order], train.targets[order], train.weights[order])
        window_weights = self._window_weights[order]
        tally = _Tally()
        for start in range(0, len(data), self.params.batch):
            rows = slice(start, start + self.params.batch)
            totals = window_weights[rows].sum(dim=0).tolist()
            self._train_batch(data, rows, totals, should_stop, tally)
        return tally

    def _train_batch(
        self,
        data: SequenceSet,
        rows: slice,
        totals: list[float],
        should_stop: Callable[[], bool],
        tally: _Tally,
    ) -> None:
        inputs, targets, weights = data.inputs[rows], data.targets[rows], data.weights[rows]
        kind, clip = self.task.kind, self.params.clip
        state: State = self.model.initial_state(inputs.shape[0])
        for (start, stop), total in zip(self._windows, totals, strict=True):
            if should_stop():
                raise TrainingInterrupted(self._epoch + 1)
            # detach: gradients stop at the window boundary, the values carry on
            state = self.model.detach_state(state)
            window = inputs[:, start:stop]
            if total == 0:
                # carry: a window without targets only moves the state forward
                with torch.no_grad():
                    _, state = self.model(window, state)
                continue
            # forward over the window
            outputs, state = self.model(window, state)
            # loss: weighted mean over the window's target steps
            losses = step_losses(outputs, targets[:, start:stop], kind)
            loss = weighted_mean(losses, weights[:, start:stop])
            # backward
            self.optimizer.zero_grad(set_to_none=True)
            loss.backward()
            # clip, keeping the pre-clip norm; record: one read-back per step for both numbers
            loss_value, norm_value = self._clip_and_read(loss, clip)
            tally.add(loss_value, norm_value, total)
            # step, unless the loss or the gradient is not finite
            if math.isfinite(loss_value) and math.isfinite(norm_value):
                self.optimizer.step()

    def _clip_and_read(self, loss: torch.Tensor, clip: float) -> tuple[float, float]:
        """Clip the gradients; the loss and the pre-clip global norm as numbers."""
        if not self.numerics.lean_step:
            norm = clip_gradients(self._parameters, clip)
            loss_value, norm_value = torch.stack((loss.detach(), norm)).tolist()
            return loss_value, norm_value
        grads = [p.grad for p in self._parameters if p.grad is not None]
        norm = global_norm(grads)
        loss_value, norm_value = torch.stack((loss.detach(), norm)).tolist()
        scale_above(grads, norm, norm_value, clip)
        return loss_value, norm_value

    def _evaluate(self) -> tuple[float, float]:
        """Whole validation sequences at once, dropout off, no truncation."""
        valid = self._valid
        self.model.eval()
        try:
            with torch.no_grad():
                outputs, _ = self.model(valid.inputs, self.model.initial_state(len(valid)))
                losses = step_losses(outputs, valid.targets, self.task.kind)
                loss = weighted_mean(losses.double(), valid.weights.double())
            metric = self.task.metric(outputs, valid)
        finally:
            self.model.train()
        return float(loss), float(metric)

    def state_dict(self) -> dict[str, Any]:
        """A copy of everything needed to continue exactly; loadable with weights_only."""
        self._require_epoch_boundary()
        return {
            "format": STATE_FORMAT,
            "params": self.params.as_dict(),
            "seed": self.seed,
            "revision": self.revision,
            "epoch": self._epoch,
            "records": [record.as_dict() for record in self._records],
            "model": copy.deepcopy(self.model.state_dict()),
            "optimizer": copy.deepcopy(self.optimizer.state_dict()),
            "rng": _portable_rng(self._rng),
            "shuffle": self._shuffle.get_state(),
        }

    def load_state_dict(self, state: dict[str, Any]) -> None:
        """Continue from ``state``; it must come from a run with the same parameters and seed."""
        self._require_epoch_boundary()
        if state.get("format") != STATE_FORMAT:
            raise ValueError(f"unknown trial state format {state.get('format')!r}")
        if state["params"] != self.params.as_dict() or state["seed"] != self.seed:
            raise ValueError("the saved trial state belongs to other parameters or another seed")
        if saved_revision(state) != self.revision:
            raise ValueError(
                f"the saved trial state was trained with trainer revision "
                f"{saved_revision(state)!r}, this run with {self.revision!r}"
            )
        self.model.load_state_dict(state["model"])
        self.optimizer.load_state_dict(state["optimizer"])
        self._epoch = int(state["epoch"])
        self._records = [EpochRecord(**record) for record in state["records"]]
        self._rng = _native_rng(state["rng"])
        self._shuffle.set_state(state["shuffle"])
        self._norms = ()

    def _require_epoch_boundary(self) -> None:
        if self._in_epoch:
            raise RuntimeError(
                f"epoch {self._epoch + 1} was interrupted; its state is partial. "
                "Continue from the last saved state instead."
            )

    @contextmanager
    def _own_random_streams(self) -> Iterator[None]:
        outside = _global_rng()
        _set_global_rng(self._rng)
        try:
            yield
            self._rng = _global_rng()
        finally:
            _set_global_rng(outside)


def saved_revision(state: dict[str, Any]) -> str:
    """The revision a saved trial state was trained with (older states: torch's modules)."""
    return str(state.get("revision", TORCH_MODULES))


def _contiguous(data: SequenceSet) -> SequenceSet:
    return SequenceSet(
        data.inputs.contiguous(),
        data.targets.contiguous(),
        data.weights.contiguous(),
        dict(data.extras),
    )


def _window_weights(weights: torch.Tensor, windows: list[tuple[int, int]]) -> torch.Tensor:
    """[N, windows] total target weight of each sequence in each window."""
    return torch.stack([weights[:, a:b].sum(dim=1) for a, b in windows], dim=1).double()


def _global_rng() -> dict[str, Any]:
    return {
        "python": random.getstate(),
        "numpy": np.random.get_state(legacy=False),
        "torch": torch.get_rng_state(),
    }


def _set_global_rng(states: dict[str, Any]) -> None:
    random.setstate(states["python"])
    np.random.set_state(states["numpy"])
    torch.set_rng_state(states["torch"])


def _portable_rng(states: dict[str, Any]) -> dict[str, Any]:
    # Plain lists and tensors only, so that torch.load(weights_only=True) accepts the state.
    numpy_state = copy.deepcopy(states["numpy"])
    numpy_state["state"]["key"] = numpy_state["state"]["key"].tolist()
    return {"python": states["python"], "numpy": numpy_state, "torch": states["torch"].clone()}


def _native_rng(states: dict[str, Any]) -> dict[str, Any]:
    numpy_state = copy.deepcopy(states["numpy"])
    numpy_state["state"]["key"] = np.asarray(numpy_state["state"]["key"], dtype=np.uint32)
    python = states["python"]
    python_state = (python[0], tuple(python[1]), python[2])
    return {"python": python_state, "numpy": numpy_state, "torch": states["torch"].clone()}
