"""The package's shape: no import circles, a trainer free of storage, one optuna adapter."""

from __future__ import annotations

import ast
import re
import subprocess
import sys
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "sweeper"
ADAPTER = PACKAGE / "store" / "optuna_internals.py"
PRIVATE_OPTUNA = re.compile(r"optuna\.\w+\._|\._storage\b|\._study_id\b|\._trial_id\b")


def _modules() -> dict[str, Path]:
    found = {}
    for path in PACKAGE.rglob("*.py"):
        name = ".".join(path.relative_to(PACKAGE.parent).with_suffix("").parts)
        found[name.removesuffix(".__init__")] = path
    return found


def _imports(path: Path, known: set[str]) -> set[str]:
    """Every sweeper module ``path`` imports at run time (not under TYPE_CHECKING)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    skipped = {
        id(child)
        for node in ast.walk(tree)
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test)
        for child in ast.walk(node)
    }
    names: set[str] = set()
    for node in ast.walk(tree):
        if id(node) in skipped:
            continue
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module)
            names.update(f"{node.module}.{alias.name}" for alias in node.names)
    return {name for name in names if name in known}


def _graph() -> dict[str, set[str]]:
    modules = _modules()
    graph = {name: _imports(path, set(modules)) for name, path in modules.items()}
    for targets in graph.values():  # importing a.b.c runs the packages a.b and a first
        for target in list(targets):
            parts = target.split(".")
            targets.update(".".join(parts[:i]) for i in range(2, len(parts)) if parts[:i])
    return graph


def _circle_from(start: str, graph: dict[str, set[str]]) -> list[str] | None:
    path, on_path, done = [start], {start}, set()

    def visit(node: str) -> list[str] | None:
        for nxt in sorted(graph[node]):
            if nxt in on_path:
                return [*path[path.index(nxt) :], nxt]
            if nxt in done:
                continue
            path.append(nxt)
            on_path.add(nxt)
            found = visit(nxt)
            if found:
                return found
            on_path.discard(path.pop())
            done.add(nxt)
        return None

    return visit(start)


def test_no_module_imports_itself_through_others() -> None:
    graph = _graph()
    circles = [c for name in sorted(graph) if (c := _circle_from(name, graph))]
    assert not circles, " -> ".join(circles[0])


def test_the_trainer_imports_neither_the_study_library_nor_sqlalchemy() -> None:
    code = (
        "import sys, sweeper.training.trial_run, sweeper.training.epoch_loop, "
        "sweeper.training.model_plugin; "
        "print(sorted(m for m in ('optuna', 'sqlalchemy') if m in sys.modules))"
    )
    loaded = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert loaded.returncode == 0, loaded.stderr
    assert loaded.stdout.strip() == "[]"


def test_private_optuna_names_live_in_the_adapter_alone() -> None:
    users = sorted(
        str(path.relative_to(PACKAGE.parent))
        for path in PACKAGE.rglob("*.py")
        if path != ADAPTER and PRIVATE_OPTUNA.search(path.read_text(encoding="utf-8"))
    )
    assert users == []
    assert PRIVATE_OPTUNA.search(ADAPTER.read_text(encoding="utf-8"))
