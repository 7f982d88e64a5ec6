"""Reading a spec: its file, each section, then the checks across sections and its task."""

from __future__ import annotations

from pathlib import Path

from sweeper.errors import SpecError
from sweeper.spec.checks import check_spec_against_task
from sweeper.spec.sections import Spec, spec_from_text


def load_spec(path: str | Path, check_task: bool = True) -> Spec:
    """Read and check a spec file; raise SpecError naming the file, the key and the fix.

    ``check_task=False`` checks each section but not the spec against its task, which
    builds the task's data (and imports torch): a quick first look at a spec.
    """
    path = Path(path)
    source = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise SpecError(source, "", "no such spec file; check the path") from None
    except (OSError, UnicodeDecodeError) as error:
        raise SpecError(source, "", f"cannot read the spec file ({error})") from None
    return parse_spec(text, source, check_task)


def parse_spec(text: str, source: str = "<spec>", check_task: bool = True) -> Spec:
    """A spec from its TOML text; see ``load_spec``."""
    spec = spec_from_text(text, source)
    if check_task:
        check_spec_against_task(spec)
    return spec
