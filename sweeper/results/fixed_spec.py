"""The study's own spec with its search fixed at the best trial's values (`best --spec`).

The stored spec text is edited line by line, so its comments and layout stay: the searched
parameters become fixed values (in ``[training]``, or in ``[search]`` for an objective
plugin), and ``[study]`` names a new one-trial study beside the old one. When the text is
laid out so that a line edit cannot be trusted (a key written over several lines, dotted
keys), the whole spec is written anew from its data, without comments. Either way the text
must read back as exactly the intended tables.
"""

from __future__ import annotations

import json
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from sweeper.errors import InputError

HEADER = re.compile(r"^\s*\[\s*([A-Za-z0-9_.\-]+)\s*\]\s*(#.*)?$")
KEY = re.compile(r"^\s*([A-Za-z0-9_\-]+)\s*=")
SEARCHLESS_SAMPLERS = {"grid": "random", "cmaes": "random"}  # both refuse a spec without ranges


def toml_value(value: Any) -> str:
    """A TOML literal that reads back as ``value`` (floats by repr, so exactly)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value)  # inf and nan are TOML too
    return json.dumps(str(value), ensure_ascii=False)


@dataclass(frozen=True)
class SpecEdit:
    """What changes: keys set per table, keys removed, and what ``[search]`` becomes."""

    study: dict[str, Any]
    drop_study: tuple[str, ...]
    training: dict[str, Any]
    search: dict[str, Any] | None  # None: the table goes


def edited_data(text: str, edit: SpecEdit) -> dict[str, Any]:
    """The spec's tables after the edit: what the written text must read back as."""
    data = tomllib.loads(text)
    study = {k: v for k, v in data["study"].items() if k not in edit.drop_study}
    data["study"] = {**study, **edit.study}
    if edit.training:
        data["training"] = {**data.get("training", {}), **edit.training}
    data.pop("search", None)
    if edit.search is not None:
        data["search"] = edit.search
    return data


def fixed_text(text: str, edit: SpecEdit, head: list[str]) -> str:
    """The spec's text with the edit applied, headed by ``head`` (comment lines)."""
    expected = edited_data(text, edit)
    edited = _edit_lines(text, edit)
    if edited is not None:
        candidate = "\n".join(head + edited).rstrip("\n") + "\n"
        if _reads_as(candidate, expected):
            return candidate
    rewritten = "\n".join(head + _dump(expected)) + "\n"
    if not _reads_as(rewritten, expected):
        raise InputError("the stored spec cannot be written back as TOML; use the fragment")
    return rewritten


def _reads_as(text: str, expected: Mapping[str, Any]) -> bool:
    try:
        return tomllib.loads(text) == expected
    except tomllib.TOMLDecodeError:
        return False


def _blocks(lines: list[str]) -> list[tuple[str, list[str]]]:
    """The text cut at its table headers: ("", preamble), then (table name, its lines)."""
    blocks: list[tuple[str, list[str]]] = [("", [])]
    for line in lines:
        match = HEADER.match(line)
        if match:
            blocks.append((match.group(1), [line]))
        else:
            blocks[-1][1].append(line)
    return blocks


def _edit_lines(text: str, edit: SpecEdit) -> list[str] | None:
    """The edited lines, or None when the layout is beyond a line edit."""
    out: list[str] = []
    saw_training = saw_search = False
    for name, lines in _blocks(text.splitlines()):
        top = name.split(".")[0]
        if "." in name and top in ("study", "training"):
            return None
        if top == "search":
            if not saw_search and edit.training and not saw_training:
                out += ["[training]", *_key_lines(edit.training), ""]
                saw_training = True
            if not saw_search:
                out += _search_block(edit)
            saw_search = True
            out += _trailing_comments(lines)  # they introduce the next table
            continue
        if name == "study":
            lines = _set_keys(lines, edit.study, edit.drop_study)
        elif name == "training":
            lines = _set_keys(lines, edit.training, ())
            saw_training = True
        out += lines
    if edit.training and not saw_training:
        out += ["", "[training]", *_key_lines(edit.training)]
    if edit.search is not None and not saw_search:
        out += ["", *_search_block(edit)]
    return out


def _trailing_comments(lines: list[str]) -> list[str]:
    start = len(lines)
    while start > 1 and (not lines[start - 1].strip() or lines[start - 1].lstrip().startswith("#")):
        start -= 1
    return lines[start:]


def _search_block(edit: SpecEdit) -> list[str]:
    if edit.search is None:
        return ["# [search] is fixed at the best trial's values, in [training] above"]
    return ["[search]", *_key_lines(edit.search)]


def _set_keys(lines: list[str], values: Mapping[str, Any], drop: tuple[str, ...]) -> list[str]:
    """A table's lines with each key of ``values`` set (in place, or added after its last
    key) and each key of ``drop`` removed; a multi-line value is left to the caller's check,
    which then falls back to rewriting the spec."""
    remaining = dict(values)
    kept: list[str] = []
    last_key = 0
    for line in lines:
        match = KEY.match(line)
        key = match.group(1) if match else None
        if key in drop:
            continue
        if key is not None and key in remaining:
            kept.append(f"{key} = {toml_value(remaining.pop(key))}")
        else:
            kept.append(line)
        if key is not None:
            last_key = len(kept)
    return kept[:last_key] + _key_lines(remaining) + kept[last_key:]


def _key_lines(values: Mapping[str, Any]) -> list[str]:
    return [f"{key} = {_value(value)}" for key, value in values.items()]


def _value(value: Any) -> str:
    """A TOML value: a scalar, a list of values or an inline table."""
    if isinstance(value, list):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_value(v)}" for k, v in value.items()) + " }"
    return toml_value(value)


def _key(key: str) -> str:
    return key if re.fullmatch(r"[A-Za-z0-9_\-]+", key) else toml_value(key)


def _dump(data: Mapping[str, Any]) -> list[str]:
    lines: list[str] = []
    for name, table in data.items():
        lines += [f"[{name}]", *(f"{_key(k)} = {_value(v)}" for k, v in table.items()), ""]
    return lines
