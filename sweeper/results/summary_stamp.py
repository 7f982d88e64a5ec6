"""What a written summary covered: when it was written and how many trials it saw.

The page carries this in two ``<meta>`` tags of its head, so that ``sweeper status`` can
tell, without parsing the whole page, that the summary on disk is older than the study.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

WRITTEN = "sweeper-written"
TRIALS = "sweeper-trials"
FINISHED = "sweeper-finished-trials"
HEAD_BYTES = 8192  # the meta tags sit in the page's head, before its large scripts


@dataclass(frozen=True)
class SummaryStamp:
    written: datetime  # in UTC
    trials: int  # every trial the study held when the page was written
    finished: int  # of which complete, stopped or failed

    def meta_tags(self) -> str:
        return "\n".join(
            f'<meta name="{name}" content="{value}">'
            for name, value in (
                (WRITTEN, self.written.isoformat(timespec="seconds")),
                (TRIALS, self.trials),
                (FINISHED, self.finished),
            )
        )

    def header_line(self) -> str:
        return (
            f"Written {self.written:%Y-%m-%d %H:%M} UTC from {self.trials} trials, "
            f"{self.finished} of them finished"
        )


def now_utc() -> datetime:
    return datetime.now(UTC)


def read_stamp(page: Path) -> SummaryStamp | None:
    """The stamp of a summary written by sweeper, or None (no file, or an older page)."""
    try:
        with page.open("rb") as stream:
            head = stream.read(HEAD_BYTES).decode("utf-8", errors="replace")
    except OSError:
        return None
    values = dict(re.findall(r'<meta name="(sweeper-[a-z-]+)" content="([^"]*)">', head))
    try:
        return SummaryStamp(
            datetime.fromisoformat(values[WRITTEN]), int(values[TRIALS]), int(values[FINISHED])
        )
    except (KeyError, ValueError):
        return None
