"""Every example spec validates, and the demo has the shape README promises."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeper.spec.loading import load_spec
from tests.conftest import invoke

REPO = Path(__file__).parent.parent
EXAMPLES = sorted((REPO / "search_spaces").glob("*.toml"))


def test_there_are_examples() -> None:
    assert len(EXAMPLES) >= 5


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.name for p in EXAMPLES])
def test_example_validates(path: Path) -> None:
    result = invoke("check", str(path))
    assert result.exit_code == 0, result.output
    assert result.output.startswith(f"{path}: ok")


def test_adding_demo_searches_the_four_knobs() -> None:
    (demo,) = [p for p in EXAMPLES if "adding" in p.name]
    spec = load_spec(demo)
    assert {"unroll", "hidden", "clip", "lr"} <= set(spec.search)
    assert spec.study.workers == 2


def test_readme_shows_the_demo_file_exactly() -> None:
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    name = "search_spaces/adding_lstm_demo.toml"
    after = readme.split(f"Example (`{name}`):\n\n```toml\n", 1)[1]
    assert after.split("```\n", 1)[0] == (REPO / name).read_text(encoding="utf-8")
