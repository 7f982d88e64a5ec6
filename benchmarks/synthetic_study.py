"""A synthetic study with the shape of a real sweep, for demonstrations, tests and benchmarks.

The objective, curves and gradient norms follow simple made-up laws (a best learning rate,
diminishing returns in width, Elman cells that explode on long unrolls without clipping), so
that every section of the summary has something to show. No training happens here.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta

import numpy as np
import optuna
from optuna.distributions import CategoricalDistribution, FloatDistribution, IntDistribution
from optuna.trial import FrozenTrial, TrialState

from sweeper.store.connect import open_storage
from sweeper.store.tables import EPOCHS, ensure_tables
from sweeper.training.epoch_record import EPOCH_FIELDS

DISTRIBUTIONS = {
    "lr": FloatDistribution(1e-4, 1.0, log=True),
    "hidden": IntDistribution(8, 256, log=True),
    "unroll": IntDistribution(5, 100),
    "clip": CategoricalDistribution([0.0, 0.25, 1.0, 4.0]),
    "cell": CategoricalDistribution(["elman", "gru", "lstm"]),
}
BASELINE = 1.0 / 6.0  # the adding task's always-predict-one MSE
WORKERS = ("node-a:4101", "node-a:4102", "node-b:5201", "node-b:5202")


@dataclass(frozen=True)
class _Plan:
    number: int
    params: dict
    state: TrialState
    curve: np.ndarray  # valid loss per completed epoch (NaN once diverged)
    norms: np.ndarray  # median pre-clip norm per epoch
    diverged: bool
    failed: bool


def make_synthetic_study(
    location: str, *, trials: int = 200, epochs: int = 30, seed: int = 0, name: str = "synthetic"
) -> str:
    """Write a study of ``trials`` trials with ``epochs`` epochs of telemetry; return its name."""
    rng = np.random.default_rng(seed)
    storage = open_storage(location, heartbeat=False)
    try:
        study = optuna.create_study(study_name=name, storage=storage)
        _set_study_attrs(study, trials)
        plans = [_plan(rng, number, epochs) for number in range(trials)]
        frozen = _schedule(plans, rng)
        study.add_trials(frozen)
        ensure_tables(storage.engine)
        rows = [row for plan in plans for row in _epoch_rows(name, plan, rng)]
        with storage.engine.begin() as connection:
            if rows:
                connection.execute(EPOCHS.insert(), rows)
    finally:
        storage.engine.dispose()
    return name


def _set_study_attrs(study: optuna.Study, budget: int) -> None:
    attrs = {
        "spec_text": '[study]\nname = "synthetic"\n[task]\nname = "adding"\nlength = 50\n',
        "spec_hash": "0" * 16,
        "task": "adding",
        "task_description": "sum of the two marked numbers in a sequence of 50",
        "baseline": {"value": BASELINE, "measure": "valid_loss", "description": "predict 1"},
        "objective": "valid_loss",
        "metric_name": "mse",
        "budget": budget,
        "workers": len(WORKERS),
    }
    for key, value in attrs.items():
        study.set_user_attr(key, value)


def _draw(rng: np.random.Generator) -> dict:
    return {
        "lr": float(10 ** rng.uniform(-4, 0)),
        "hidden": round(2 ** rng.uniform(3, 8)),
        "unroll": int(rng.integers(5, 101)),
        "clip": float(rng.choice([0.0, 0.25, 1.0, 4.0])),
        "cell": str(rng.choice(["elman", "gru", "lstm"])),
    }


def _plan(rng: np.random.Generator, number: int, epochs: int) -> _Plan:
    params = _draw(rng)
    lr, hidden, cell = params["lr"], params["hidden"], params["cell"]
    floor = 0.01 + 0.4 * (math.log10(lr) + 2.2) ** 2 / 16 + 0.3 / math.sqrt(hidden)
    floor *= {"elman": 1.6, "gru": 1.0, "lstm": 1.05}[cell]
    growth = 1.35 if cell == "elman" and params["unroll"] > 60 else 0.98
    floor *= 1.8 if growth > 1 else 1.0
    t = np.arange(1, epochs + 1)
    curve = (
        floor + (BASELINE * 1.2 - floor) * np.exp(-t * lr**0.5 / 2) + rng.normal(0, 0.003, epochs)
    )
    norms = 0.8 * lr**0.3 * math.sqrt(hidden / 32) * growth ** (t - 1)
    diverged = params["clip"] == 0.0 and (lr > 0.3 or (growth > 1.0 and lr > 0.05))
    if diverged:
        at = int(rng.integers(2, max(3, epochs // 3)))
        curve, norms = curve.copy(), norms.copy()
        curve[at:], norms[at:] = np.nan, np.nan
        return _Plan(
            number, params, TrialState.PRUNED, curve[: at + 1], norms[: at + 1], True, False
        )
    if rng.random() < 0.02:
        return _Plan(number, params, TrialState.FAIL, curve[:2], norms[:2], False, True)
    if number > 10 and rng.random() < 0.35:
        stop = int(rng.integers(3, max(4, epochs // 2)))
        return _Plan(number, params, TrialState.PRUNED, curve[:stop], norms[:stop], False, False)
    return _Plan(number, params, TrialState.COMPLETE, curve, norms, False, False)


def _schedule(plans: list[_Plan], rng: np.random.Generator) -> list[FrozenTrial]:
    """Hand trials to the worker that frees up first, as a shared study would."""
    start = datetime(2024, 5, 1, 9, 0, 0)
    free = dict.fromkeys(WORKERS, start)
    frozen: list[FrozenTrial] = []
    failed: list[int] = []
    for plan in plans:
        worker = min(free, key=lambda w: free[w])
        seconds = float(
            len(plan.curve) * (0.4 + plan.params["hidden"] / 64) * rng.uniform(0.8, 1.2)
        )
        begin, end = free[worker], free[worker] + timedelta(seconds=seconds)
        free[worker] = end + timedelta(seconds=0.5)
        retry_of = failed.pop(0) if failed and not plan.failed else None
        frozen.append(_frozen(plan, worker, begin, end, seconds, retry_of))
        if plan.failed:
            failed.append(plan.number)
    return frozen


def _frozen(
    plan: _Plan, worker: str, begin: datetime, end: datetime, seconds: float, retry_of: int | None
) -> FrozenTrial:
    finite = plan.curve[np.isfinite(plan.curve)]
    value = float(finite[-1]) if finite.size and plan.state != TrialState.FAIL else None
    attrs = {
        "seed": 1000 + plan.number,
        "worker": worker,
        "epochs": int(np.isfinite(plan.curve).sum()),
        "compute_seconds": seconds,
        "end_reason": _reason(plan),
        "diverged": plan.diverged,
        "training": {**plan.params, "layers": 1, "batch": 32, "optimizer": "adam"},
    }
    if plan.failed:
        attrs["failure"] = {
            "type": "RuntimeError",
            "message": "CUDA error: an illegal memory access was encountered",
            "traceback": 'Traceback (most recent call last):\n  File "train.py", line 88\n',
        }
    if retry_of is not None:
        attrs["retry_of"] = retry_of
    return synthetic_trial(
        plan.number,
        state=plan.state,
        value=value,
        params=plan.params,
        distributions=DISTRIBUTIONS,
        user_attrs=attrs,
        curve=[float(v) for v in plan.curve],
        start=begin,
        end=end,
    )


def synthetic_trial(
    number: int,
    *,
    state: TrialState = TrialState.COMPLETE,
    value: float | None = None,
    params: dict | None = None,
    distributions: dict | None = None,
    user_attrs: dict | None = None,
    curve: Sequence[float] = (),
    start: datetime | None = None,
    end: datetime | None = None,
) -> FrozenTrial:
    """A finished (or running) trial ready for ``study.add_trial``; curve values count from 1.

    ``distributions`` may describe a whole space; the trial keeps those of its own params.
    """
    finished = state not in (TrialState.RUNNING, TrialState.WAITING)
    start = start or datetime(2024, 5, 1, 9, 0, 0) + timedelta(minutes=number)
    return FrozenTrial(
        number=number,
        state=state,
        value=value,
        datetime_start=None if state == TrialState.WAITING else start,
        datetime_complete=(end or start + timedelta(seconds=30)) if finished else None,
        params=dict(params or {}),
        distributions={k: v for k, v in (distributions or {}).items() if k in (params or {})},
        user_attrs=dict(user_attrs or {}),
        system_attrs={},
        intermediate_values={i + 1: v for i, v in enumerate(curve) if math.isfinite(v)},
        trial_id=number,
    )


def _reason(plan: _Plan) -> str:
    if plan.diverged:
        return f"non-finite loss at epoch {len(plan.curve)}"
    if plan.failed:
        return "exception"
    if plan.state == TrialState.PRUNED:
        return f"stopped early at epoch {len(plan.curve)}: below the median of earlier trials"
    return "budget of epochs reached"


def _epoch_rows(study_name: str, plan: _Plan, rng: np.random.Generator) -> list[dict]:
    rows = []
    clip = plan.params["clip"]
    for index, (loss, norm) in enumerate(zip(plan.curve, plan.norms, strict=True)):
        finite = math.isfinite(norm)
        steps = rng.lognormal(math.log(norm), 0.5, 64) if finite else np.full(64, np.nan)
        record = {
            "epoch": index + 1,
            "train_loss": loss * 0.95,
            "valid_loss": loss,
            "valid_metric": loss,
            "grad_norm_mean": float(np.mean(steps)),
            "grad_norm_median": float(np.median(steps)),
            "grad_norm_p95": float(np.percentile(steps, 95)),
            "grad_norm_max": float(np.max(steps)),
            "clip_fraction": float(np.mean(steps >= clip)) if clip > 0 and finite else 0.0,
            "nonfinite_steps": 0 if finite else 64,
            "steps": 64,
            "seconds": 1.0,
            "sequences_per_second": 2048.0,
        }
        row = {key: _stored(record[key]) for key in EPOCH_FIELDS}
        rows.append({"study_name": study_name, "trial_number": plan.number, **row})
    return rows


def _stored(value: float | int) -> float | int | None:
    # Matches the telemetry table: NULL stands for a value that is not finite.
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value
