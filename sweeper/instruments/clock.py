"""The real bench clock: monotonic seconds and real sleeps."""

from __future__ import annotations

import time


class RealClock:
    """Clock role for hardware benches: time.monotonic and time.sleep."""

    def now_s(self) -> float:
        """Monotonic seconds (arbitrary origin)."""
        return time.monotonic()

    def sleep(self, seconds: float) -> None:
        """Wait seconds (nothing for zero or negative)."""
        if seconds > 0:
            time.sleep(seconds)
