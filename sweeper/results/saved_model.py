"""A final model on disk: the network's weights with its spec, parameters and data scaling.

``save_model`` writes what ``sweeper best --retrain --save PATH`` produces; ``load_model``
reads it back (in any process) as a ``SavedModel`` ready for new sequences. The file is a
torch archive of plain data and tensors, so it loads with ``weights_only=True``: loading runs
no code from the file. A model built by a spec's own function (``[task] model``) re-imports
that function from the folder it was saved from.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import torch
from torch import nn

from sweeper.errors import InputError
from sweeper.tasks import forecast_scores
from sweeper.tasks.base import Task
from sweeper.training.model_plugin import PluginBuilder, model_builder
from sweeper.training.models import Recurrent
from sweeper.training.params import TrialParams

if TYPE_CHECKING:
    from sweeper.results.best import Refit

FORMAT = "sweeper-model/1"
IO_NAMES = ("columns", "target", "vocabulary", "per_step")


class SavedModel(nn.Module):
    """A trained network with its task's scaling, for inference on new sequences.

    ``model(inputs, lengths=None)``: inputs [B, T, F] or [T, F] (tensor or array) in the units
    of the data file. Returns the outputs at every step: for a series task, forecasts
    ``info["horizon"]`` steps ahead in the units of the target columns (float64; the saved
    input scaling is applied and the target scaling inverted); for classification, logits
    [..., T, classes]. ``lengths`` [B] marks the steps after each sequence's end as padding.
    ``model.predict(inputs, lengths=None)``: forecasts, or classes: [B, T] for per-step
    labels, [B] (at each sequence's last real step) for one class per sequence.
    ``info``: the task (name, kind, sizes, columns, target, horizon, vocabulary, ...), the
    parameters, seed, epochs, study, trial and spec text; for a series, also ``predict``,
    ``log``, ``season``, the held-out ``scores`` (MSE, MAE, MASE in data units) and the
    ``baselines`` scored on the same rows (``forecast_scores.SplitBaselines.as_dict``).
    ``network``: the trained module itself, in scaled units, with the contract of
    ``sweeper.training.models.SequenceModel``.
    """

    def __init__(self, network: Recurrent, info: dict[str, Any], scaling: dict[str, Any]) -> None:
        super().__init__()
        self.network = network
        self.info = info
        # (mean, std) in float64, as the task scaled its data; None where it did not
        self.input_scaling = _pair(scaling, "input")
        self.target_scaling = _pair(scaling, "target")
        self.eval()

    def forward(self, inputs: Any, lengths: Any = None) -> torch.Tensor:
        x, single = self._batch(inputs)
        raw = x
        x = _series_inputs(x, self.info)
        if self.input_scaling is not None:
            mean, std = self.input_scaling
            x = (x - mean) / std
        mask = _mask(lengths, x.shape[:2])
        x = torch.where(mask[..., None], x, 0.0).float()
        with torch.no_grad():
            outputs, _ = self.network(x, self.network.initial_state(x.shape[0]))
        if self.target_scaling is not None:
            mean, std = self.target_scaling
            outputs = outputs.double() * std + mean
        outputs = _series_levels(outputs, raw, self.info)
        return outputs[0] if single else outputs

    def predict(self, inputs: Any, lengths: Any = None) -> torch.Tensor:
        outputs = self(inputs, lengths)
        if self.info["kind"] != "classification":
            return outputs
        classes = outputs.argmax(dim=-1)
        if self.info.get("per_step", True):
            return classes
        batched = classes if classes.dim() == 2 else classes[None]
        ends = _mask(lengths, batched.shape).sum(dim=1) - 1
        picked = batched[torch.arange(batched.shape[0]), ends]
        return picked if classes.dim() == 2 else picked[0]

    def _batch(self, inputs: Any) -> tuple[torch.Tensor, bool]:
        x = torch.as_tensor(np.asarray(inputs), dtype=torch.float64)
        size = self.info["input_size"]
        if x.dim() not in (2, 3) or x.shape[-1] != size:
            raise ValueError(
                f"inputs must be [batch, steps, {size}] or [steps, {size}], got {tuple(x.shape)}"
            )
        return (x[None], True) if x.dim() == 2 else (x, False)


def _series_inputs(x: torch.Tensor, info: dict[str, Any]) -> torch.Tensor:
    """Target columns among the inputs as the series task fed them: their log (``log``),
    their change since the step before (``predict = "change"``; the first step gets the
    second's change, as in training)."""
    columns = info.get("target_inputs")
    if not columns:
        return x
    x = x.clone()
    z = x[..., columns]
    if info.get("log"):
        z = torch.log(z)
    if info.get("predict") == "change":
        if z.shape[-2] < 2:
            raise ValueError("a model that forecasts the change needs at least two steps")
        steps = z[..., 1:, :] - z[..., :-1, :]
        z = torch.cat([steps[..., :1, :], steps], dim=-2)
    x[..., columns] = z
    return x


def _series_levels(outputs: torch.Tensor, raw: torch.Tensor, info: dict[str, Any]) -> torch.Tensor:
    """Forecast levels from the network's goals: the last level plus the change, un-logged."""
    columns = info.get("target_inputs")
    if not columns:
        return outputs
    level = raw[..., columns]
    z = torch.log(level) if info.get("log") else level
    goal = z + outputs if info.get("predict") == "change" else outputs
    return torch.exp(goal) if info.get("log") else goal


def _pair(scaling: dict[str, Any], side: str) -> tuple[torch.Tensor, torch.Tensor] | None:
    mean, std = scaling.get(f"{side}_mean"), scaling.get(f"{side}_std")
    return None if mean is None or std is None else (mean, std)


def _mask(lengths: Any, shape: tuple[int, ...] | torch.Size) -> torch.Tensor:
    batch, steps = shape
    if lengths is None:
        return torch.ones(batch, steps, dtype=torch.bool)
    ends = torch.as_tensor(np.asarray(lengths), dtype=torch.long).reshape(-1)
    return torch.arange(steps)[None, :] < ends[:, None]


def task_info(task: Task) -> dict[str, Any]:
    """What a user of the model needs to know about the task's inputs and outputs."""
    info: dict[str, Any] = {
        "task": task.name,
        "kind": task.kind,
        "input_size": task.input_size,
        "output_size": task.output_size,
        "length": task.length,
        "metric_name": task.metric_name,
        "description": task.describe(),
    }
    for name in IO_NAMES:
        value = getattr(task, name, None)
        if isinstance(value, str | bool):
            info[name] = value
        elif isinstance(value, tuple) and all(isinstance(item, str) for item in value):
            info[name] = list(value)
    horizon = getattr(getattr(task, "options", None), "horizon", None)
    if isinstance(horizon, int):
        info["horizon"] = horizon
    return info | series_info(task)


def series_info(task: Task) -> dict[str, Any]:
    """How a series task transformed its target (``target_inputs``: the input positions of
    the target columns, which the saved model transforms as the task did)."""
    options = getattr(task, "options", None)
    if not forecast_scores.is_forecast(task) or options is None:
        return {}
    columns, target = getattr(task, "columns", ()), getattr(task, "target", ())
    transformed = options.predict == "change" or options.log
    return {
        "predict": options.predict,
        "log": options.log,
        "season": options.season,
        "target_inputs": [columns.index(name) for name in target] if transformed else [],
    }


def held_out_scores(refit: Refit) -> dict[str, Any]:
    """The final model's and the baselines' data-unit scores on the held-out split."""
    task, split = refit.task, refit.refit.held_out
    if not forecast_scores.is_forecast(task):
        return {}
    model = forecast_scores.model_scores(task, refit.held_out_outputs(), split)  # type: ignore[arg-type]
    baselines = forecast_scores.baseline_scores(task, split)  # type: ignore[arg-type]
    return {"scores": model.as_dict(), "baselines": baselines.as_dict()}


def task_scaling(task: Task) -> dict[str, torch.Tensor]:
    scaling: dict[str, torch.Tensor] = {}
    for side in ("input", "target"):
        fitted = getattr(task, f"{side}_scaling", None)
        if fitted is not None:
            scaling[f"{side}_mean"] = torch.as_tensor(fitted.mean, dtype=torch.float64)
            scaling[f"{side}_std"] = torch.as_tensor(fitted.std, dtype=torch.float64)
    return scaling


def save_model(path: str | Path, refit: Refit) -> Path:
    """Write the final fit to ``path`` (atomically: a reader never sees half a file)."""
    path = Path(path)
    stored, build = refit.stored, refit.build
    plugin = None
    if isinstance(build, PluginBuilder):
        plugin = {"ref": build.ref, "folder": str(build.folder)}
    info = (
        task_info(refit.task)
        | {
            "study": stored.study_name,
            "trial": stored.number,
            "seed": stored.seed,
            "epochs": refit.epochs,
            "params": stored.params.as_dict(),
            "spec_text": refit.spec.text,
            "spec_source": refit.spec.source,
            "model": plugin,
            "held_out": refit.refit.held_out,
        }
        | held_out_scores(refit)
    )
    payload = {
        "format": FORMAT,
        "info": info,
        "scaling": task_scaling(refit.task),
        "state": refit.run.model.state_dict(),
    }
    path.parent.mkdir(parents=True, exist_ok=True)
    partial = path.with_name(path.name + ".partial")
    torch.save(payload, partial)
    os.replace(partial, path)
    return path


def load_model(path: str | Path) -> SavedModel:
    """The model saved at ``path`` by ``sweeper best --retrain --save``, in eval mode."""
    path = Path(path)
    payload = _read(path)
    info = payload["info"]
    plugin = info.get("model")
    model, folder = (None, None) if plugin is None else (plugin["ref"], plugin["folder"])
    build = model_builder(model, folder, path.parent, str(path))
    network = build(
        TrialParams.from_mapping(info["params"]), info["input_size"], info["output_size"]
    )
    network.load_state_dict(payload["state"])
    return SavedModel(network, info, payload["scaling"])


def _read(path: Path) -> dict[str, Any]:
    if not path.is_file():
        raise InputError(f"{path}: no such file; give the path that 'sweeper best --save' wrote")
    try:
        payload = torch.load(path, weights_only=True)
    except Exception as error:  # any unreadable file: say so in one line
        raise InputError(f"{path} is not a model saved by sweeper ({error})") from None
    if not isinstance(payload, dict) or payload.get("format") != FORMAT:
        raise InputError(f"{path} is not a model saved by sweeper (format {FORMAT})")
    return payload
