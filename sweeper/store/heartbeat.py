"""How often a worker beats, and how long each watcher waits before it gives up on one."""

from __future__ import annotations

from dataclasses import dataclass

DEFAULT_INTERVAL_SECONDS = 10
MISSED_BEATS = 3  # a trial silent for three heartbeats is taken as dead
MIN_LEASE_SECONDS = 5.0
# A claim is judged by the trial's start time, which the claiming host's clock sets: the wait
# leaves room for clocks of different hosts that disagree by some seconds.
MIN_UNSTARTED_SECONDS = 30.0
UNSTARTED_BEATS = 5


@dataclass(frozen=True)
class HeartbeatTiming:
    """A study's heartbeat interval (``study.heartbeat``, whole seconds) and what follows from it.

    - ``stale_after``: a running trial whose last heartbeat is older than this is failed and
      retried (optuna's grace period).
    - ``lease_seconds``: how long the coordinator's lease lasts, so a dead coordinator is
      replaced about as fast as its dead trials are noticed.
    - ``unstarted_after``: how long a claimed trial may go without any heartbeat at all.
    """

    interval: int = DEFAULT_INTERVAL_SECONDS

    def __post_init__(self) -> None:
        if self.interval < 1:
            raise ValueError(f"a heartbeat interval must be at least 1 s, not {self.interval}")

    @property
    def stale_after(self) -> int:
        return MISSED_BEATS * self.interval

    @property
    def lease_seconds(self) -> float:
        return max(MIN_LEASE_SECONDS, float(MISSED_BEATS * self.interval))

    @property
    def unstarted_after(self) -> float:
        return max(MIN_UNSTARTED_SECONDS, float(UNSTARTED_BEATS * self.interval))
