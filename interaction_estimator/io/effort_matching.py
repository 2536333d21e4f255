"""Efforts from a separate topic, matched to joint states by stamp: the one implementation the
node and the bag reader use (no ROS here; every buffer is bounded).

Some drivers publish positions and velocities on ``joint_states`` and the efforts on a topic of
their own (``joint_efforts``). :class:`EffortMatcher` pairs the two streams as they arrive (the
node: as the middleware delivers them; a bag: in recorded order), and :func:`efforts_in_order`
arranges a matched effort message's values in the joint order of its state.
"""
from __future__ import annotations

from collections import deque
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Generic, TypeVar

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
    counted in ``unused_efforts``. Each call returns the pairs that are ready, in stamp order;
    :meth:`flush` gives up the states still waiting (the end of a recording).
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

    def flush(self) -> list[Pair[T, E]]:
        """The states still waiting, given up (no more efforts will come)."""
        out = [Pair(ts, s, None) for ts, s in self._states]
        self.unused_efforts += len(self._efforts)
        self.clear()
        return out

    def add_state(self, t: float, state: T) -> list[Pair[T, E]]:
        tol = self.tolerance_s
        # efforts older than this state by more than the tolerance can match no later state
        while self._efforts and self._efforts[0][0] < t - tol:
            self._efforts.popleft()
            self.unused_efforts += 1
        best = self._closest(self._efforts, t)
        if best is not None:
            for _ in range(best):  # older ones are of no use now
                self._efforts.popleft()
                self.unused_efforts += 1
            _, effort = self._efforts.popleft()
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


def efforts_in_order(state_names: Sequence[str], effort_names: Sequence[str],
                     efforts: Sequence[float], model_joints: Iterable[str] | None = None
                     ) -> tuple[list[float] | None, str]:
    """The efforts (N·m, N) of an effort message arranged in the joint order of its state.

    Returns (values, "") or (None, reason) when a joint that is needed has no effort: the joints
    of ``model_joints`` that the state names (every joint of the state when None). An effort
    message without names is taken to be in the state's order if it has one effort per state
    joint. Joints that are not needed and have no effort get 0.0 (they are not used).
    """
    names = list(state_names)
    values = list(efforts)
    if not len(effort_names):
        if len(values) == len(names):
            return [float(v) for v in values], ""
        return None, (f"effort message has no names and {len(values)} efforts; expected "
                      f"{len(names)} (one per joint of the joint state) or names")
    if len(effort_names) != len(values):
        return None, (f"effort message has {len(effort_names)} names but {len(values)} "
                      f"efforts; expected one effort per name")
    by_name = dict(zip(effort_names, values))
    needed = set(names) if model_joints is None else set(model_joints)
    missing = [n for n in names if n in needed and n not in by_name]
    if missing:
        return None, (f"effort message lacks {'model ' if model_joints is not None else ''}"
                      f"joints {missing}; it has {list(effort_names)}")
    return [float(by_name.get(n, 0.0)) for n in names], ""
