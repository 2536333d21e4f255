"""Input helpers of the node: stamp matching of separate effort messages, throttled warnings.

No rclpy here; every buffer is bounded.
"""
from __future__ import annotations

import time
from collections import deque
from dataclasses import dataclass
from typing import Any, Callable, Generic, TypeVar

T = TypeVar("T")
E = TypeVar("E")


@dataclass(frozen=True)
class Pair(Generic[T, E]):
    """A joint state and the effort message matched to it (None: no effort will come)."""

    time: float          # s, stamp of the joint state
    state: T
    effort: E | None


class EffortMatcher(Generic[T, E]):
    """Pairs joint states with effort messages whose stamps differ by at most ``tolerance_s``.

    Both streams are assumed to arrive in stamp order (each on its own topic). A state is held
    until its effort arrives; it is given up (returned with ``effort=None``) once an effort newer
    than its stamp plus the tolerance has arrived, once a later state has been matched, or when
    more than ``capacity`` states wait. Efforts that no state can use any more are dropped and
    counted in ``unused_efforts``. Each call returns the pairs that are ready, in stamp order.
    """

    def __init__(self, tolerance_s: float, capacity: int = 100):
        self.tolerance_s = float(tolerance_s)
        self.capacity = int(capacity)
        self._states: deque[tuple[float, T]] = deque()
        self._efforts: deque[tuple[float, E]] = deque()
        self.unused_efforts = 0

    def clear(self) -> None:
        self._states.clear()
        self._efforts.clear()

    def pending(self) -> int:
        """Number of joint states waiting for an effort."""
        return len(self._states)

    def add_state(self, t: float, state: T) -> list[Pair[T, E]]:
        tol = self.tolerance_s
        # efforts older than this state by more than the tolerance can match no later state
        while self._efforts and self._efforts[0][0] < t - tol:
            self._efforts.popleft()
            self.unused_efforts += 1
        best = self._closest(self._efforts, t)
        if best is not None:
            te, effort = self._efforts[best]
            for _ in range(best):  # older ones are of no use now
                self._efforts.popleft()
                self.unused_efforts += 1
            self._efforts.popleft()
            out = [Pair(ts, s, None) for ts, s in self._states]  # overtaken by this one
            self._states.clear()
            out.append(Pair(t, state, effort))
            return out
        self._states.append((t, state))
        out = []
        while len(self._states) > self.capacity:
            ts, s = self._states.popleft()
            out.append(Pair(ts, s, None))
        return out

    def add_effort(self, t: float, effort: E) -> list[Pair[T, E]]:
        tol = self.tolerance_s
        out: list[Pair[T, E]] = []
        best = self._closest(self._states, t)
        if best is not None:
            for _ in range(best):
                ts, s = self._states.popleft()
                out.append(Pair(ts, s, None))
            ts, s = self._states.popleft()
            out.append(Pair(ts, s, effort))
            return out
        # states older than this effort by more than the tolerance can match no later effort
        while self._states and self._states[0][0] < t - tol:
            ts, s = self._states.popleft()
            out.append(Pair(ts, s, None))
        self._efforts.append((t, effort))
        while len(self._efforts) > self.capacity:
            self._efforts.popleft()
            self.unused_efforts += 1
        return out

    def _closest(self, queue: deque, t: float) -> int | None:
        best, best_d = None, None
        for i, (tq, _) in enumerate(queue):
            d = abs(tq - t)
            if d <= self.tolerance_s and (best_d is None or d < best_d):
                best, best_d = i, d
        return best


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
