"""A spec's ``[task]`` table, parsed once into ``TaskSection``; reading it imports no torch.

``kind`` picks the task family and every other key is an option of that family, except
``model`` and ``model_path``, which name the spec's own network. ``kind = "objective"`` is
the exception: its only keys are ``function`` and ``path``. The section checks its own shape
(``__post_init__``, raising ``OptionError``); each family checks its options when it builds.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from sweeper.did_you_mean import closest
from sweeper.errors import SpecError
from sweeper.tasks.options import OptionError

OBJECTIVE = "objective"
MODEL_KEYS = ("model", "model_path")
OBJECTIVE_KEYS = ("kind", "function", "path")


@dataclass(frozen=True)
class TaskSection:
    kind: str
    options: dict[str, Any] = field(default_factory=dict)  # the kind's own options, as written
    model: str | None = None  # "module:function" building each trial's network
    model_path: str | None = None  # folder searched for the model's module
    function: str | None = None  # an objective plugin's "module:function"
    path: str | None = None  # folder searched for the objective's module

    def __post_init__(self) -> None:
        if not isinstance(self.kind, str):
            raise OptionError("kind", f"must be a string, got {self.kind!r}")
        if self.is_objective:
            self._check_objective()
        else:
            self._check_model()

    @property
    def is_objective(self) -> bool:
        return self.kind == OBJECTIVE

    def _check_objective(self) -> None:
        for key in self.options:
            hint = closest(key, OBJECTIVE_KEYS)
            fix = f"did you mean '{hint}'?" if hint else f"valid keys: {', '.join(OBJECTIVE_KEYS)}"
            raise OptionError(key, f"unknown key; {fix}")
        if not isinstance(self.function, str):
            raise OptionError("function", 'missing; give "module:function"')
        _check_folder("path", self.path)

    def _check_model(self) -> None:
        if self.model is not None and not isinstance(self.model, str):
            raise OptionError("model", f"must look like 'module:function', got {self.model!r}")
        if self.model is None and self.model_path is not None:
            raise OptionError("model_path", "set only with model = 'module:function'")
        _check_folder("model_path", self.model_path)

    def table(self) -> dict[str, Any]:
        """The ``[task]`` table as written: the spec's canonical form and digest use it."""
        named = {
            "model": self.model,
            "model_path": self.model_path,
            "function": self.function,
            "path": self.path,
        }
        given = {key: value for key, value in named.items() if value is not None}
        return {"kind": self.kind, **self.options, **given}


def _check_folder(key: str, path: Any) -> None:
    if path is not None and not isinstance(path, str):
        raise OptionError(key, f"must be a folder path (a string), got {path!r}")


def section_from_table(table: Mapping[str, Any]) -> TaskSection:
    """The typed section of a ``[task]`` table; raises OptionError naming the key."""
    if "kind" not in table:
        raise OptionError("kind", 'missing; name the task (e.g. kind = "adding")')
    kind = table["kind"]
    own = ("function", "path") if kind == OBJECTIVE else MODEL_KEYS
    named = {key: table[key] for key in own if key in table}
    options = {key: value for key, value in table.items() if key != "kind" and key not in own}
    return TaskSection(kind, options, **named)


def task_section(table: Mapping[str, Any], source: str) -> TaskSection:
    """``section_from_table`` with its errors as SpecErrors naming ``source`` and ``task.KEY``."""
    try:
        return section_from_table(table)
    except OptionError as error:
        raise SpecError(source, f"task.{error.key}", error.message) from None
