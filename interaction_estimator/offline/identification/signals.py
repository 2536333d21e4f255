"""Free-motion samples made ready for the regressor: model joint order, even time steps,
smoothed, accelerations by a smoothing differentiator, thinned.

Joint accelerations are never taken by double (or single) differencing of noisy signals: a
Savitzky-Golay filter (Savitzky and Golay, Analytical Chemistry 36(8), 1964;
``scipy.signal.savgol_filter``, cubic, zero phase, so no lag offline) smooths positions,
velocities and efforts and differentiates the velocity, or the positions twice, per joint
whichever the measured noise makes the more accurate (:func:`_derivatives`). All signals of a
row go through the same filter, so that the model sees consistently filtered data (the common
practice of filtering torques and states alike before identification, e.g. Gautier and Poignet,
"Extended Kalman filtering and weighted least squares dynamic identification of robot", Control
Engineering Practice 9(12), 2001). After filtering, every ``m``-th sample is kept (the filter
has removed what lies above a small fraction of the sample rate); the ends of each run, where
the filter extrapolates, are dropped.

A run is a stretch of consecutive, finite samples; runs split at gaps longer than
:data:`GAP_FACTOR` median intervals. Timestamps of real topics jitter: a run whose intervals
spread by more than :data:`JITTER_TOLERANCE` is interpolated (linearly) onto an even grid at its
median interval first. Continuous joints' angles are unwrapped before filtering.
"""
from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy.signal import savgol_coeffs, savgol_filter

from ...core.model import RobotModel
from ...core.samples import Sample

DEFAULT_WINDOW = 0.05       # s, Savitzky-Golay window (cubic): -3 dB near 25 Hz at 1 kHz
POLYORDER = 3
THIN_DIVISOR = 8            # keep every (window samples / 8)-th filtered sample
GAP_FACTOR = 3.0            # a gap longer than this many median intervals ends a run
JITTER_TOLERANCE = 0.05     # relative spread of the intervals above which a run is resampled


@dataclass
class RawRun:
    """Consecutive samples of one bag in model joint order: time (k,) s, angles (k, nv) rad or m
    (one per joint, JointState convention), velocity (k, nv), effort (k, nv) N·m or N."""

    bag: int
    time: np.ndarray
    angles: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray


@dataclass
class MotionData:
    """Filtered, thinned free-motion samples (N of them): time s, angles, velocity,
    acceleration (rad/s² or m/s², from the smoothing differentiator), effort, bag and run
    indices (N,). counts: samples read, used, refused (non-finite, unknown names) and runs
    dropped as too short."""

    time: np.ndarray
    angles: np.ndarray
    velocity: np.ndarray
    acceleration: np.ndarray
    effort: np.ndarray
    bag: np.ndarray
    run: np.ndarray
    window: float
    thinning: int
    counts: dict[str, int] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.time)

    def duration(self) -> float:
        """s of motion represented (thinned samples x their spacing)."""
        total = 0.0
        for r in np.unique(self.run):
            t = self.time[self.run == r]
            if len(t) > 1:
                total += float(t[-1] - t[0]) + float(np.median(np.diff(t)))
        return total


def runs_from_samples(samples: Sequence[Sample], robot: RobotModel, bag: int,
                      keep: np.ndarray | None = None) -> tuple[list[RawRun], dict[str, int]]:
    """Split ``samples`` (those with ``keep`` True) into runs of finite samples in model order.
    Samples whose names lack model joints, or with a non-finite value, are refused and counted;
    a refused sample ends a run."""
    counts = {"read": 0, "not_finite": 0, "unknown_joints": 0}
    runs: list[RawRun] = []
    current: list[tuple[float, np.ndarray, np.ndarray, np.ndarray]] = []

    def close() -> None:
        if len(current) >= 2:
            t = np.array([c[0] for c in current])
            runs.append(RawRun(bag, t, np.array([c[1] for c in current]),
                               np.array([c[2] for c in current]),
                               np.array([c[3] for c in current])))
        current.clear()

    for k, s in enumerate(samples):
        if keep is not None and not keep[k]:
            close()
            continue
        counts["read"] += 1
        try:
            src = robot.joint_map(s.names).source
        except Exception:
            counts["unknown_joints"] += 1
            close()
            continue
        a, v, e = s.position[src], s.velocity[src], s.effort[src]
        if not (math.isfinite(s.time) and np.all(np.isfinite(a)) and np.all(np.isfinite(v))
                and np.all(np.isfinite(e))):
            counts["not_finite"] += 1
            close()
            continue
        current.append((float(s.time), np.array(a, float), np.array(v, float),
                        np.array(e, float)))
    close()
    return runs, counts


def _split_gaps(run: RawRun) -> list[RawRun]:
    dt = np.diff(run.time)
    if not len(dt):
        return []
    med = float(np.median(dt))
    cut = np.flatnonzero((dt > GAP_FACTOR * med) | (dt <= 0)) + 1
    out = []
    for a, b in zip(np.r_[0, cut], np.r_[cut, len(run.time)]):
        if b - a >= 2:
            out.append(RawRun(run.bag, run.time[a:b], run.angles[a:b], run.velocity[a:b],
                              run.effort[a:b]))
    return out


def _even(run: RawRun) -> tuple[np.ndarray, ...]:
    """(time, angles, velocity, effort) on an even grid at the run's median interval."""
    dt = np.diff(run.time)
    med = float(np.median(dt))
    if float(np.max(np.abs(dt - med))) <= JITTER_TOLERANCE * med:
        return run.time, run.angles, run.velocity, run.effort
    t = run.time[0] + med * np.arange(int(math.floor((run.time[-1] - run.time[0]) / med)) + 1)

    def interp(x: np.ndarray) -> np.ndarray:
        return np.column_stack([np.interp(t, run.time, x[:, j]) for j in range(x.shape[1])])
    return t, interp(run.angles), interp(run.velocity), interp(run.effort)


def white_noise_std(x: np.ndarray) -> np.ndarray:
    """Noise std (per column) of a signal smooth over three samples, from its second
    differences: var(d2) = 6 sigma^2 for white noise (Rice, Ann. Statist. 1984). RMS, not a
    robust scale: quantized signals (encoder counts) have mostly zero differences, whose
    median would say "no noise"."""
    d = np.diff(x, n=2, axis=0)
    return np.sqrt(np.mean(d * d, axis=0) / 6.0) if len(d) else np.zeros(x.shape[1])


def _derivatives(ang: np.ndarray, vel: np.ndarray, n: int, dt: float
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Smoothed velocity and acceleration per joint, each from the measured velocity or from
    the positions, whichever the noise makes the more accurate: the white-noise level of each
    signal (:func:`white_noise_std`) times the norm of the Savitzky-Golay coefficients that
    turn it into the derivative (the noise gain). Encoders with fine counts give accelerations
    far better from positions; velocities that are themselves differenced counts are noisy.
    Returns (velocity, acceleration, from_positions (nv,) bool: the acceleration's source)."""
    gains = {(src, d): float(np.linalg.norm(savgol_coeffs(n, POLYORDER, deriv=d, delta=dt)))
             for src, d in (("q", 1), ("q", 2), ("v", 0), ("v", 1))}
    sq, sv = white_noise_std(ang), white_noise_std(vel)
    v_pos = sq * gains[("q", 1)] < sv * gains[("v", 0)]
    a_pos = sq * gains[("q", 2)] < sv * gains[("v", 1)]
    v = savgol_filter(vel, n, POLYORDER, axis=0)
    a = savgol_filter(vel, n, POLYORDER, deriv=1, delta=dt, axis=0)
    if v_pos.any():
        v[:, v_pos] = savgol_filter(ang[:, v_pos], n, POLYORDER, deriv=1, delta=dt, axis=0)
    if a_pos.any():
        a[:, a_pos] = savgol_filter(ang[:, a_pos], n, POLYORDER, deriv=2, delta=dt, axis=0)
    return v, a, a_pos


def prepare(runs: Iterable[RawRun], robot: RobotModel, window: float = DEFAULT_WINDOW,
            counts: dict[str, int] | None = None) -> MotionData:
    """Filter, differentiate and thin the runs (see the module text). ``window`` s is the
    Savitzky-Golay window (at least POLYORDER + 2 samples)."""
    counts = dict(counts or {})
    counts.setdefault("too_short_runs", 0)
    circle = np.array([j in robot.continuous_joints for j in robot.joint_names])
    out: dict[str, list[np.ndarray]] = {k: [] for k in ("t", "q", "v", "a", "e", "b", "r")}
    thinning = 1
    n_run = 0
    for raw in runs:
        for run in _split_gaps(raw):
            t, ang, vel, eff = _even(run)
            dt = float(np.median(np.diff(t)))
            n = max(POLYORDER + 2, int(round(window / dt)))
            n += 1 - n % 2                      # odd
            if len(t) < 2 * n:
                counts["too_short_runs"] += 1
                continue
            if circle.any():
                ang = ang.copy()
                ang[:, circle] = np.unwrap(ang[:, circle], axis=0)
            q = savgol_filter(ang, n, POLYORDER, axis=0)
            e = savgol_filter(eff, n, POLYORDER, axis=0)
            v, a, from_pos = _derivatives(ang, vel, n, dt)
            counts["from_positions"] = counts.get("from_positions", 0) + int(from_pos.sum())
            counts["from_velocities"] = counts.get("from_velocities", 0) + int((~from_pos).sum())
            thinning = max(1, n // THIN_DIVISOR)
            keep = slice(n // 2, len(t) - n // 2, thinning)
            k = len(t[keep])
            for key, x in (("t", t), ("q", q), ("v", v), ("a", a), ("e", e)):
                out[key].append(x[keep])
            out["b"].append(np.full(k, run.bag))
            out["r"].append(np.full(k, n_run))
            n_run += 1
    if not out["t"]:
        nv = robot.nv
        empty = np.zeros((0, nv))
        return MotionData(np.zeros(0), empty, empty, empty, empty, np.zeros(0, int),
                          np.zeros(0, int), window, thinning, counts)
    data = MotionData(*(np.concatenate(out[k]) for k in ("t", "q", "v", "a", "e")),
                      np.concatenate(out["b"]).astype(int), np.concatenate(out["r"]).astype(int),
                      window, thinning, counts)
    data.counts["used"] = len(data)
    return data


def exact(time: np.ndarray, angles: np.ndarray, velocity: np.ndarray, acceleration: np.ndarray,
          effort: np.ndarray, bag: int = 0) -> MotionData:
    """MotionData from signals already known exactly (a simulator's own accelerations): no
    filtering, no thinning. For checks of the identification against an outside engine."""
    n = len(time)
    return MotionData(np.asarray(time, float), np.asarray(angles, float),
                      np.asarray(velocity, float), np.asarray(acceleration, float),
                      np.asarray(effort, float), np.full(n, bag), np.zeros(n, int), 0.0, 1,
                      {"read": n, "used": n})
