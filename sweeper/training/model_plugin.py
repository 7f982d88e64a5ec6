"""A spec's own model: ``[task] model = "module:function"`` builds the network of each trial.

The function is called as ``function(params, input_size, output_size)`` with the trial's
training parameters as a dict (``hidden``, ``layers``, ``dropout``, ``cell``, ... every key of
``TrialParams``) and must return an ``nn.Module`` with the contract of
``sweeper.training.models.SequenceModel``:

- ``forward(x, state) -> (outputs, state)``: x [B, T, input_size] -> outputs
  [B, T, output_size] (predictions, or logits for classification), carrying ``state``;
- ``initial_state(batch)``: the state to start ``batch`` sequences from;
- ``detach_state(state)``: the same values with the graph cut (at each window boundary).

sweeper still owns the truncated-BPTT loop, clipping, telemetry and checkpoints. The module
is looked for in ``model_path`` (relative to the spec, default its folder) first.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any, cast

import torch
from torch import nn

from sweeper.errors import SpecError
from sweeper.tasks.base import Task
from sweeper.tasks.loader import import_ref, plugin_folder
from sweeper.tasks.registry import build_section_task
from sweeper.tasks.section import TaskSection
from sweeper.training.models import ModelBuilder, Recurrent, build_model
from sweeper.training.params import TrialParams

CONTRACT = (
    "an nn.Module with forward(x, state) -> (outputs, state), initial_state(batch) and "
    "detach_state(state)"
)


@dataclass(frozen=True)
class PluginBuilder:
    """Calls the user's function and checks that what it returns keeps the contract."""

    function: Callable[..., Any]
    ref: str
    folder: Path
    source: str

    def __call__(self, params: TrialParams, input_size: int, output_size: int) -> Recurrent:
        model = self.function(params.as_dict(), input_size, output_size)
        missing = [
            name
            for name in ("initial_state", "detach_state")
            if not callable(getattr(model, name, None))
        ]
        if not isinstance(model, nn.Module) or missing:
            what = type(model).__name__ + (f" without {', '.join(missing)}" if missing else "")
            raise SpecError(
                self.source, "task.model", f"{self.ref} returned a {what}; return {CONTRACT}"
            )
        return cast(Recurrent, model)  # checked just above


def model_builder(
    model: str | None, model_path: str | None, base_dir: Path, source: str
) -> ModelBuilder:
    """The builder named by ``[task] model`` (looked for in ``model_path``), or the built-in
    recurrent model when there is none."""
    if model is None:
        return build_model
    folder = plugin_folder(model_path or ".", base_dir, source, "task.model_path")
    function = import_ref(model, folder, source, "task.model")
    _check_signature(function, model, source)
    return PluginBuilder(function, model, folder, source)


def section_model_builder(section: TaskSection, base_dir: Path, source: str) -> ModelBuilder:
    """The model builder a parsed ``[task]`` section names."""
    return model_builder(section.model, section.model_path, base_dir, source)


def _check_signature(function: Callable[..., Any], ref: str, source: str) -> None:
    try:
        signature = inspect.signature(function)
    except (TypeError, ValueError):  # some callables have no signature; trust them
        return
    try:
        signature.bind({}, 1, 1)
    except TypeError:
        raise SpecError(
            source,
            "task.model",
            f"{ref} must accept (params, input_size, output_size); its signature is {signature}",
        ) from None


def check_model(builder: ModelBuilder, task: Task, source: str) -> None:
    """Build with default parameters and run two short windows, so that ``sweeper check``
    finds a broken model before any trial does. The caller's random streams are kept."""
    if not isinstance(builder, PluginBuilder):
        return
    steps = min(task.length, 3)
    x = torch.zeros(2, steps, task.input_size)
    with torch.random.fork_rng(devices=[]), torch.no_grad():
        try:
            model = builder(TrialParams(), task.input_size, task.output_size)
            outputs, state = model(x, model.initial_state(2))
            outputs, _ = model(x, model.detach_state(state))
        except SpecError:
            raise
        except Exception as error:  # user code: name it in one line
            raise SpecError(
                source,
                "task.model",
                f"{builder.ref} failed a trial run: {type(error).__name__}: "
                f"{error}; it must return {CONTRACT}",
            ) from error
    expected = (2, steps, task.output_size)
    if not isinstance(outputs, torch.Tensor) or tuple(outputs.shape) != expected:
        shape = (
            tuple(outputs.shape) if isinstance(outputs, torch.Tensor) else type(outputs).__name__
        )
        raise SpecError(
            source,
            "task.model",
            f"{builder.ref}: forward gave outputs of shape {shape} for inputs {tuple(x.shape)}; "
            f"expected {expected} (batch, steps, output_size)",
        )


def build_task_with_model(section: TaskSection, base_dir: Path, source: str) -> Task:
    """The task of a ``[task]`` section, checked against the model that section names."""
    builder = section_model_builder(section, base_dir, source)
    task = build_section_task(section, base_dir, source)
    check_model(builder, task, source)
    return task
