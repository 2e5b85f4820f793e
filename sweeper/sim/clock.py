"""Simulated time for the virtual bench.

Every simulated instrument reads and advances one shared clock: an acquisition advances it
by the record duration, each transaction by a small latency, a timeout by the timeout. With
``realtime=True`` the clock also really sleeps, so a demo runs at bench speed.
"""

from __future__ import annotations

import time


class SimClock:
    """A monotonic clock that advances instantly when asked to sleep (satisfies roles.Clock)."""

    def __init__(self, realtime: bool = False, start_s: float = 0.0) -> None:
        self.realtime = realtime
        self._now_s = float(start_s)

    def now_s(self) -> float:
        """Simulated monotonic time, seconds."""
        return self._now_s

    def sleep(self, seconds: float) -> None:
        """Advance simulated time by seconds (and really wait that long when realtime)."""
        if seconds < 0:
            raise ValueError(f"cannot sleep a negative time: {seconds} s")
        self._now_s += float(seconds)
        if self.realtime and seconds > 0:
            time.sleep(seconds)

    def __repr__(self) -> str:
        return f"SimClock(now_s={self._now_s!r}, realtime={self.realtime!r})"
