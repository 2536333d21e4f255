"""Helpers of the node: throttled warnings and the latency meter (no rclpy here). The stamp
matching of separate effort messages is :mod:`interaction_estimator.io.effort_matching`, shared
with the bag reader.
"""
from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any


class WarningThrottle:
    """At most one log line per key every ``period_s`` seconds, with the count in between.

    ``emit(key, text)`` calls ``log(line)`` now or counts the event for the next line. Keys are
    the reject reasons and a few node findings, so their number is bounded.
    """

    def __init__(self, log: Callable[[str], Any], period_s: float = 2.0,
                 clock: Callable[[], float] = time.monotonic):
        self._log, self._period, self._clock = log, float(period_s), clock
        self._last: dict[str, float] = {}
        self._suppressed: dict[str, int] = {}

    def emit(self, key: str, text: str) -> bool:
        now = self._clock()
        last = self._last.get(key)
        if last is not None and now - last < self._period:
            self._suppressed[key] = self._suppressed.get(key, 0) + 1
            return False
        more = self._suppressed.pop(key, 0)
        suffix = f" (and {more} more like it in the last {now - last:.1f} s)" if more else ""
        self._last[key] = now
        self._log(f"{text}{suffix}")
        return True


class LatencyMeter:
    """Processing time per message, s: running mean (exponential, about 100 messages) and max."""

    def __init__(self, memory: int = 100):
        self._alpha = 1.0 / max(memory, 1)
        self.mean_s = 0.0
        self.max_s = 0.0
        self.count = 0

    def add(self, seconds: float) -> None:
        self.count += 1
        self.mean_s = seconds if self.count == 1 else self.mean_s + self._alpha * (
            seconds - self.mean_s)
        self.max_s = max(self.max_s, seconds)

    def take_max(self) -> float:
        """The largest time since the last call, s; resets it."""
        m, self.max_s = self.max_s, 0.0
        return m
