"""Free-motion and contact segments of a pass, and the margins kept around them."""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ...core.settings import Settings, per_joint
from .common import CONTACT, FREE, LEARNING, MARGIN_EXTRA
from .passes import Trace

# ============================================================================================
# segments


@dataclass(frozen=True)
class Segment:
    """A stretch of one recording: bag index, kind ('free' or 'contact'), start and end s."""

    bag: int
    kind: str
    start: float
    end: float

    @property
    def duration(self) -> float:
        return self.end - self.start


def margin(settings: Settings, joints: Sequence[str]) -> float:
    """Time kept clear of contact, observer restarts and the start, s: five observer time
    constants (1 / smallest gain) plus :data:`MARGIN_EXTRA`."""
    gain = min(per_joint(settings, "observer.gain", joints))
    return 5.0 / max(gain, 1e-3) + MARGIN_EXTRA


def free_mask(trace: Trace, clear: float, startup_only: bool, whole: bool = False
              ) -> np.ndarray:
    """Samples usable as free motion (N,) bool: phase learning_bias (and free, unless
    ``startup_only``), at least ``clear`` s from any other sample, restart or the start.
    whole: the bag is free motion from start to end (the user named it so): every sample is,
    whatever the contact monitor said, except near the start and observer restarts."""
    if whole:
        ok = np.ones(len(trace.time), bool)
    else:
        ok = trace.phase == LEARNING
        if not startup_only:
            ok |= trace.phase == FREE
    bad = ~ok | trace.restarted
    t = trace.time
    keep = ok & (t - t[0] >= clear)
    if bad.any():
        bt = t[bad]
        i = np.searchsorted(bt, t)
        before = np.where(i > 0, t - bt[np.clip(i - 1, 0, len(bt) - 1)], np.inf)
        after = np.where(i < len(bt), bt[np.clip(i, 0, len(bt) - 1)] - t, np.inf)
        keep &= np.minimum(before, after) >= clear
    return keep


def runs_of(mask: np.ndarray) -> list[tuple[int, int]]:
    """Index ranges [a, b) of the True runs of a boolean array."""
    if not len(mask):
        return []
    d = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1)))


def segments_of(bag: int, time: np.ndarray, mask: np.ndarray, kind: str) -> list[Segment]:
    return [Segment(bag, kind, float(time[a]), float(time[b - 1])) for a, b in runs_of(mask)]


def contact_segments(bag: int, trace: Trace) -> list[Segment]:
    return segments_of(bag, trace.time, trace.phase == CONTACT, "contact")


def contact_time(trace: Trace) -> float:
    """s the contact monitor reported contact in a pass (sum of the sample intervals ending in
    contact)."""
    if len(trace.time) < 2:
        return 0.0
    dt = np.diff(trace.time)
    return float(np.sum(dt[trace.phase[1:] == CONTACT]))


