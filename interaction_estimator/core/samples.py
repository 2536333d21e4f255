"""Raw joint samples, their validation, and the count of rejected samples.

A :class:`Sample` is what one JointState (plus, optionally, a matched effort message) carries:
named positions (rad or m), velocities (rad/s or m/s) and efforts (N·m or N), stamped in seconds.
:class:`SampleValidator` checks each one (finite values, matching lengths, time order) and counts
every rejection by reason in :class:`RejectCounts`; nothing is dropped silently.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Sample:
    """One joint-space sample.

    time: stamp in s. names: joint names, any order, any subset of the model's joints.
    position (n,) rad or m; velocity (n,) rad/s or m/s; effort (n,) N·m or N, measured.
    stamp_from_receive: True when the message stamp was zero and receive time was used.
    """

    time: float
    names: tuple[str, ...]
    position: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray
    stamp_from_receive: bool = False


class SampleRejected(ValueError):
    """A sample cannot be used. ``reason`` is a short fixed key, the message says why."""

    def __init__(self, reason: str, message: str):
        super().__init__(message)
        self.reason = reason


REJECT_REASONS = (
    "non_finite",        # NaN or infinite position, velocity or effort
    "length_mismatch",   # names, positions, velocities, efforts of different lengths
    "missing_effort",    # no efforts at all
    "missing_velocity",  # no velocities at all
    "unknown_joint",     # a model joint is missing from the sample, or names are duplicated
    "time_backwards",    # stamp older than the previous sample
    "duplicate_time",    # same stamp as the previous sample
    "non_finite_output", # a stage produced a non-finite number; the sample was not used
)


@dataclass
class RejectCounts:
    """Counts of rejected samples by reason, plus the last reason and message."""

    counts: dict[str, int] = field(default_factory=lambda: {r: 0 for r in REJECT_REASONS})
    last_reason: str = ""
    last_message: str = ""
    total: int = 0      # all rejections, the sum of counts (kept, not summed per sample)

    def add(self, exc: SampleRejected) -> None:
        self.counts[exc.reason] = self.counts.get(exc.reason, 0) + 1
        self.total += 1
        self.last_reason, self.last_message = exc.reason, str(exc)


class SampleValidator:
    """Checks samples one at a time; keeps the previous stamp to check time order."""

    def __init__(self) -> None:
        self.last_time: float | None = None

    def reset(self) -> None:
        self.last_time = None

    def check(self, s: Sample) -> None:
        """Raise SampleRejected if ``s`` cannot be used; otherwise accept its stamp."""
        n = len(s.names)
        if len(s.velocity) == 0 and n:
            raise SampleRejected("missing_velocity", "joint state carries no velocities")
        if len(s.effort) == 0 and n:
            raise SampleRejected("missing_effort", "joint state carries no efforts")
        if not (len(s.position) == len(s.velocity) == len(s.effort) == n):
            raise SampleRejected(
                "length_mismatch",
                f"{n} names but {len(s.position)} positions, {len(s.velocity)} velocities, "
                f"{len(s.effort)} efforts; expected {n} of each")
        # one dot product per array: NaN or inf anywhere makes it non-finite (cheap fast path;
        # a huge finite value that overflows the square is looked at element by element)
        pos, vel, eff = s.position, s.velocity, s.effort
        if not math.isfinite(pos.dot(pos) + vel.dot(vel) + eff.dot(eff)):
            for label, arr in (("position", s.position), ("velocity", s.velocity),
                               ("effort", s.effort)):
                bad = ~np.isfinite(arr)
                if bad.any():
                    i = int(np.argmax(bad))
                    raise SampleRejected("non_finite",
                                         f"{label} of joint {s.names[i]!r} is {arr[i]!r}")
        if not math.isfinite(s.time):
            raise SampleRejected("non_finite", f"stamp is {s.time!r}")
        if self.last_time is not None:
            if s.time < self.last_time:
                raise SampleRejected(
                    "time_backwards",
                    f"stamp {s.time:.6f} s is older than the previous {self.last_time:.6f} s")
            if s.time == self.last_time:
                raise SampleRejected("duplicate_time", f"stamp {s.time:.6f} s repeats")
        self.last_time = s.time


@dataclass(frozen=True)
class SampleBlock:
    """Consecutive joint-space samples with the same joint names (k of them, n joints), as a
    recording holds them: what :meth:`~interaction_estimator.core.pipeline.Pipeline.process_block`
    takes. ``sample(i)`` is the i-th as a :class:`Sample` (its arrays are views of the rows).

    time (k,) stamps, s; position, velocity, effort (k, n) rad or m, rad/s or m/s, N·m or N;
    stamp_from_receive (k,) bool.
    """

    time: np.ndarray
    names: tuple[str, ...]
    position: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray
    stamp_from_receive: np.ndarray

    def __len__(self) -> int:
        return len(self.time)

    def sample(self, i: int) -> Sample:
        return Sample(float(self.time[i]), self.names, self.position[i], self.velocity[i],
                      self.effort[i], bool(self.stamp_from_receive[i]))

    @staticmethod
    def of(sample: Sample) -> SampleBlock:
        """A block of one sample (arrays of any length: the Pipeline checks them)."""
        return SampleBlock(np.array([sample.time], dtype=float), sample.names,
                           np.asarray(sample.position)[None], np.asarray(sample.velocity)[None],
                           np.asarray(sample.effort)[None],
                           np.array([sample.stamp_from_receive]))
