"""Commissioning from recorded data: torque bias, joint friction and noise levels, into a parameter file.

``interaction-estimator tune BAG [BAG ...] --out FILE [--params BASE] [--urdf FILE] [--report DIR]``
(or ``python -m interaction_estimator.offline.tune ...``) runs the recorded joint states through the
package's own :class:`~.pipeline.Pipeline` and identifies, from the data:

1. **Segments.** Free motion and contact, as the Pipeline's contact monitor sees them
   (``Estimate.phase``). The monitor needs bias and friction to be right, so the segmentation is
   bootstrapped: the first pass takes only the start-up phase (``bias.startup`` s, which the
   Pipeline itself assumes is free motion), then passes with the identified values re-segment until
   the free-motion samples no longer change (at most :data:`MAX_SEGMENTATION_PASSES`). Samples within
   :func:`margin` s of contact, of an observer restart or of the start are left out. A bag in
   which the monitor finds no contact at all (a commissioning run of free motion, such as the
   simulator's ``commissioning`` scenario, which moves every joint both ways) serves bias,
   friction and sensor noise only, and the account of the segments says so; at least one bag
   must have contact, for step 4.
2. **Bias and friction** per joint from free motion. The observer residual computed without
   bias and friction is, in free motion, ``r_raw = O(-(b + f_v v + f_c tanh(v/eps)))`` where ``O``
   is the observer itself, a linear filter. The regressors are therefore made by running a copy of
   the Pipeline's own observer (same form, gain and noise settings, fed the recorded mass
   matrices) on the signals ``1``, ``v`` and ``tanh(v/eps)``; the fit is then exact whatever the
   observer's lag. Least squares (``scipy.optimize.lsq_linear``, friction >= 0) gives one bias per
   bag (sensor offsets drift between sessions) and one pair of friction coefficients per joint,
   with 95 % intervals from a Newey-West covariance (Newey and West, Econometrica 1987), since the
   residual is serially correlated. A joint that did not move both ways at more than
   :data:`MOVING_FACTOR` ``x eps`` keeps the base file's friction, with a warning.
3. **Sensor noise.** Effort and velocity noise standard deviations per joint, by the
   difference-based estimator on the second differences of free-motion samples (Rice, Ann.
   Statist. 1984; Gasser, Sroka and Jennen-Steinmetz, Biometrika 1986), with the median absolute
   deviation for robustness. They set ``observer.effort_noise`` and ``observer.velocity_noise``
   (medians over joints). The residual left by the fit is compared with what this noise explains
   when passed through the same observer (two unit-noise probes run alongside the regressors): a
   residual far above it means the URDF does not describe the recorded robot, or the "free" motion
   was not free, and the tuning stops.
4. **Environment-filter noise** from contact. The filter's inputs (regressor rows and forces)
   are recorded from the last Pipeline pass and the package's own
   :class:`~.environment.EnvironmentFilter` is re-run on them with noise adaptation fixed (see
   :func:`fit_filter_noise`). Its innovations are strongly correlated at the sample rate (the
   force comes through the momentum observer, the acceleration through a smoothing
   differentiator), so a white-noise likelihood at full rate would let the parameters chase
   that correlated error. Process noise is therefore the maximum of the innovation likelihood
   ``-1/2 sum(log S + y^2/S)`` (Bar-Shalom, Li and Kirubarajan 2001, sec. 5.4) of the filter
   run on every m-th update, m the lag at which the innovations decorrelate, with 95 %
   likelihood-ratio intervals; measurement noise is matched at full rate so that the mean NIS
   is 1 (covariance matching, Mehra, IEEE TAC 1972), with an interval from the Newey-West
   standard error of that mean. The impact at each contact onset (:func:`onset_time`) counts in
   neither. Values the data cannot support are refused: a parameter never excited keeps the
   base process noise; one whose likelihood is flat towards zero keeps the base value when the
   data accept it, otherwise gets the largest value they accept. ``filter.noise_adaptation``
   is written as ``fixed``, since the measurement noise is now known.

The result is written as a ROS 2 parameter YAML (``interaction_estimator:`` /
``ros__parameters:``): the base file's own settings, the settings every bag recommends alike, and
the tuned ones, each tuned entry preceded by a comment saying what data it came from and how
sure it is (settings not listed keep their defaults; per-joint lists follow ``joint_names``,
written in the URDF's order). The file is written to a
temporary file beside the target and renamed: on any error nothing is written.
"""
from __future__ import annotations

import argparse
import datetime as _dt
import json
import math
import os
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping, Sequence

import numpy as np

from ..core.environment import PARAMETER_NAMES, PARAMETER_UNITS, EnvironmentFilter
from ..core.model import ModelError
from ..core.observer import KalmanMomentumObserver, MomentumObserver
from ..core.pipeline import Pipeline
from ..core.samples import Sample
from ..core.settings import (NODE_NAME, SPEC_BY_NAME, SPECS, Settings, SettingsError, nest,
                       per_joint)

PROG = "interaction-estimator tune"
EXIT_OK, EXIT_FAILURE, EXIT_USAGE = 0, 1, 2

PHASES = ("learning_bias", "free", "contact")
LEARNING, FREE, CONTACT = 0, 1, 2
# what a bag without contact (a commissioning run) is used for, in every account of it
FREE_ONLY_USE = ("free motion only, used for bias, friction and sensor noise, not for the "
                 "environment filter")
MAX_SEGMENTATION_PASSES = 3     # Pipeline passes after the first, at most
MARGIN_EXTRA = 0.15             # s kept clear of contact and restarts, on top of 5 / gain
MIN_BAG_DURATION = 1.0          # s, shorter bags are refused
MIN_FREE_TIME = 0.5             # s of usable free motion, over all bags
MIN_CONTACT_TIME = 0.5          # s of environment-filter updates, over all bags
MOVING_FACTOR = 5.0             # a joint "moves" above this many friction.smoothing_velocity
MIN_MOVING_TIME = 0.1           # s of motion needed in each direction to identify friction
MIN_EXCITED_FRACTION = 0.05     # of the contact updates, for a parameter's process noise
MISMATCH_RATIO = 4.0            # free-motion residual / noise-explained level that stops tuning
MISMATCH_FLOOR = 0.1            # N·m (N): ... and by at least this much
HELD_OUT_FRACTION = 0.3         # of the contact time of a single bag, held out for the report
Z95 = 1.959963984540054         # two-sided 95 % normal quantile
CHI2_1_95 = 3.841458820694124   # chi-square(1) 95 % quantile (likelihood-ratio test)
SEARCH_DECADES = 4.0            # noise parameters searched within base x 10^(+-4)
WHITE_CORRELATION = 0.2         # innovations this little correlated count as white
MAX_DECIMATION = 200            # updates, at most, between two kept by the decimated fit
MIN_DECIMATED_UPDATES = 60      # updates the decimated fit keeps, at least
DECIMATION_OFFSETS = 3          # decimated series (different offsets) averaged
SEARCH_SWEEPS = 2               # coordinate sweeps of the likelihood search
MATCH_TOLERANCE = 0.01          # |log(mean NIS)| at which the measurement noise is matched
REPORT_NAME = "tuning_report.html"


class TuneError(ValueError):
    """The data cannot be used for tuning as asked; the message says what is missing."""


# ============================================================================================
# input: recordings


@dataclass
class Reference:
    """A reference force series (for the report only): time (M,) s, force (M, 3) N, world."""

    source: str
    time: np.ndarray
    force: np.ndarray


@dataclass
class Recording:
    """One bag (or simulated run) in memory.

    name: label used in messages (the bag path). samples: joint states in recorded order.
    urdf: the robot description recorded with it, or None. recommended: settings recommended by
    the recording (simulated bags carry them), dotted names. truth: ground-truth object parameters
    {mass kg, damping N·s/m, stiffness N/m, static_force N} or None (none known, or no object in
    the recording; report only).
    reference: true force series or None (report only).
    """

    name: str
    samples: list[Sample]
    urdf: str | None = None
    recommended: dict[str, Any] = field(default_factory=dict)
    truth: dict[str, float] | None = None
    reference: Reference | None = None

    @property
    def duration(self) -> float:
        """s from the first to the last sample."""
        return self.samples[-1].time - self.samples[0].time if len(self.samples) > 1 else 0.0


def recording_from_run(run: Any, name: str | None = None) -> Recording:
    """A :class:`~.scenarios.simulator.SimulatedRun` as a Recording (no bag file needed)."""
    names = tuple(run.joint_names)
    samples = [Sample(float(t), names, run.position[k], run.velocity[k], run.effort[k])
               for k, t in enumerate(run.time)]
    truth = ({p: float(run.truth[p]) for p in PARAMETER_NAMES}
             if run.truth.get("has_object", True) else None)     # free motion only: no object
    ref = Reference("simulation ground truth", np.asarray(run.time, float),
                    np.asarray(run.true_force, float))
    return Recording(name or f"simulated {run.scenario} (seed {run.truth.get('seed')})",
                     samples, run.urdf, dict(run.settings), truth, ref)


def read_bag(path: Path, topics: Sequence[str] = ()) -> Recording:
    """Read a rosbag2 bag through :class:`~.bag.RecordedBag` (raises BagError on bad bags)."""
    from ..io.bag import RecordedBag, TopicNames
    with RecordedBag(path, TopicNames().with_overrides(list(topics))) as bag:
        samples = list(bag.samples())
        urdf = bag.urdf()
        truth = bag.truth()
        ref = bag.reference()
    recommended = truth.settings if truth is not None else {}
    params = (dict(truth.parameters) if truth is not None and truth.parameters is not None
              else None)                                         # None: no object recorded
    reference = (Reference(f"bag topic {ref.topic}", ref.time, ref.force)
                 if ref is not None else None)
    if not samples:
        raise TuneError(f"bag {str(path)!r} holds no joint states; expected a recording of the "
                        "robot moving freely and then in contact")
    return Recording(str(path), samples, urdf, dict(recommended), params, reference)


# ============================================================================================
# taps on the Pipeline's own stages (they read what it exposes; nothing of it is changed)


class _ObserverTap:
    """Runs a tiled copy of the Pipeline's observer on the regressor signals and two unit-noise
    probes, stepped after each sample the Pipeline used, with that sample's stamp and M(q).

    The copy holds five blocks of nv channels: the signals 1, v, tanh(v/eps) (columns of the
    bias/friction regression), unit velocity noise through M (momentum probe) and unit effort
    noise (beta probe). It is fed a block-diagonal mass matrix, so every block sees the same
    M(q) as the real observer: by linearity its outputs are exactly the observer's response to
    those signals.
    """

    BLOCKS = 5

    def __init__(self, inner: Any, nv: int, eps: float, seed: int = 7):
        self.nv, self.eps = nv, eps
        gain = np.tile(np.asarray(inner.gain, float), self.BLOCKS)
        if isinstance(inner, KalmanMomentumObserver):
            self.copy: Any = KalmanMomentumObserver(gain, inner.velocity_noise,
                                                    inner.effort_noise, inner.max_gap,
                                                    inner.settle_steps)
        else:
            self.copy = MomentumObserver(gain, inner.max_gap)
        self.rng = np.random.default_rng(seed)
        self.velocity = np.zeros(nv)
        self.raw = np.zeros(nv)
        self.columns = np.zeros((self.BLOCKS, nv))
        self._eye = np.eye(self.BLOCKS)

    def step(self, t: float, raw: np.ndarray, mass_matrix: np.ndarray) -> None:
        """After a sample the Pipeline used: raw (nv,) N·m its observer's output without bias,
        mass_matrix (nv, nv) M(q); :attr:`velocity` (nv,) rad/s is that sample's."""
        nv, v = self.nv, self.velocity
        noise_v = self.rng.standard_normal(nv)
        noise_tau = self.rng.standard_normal(nv)
        big_p = np.zeros(self.BLOCKS * nv)
        big_p[3 * nv:4 * nv] = mass_matrix @ noise_v
        big_beta = np.concatenate([np.ones(nv), v, np.tanh(v / self.eps), np.zeros(nv),
                                   noise_tau])
        out, _ = self.copy.step(t, big_p, big_beta, np.kron(self._eye, mass_matrix))
        self.raw = raw
        self.columns = np.asarray(out, float).reshape(self.BLOCKS, nv)

    def reset(self) -> None:
        self.copy.reset()


@dataclass
class FilterTape:
    """The environment filter's inputs from one pass over one bag, in order.

    time (M,) s, rows (M, 4) [x'' m/s^2, x' m/s, x m, 1], force (M,) N, excited (M, 4) bool
    (as the filter judged it), inflations: (index of the next update, reason)."""

    time: list[float] = field(default_factory=list)
    rows: list[np.ndarray] = field(default_factory=list)
    force: list[float] = field(default_factory=list)
    excited: list[np.ndarray] = field(default_factory=list)
    inflations: list[tuple[int, str]] = field(default_factory=list)

    def add_update(self, t: float, h: np.ndarray, f: float, excited: np.ndarray) -> None:
        self.time.append(float(t))
        self.rows.append(np.array(h, float))
        self.force.append(float(f))
        self.excited.append(np.array(excited, bool))

    def add_inflation(self, reason: str) -> None:
        self.inflations.append((len(self.time), reason))

    def __len__(self) -> int:
        return len(self.time)

    def subset(self, keep_until: float) -> "FilterTape":
        """The updates with t < keep_until s (inflations before them kept)."""
        n = int(np.searchsorted(np.asarray(self.time), keep_until))
        return FilterTape(self.time[:n], self.rows[:n], self.force[:n], self.excited[:n],
                          [(i, r) for i, r in self.inflations if i < n])


# ============================================================================================
# one Pipeline pass


@dataclass
class Trace:
    """What one Pipeline pass over one recording produced, per accepted sample (N of them).

    time (N,) s; phase (N,) codes LEARNING/FREE/CONTACT; restarted (N,) bool; force (N, 3) N;
    force_along (N,) N; parameters, parameter_std (N, 4) SI; nis, nis_average (N,);
    nis_bounds (N, 2); tape: filter inputs. With taps: raw (N, nv) N·m observer output without
    bias; columns (N, 5, nv) observer responses (see :class:`_ObserverTap`); velocity (N, nv)
    rad/s and effort (N, nv) N·m in model joint order. rejected: samples the Pipeline refused.
    """

    time: np.ndarray
    phase: np.ndarray
    restarted: np.ndarray
    force: np.ndarray
    force_along: np.ndarray
    parameters: np.ndarray
    parameter_std: np.ndarray
    nis: np.ndarray
    nis_average: np.ndarray
    nis_bounds: np.ndarray
    tape: FilterTape
    rejected: int
    reject_message: str
    raw: np.ndarray | None = None
    columns: np.ndarray | None = None
    velocity: np.ndarray | None = None
    effort: np.ndarray | None = None


def run_pass(rec: Recording, settings: Settings, urdf: str, taps: bool = False) -> Trace:
    """Feed a recording through a fresh Pipeline, recording the environment filter's inputs
    (and, when ``taps``, the observer's responses). Raises TuneError when no sample fits the
    URDF."""
    pipe = Pipeline(settings, urdf)
    nv = pipe.model.nv
    obs_tap = (_ObserverTap(pipe.observer, nv, settings["friction.smoothing_velocity"])
               if taps else None)
    tape = FilterTape()
    n = len(rec.samples)
    cols = _TraceColumns(n, nv, taps)
    restarts = pipe.observer.restarts
    for sample in rec.samples:
        effort = None
        if obs_tap is not None:
            try:
                _, obs_tap.velocity, effort = pipe.model.joint_map(sample.names).apply(sample)
            except Exception:  # the Pipeline rejects and counts it below
                effort = None
        rejected = pipe.rejects.total
        est = pipe.process(sample)
        if est is None:
            if (obs_tap is not None and pipe.rejects.total > rejected
                    and pipe.rejects.last_reason == "non_finite_output"):
                obs_tap.reset()   # the Pipeline restarted its observer
            continue
        if pipe.last_regained():
            tape.add_inflation("contact regained")
        update = pipe.filter_input()
        if update is not None:
            tape.add_update(*update)
        restarted = pipe.observer.restarts != restarts
        restarts = pipe.observer.restarts
        if obs_tap is not None:
            obs_tap.step(est.time, pipe.last_raw_residual(), pipe.last_mass_matrix())
        cols.add(est, restarted, obs_tap, effort)
    if cols.count == 0:
        raise TuneError(
            f"{rec.name}: none of its {n} joint states could be used with this URDF "
            f"({pipe.rejects.last_message}); expected joint states of the robot the URDF "
            f"describes (joints {list(pipe.model.joint_names)})")
    return cols.trace(tape, pipe.rejects.total, pipe.rejects.last_message)


class _TraceColumns:
    """Pre-allocated per-sample arrays filled during a pass."""

    def __init__(self, n: int, nv: int, taps: bool):
        self.count = 0
        self.time = np.zeros(n)
        self.phase = np.zeros(n, np.int8)
        self.restarted = np.zeros(n, bool)
        self.force = np.zeros((n, 3))
        self.force_along = np.zeros(n)
        self.parameters = np.zeros((n, 4))
        self.parameter_std = np.zeros((n, 4))
        self.nis = np.zeros(n)
        self.nis_average = np.zeros(n)
        self.nis_bounds = np.zeros((n, 2))
        self.taps = taps
        if taps:
            self.raw = np.zeros((n, nv))
            self.columns = np.zeros((n, _ObserverTap.BLOCKS, nv))
            self.velocity = np.zeros((n, nv))
            self.effort = np.zeros((n, nv))

    def add(self, est: Any, restarted: bool, tap: _ObserverTap | None,
            effort: np.ndarray | None) -> None:
        k = self.count
        self.time[k] = est.time
        self.phase[k] = PHASES.index(est.phase)
        self.restarted[k] = restarted
        self.force[k] = est.force
        self.force_along[k] = est.force_along
        self.parameters[k] = est.parameters
        self.parameter_std[k] = est.parameter_std
        self.nis[k] = est.nis
        self.nis_average[k] = est.nis_average
        self.nis_bounds[k] = est.nis_bounds
        if self.taps and tap is not None:
            self.raw[k] = tap.raw
            self.columns[k] = tap.columns
            self.velocity[k] = tap.velocity
            self.effort[k] = effort if effort is not None else np.nan
        self.count = k + 1

    def trace(self, tape: FilterTape, rejected: int, message: str) -> Trace:
        n = self.count
        extra = {}
        if self.taps:
            extra = dict(raw=self.raw[:n], columns=self.columns[:n],
                         velocity=self.velocity[:n], effort=self.effort[:n])
        return Trace(self.time[:n], self.phase[:n], self.restarted[:n], self.force[:n],
                     self.force_along[:n], self.parameters[:n], self.parameter_std[:n],
                     self.nis[:n], self.nis_average[:n], self.nis_bounds[:n], tape, rejected,
                     message, **extra)


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


def onset_time(settings: Settings, joints: Sequence[str]) -> float:
    """Time after a contact onset that the noise fit leaves out, s: the differentiator window
    (``kinematics.window``) plus five observer time constants. It holds the impact, which the
    object model does not describe (its NIS values are tens), while the window fills."""
    gain = min(per_joint(settings, "observer.gain", joints))
    return settings["kinematics.window"] + 5.0 / max(gain, 1e-3)


def steady_mask(tape: "FilterTape", onset: float) -> np.ndarray:
    """Updates (M,) bool at least ``onset`` s after the start of their contact (the first
    update of the bag, and each contact the Pipeline started again)."""
    t = np.asarray(tape.time)
    starts = [0] + [i for i, _ in tape.inflations if i < len(t)]
    keep = np.ones(len(t), bool)
    for i in starts:
        if i < len(t):
            keep &= ~((t >= t[i]) & (t < t[i] + onset))
    return keep


def free_mask(trace: Trace, clear: float, startup_only: bool) -> np.ndarray:
    """Samples usable as free motion (N,) bool: phase learning_bias (and free, unless
    ``startup_only``), at least ``clear`` s from any other sample, restart or the start."""
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


# ============================================================================================
# sensor noise (difference-based)


def difference_noise_std(x: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Noise standard deviation per column of x (N, n) from second differences within the runs of
    ``mask``: for white noise of variance s^2 on a signal smooth over three samples, the second
    difference has variance 6 s^2 (Rice 1984; Gasser et al. 1986). Robust scale: 1.4826 x median
    absolute deviation. NaN for columns with fewer than 10 differences."""
    diffs = [np.diff(x[a:b], n=2, axis=0) for a, b in runs_of(mask) if b - a >= 3]
    if not diffs:
        return np.full(x.shape[1], np.nan)
    d = np.concatenate(diffs)
    if len(d) < 10:
        return np.full(x.shape[1], np.nan)
    med = np.median(d, axis=0)
    mad = np.median(np.abs(d - med), axis=0)
    return 1.482602218505602 * mad / math.sqrt(6.0)


# ============================================================================================
# bias and friction: least squares on the observer residual


@dataclass
class JointFit:
    """Identification of one joint. Units: N·m (N), N·m·s/rad (N·s/m), rad/s (m/s).

    bias (nb,) per bag with bias_ci (nb,) 95 % half-widths; viscous, coulomb with 95 %
    half-widths; friction_identified: from these data (else the base values are kept and
    friction_note says why); residual_std: what the fit leaves; explained_std: what the measured
    sensor noise explains through the observer; effort_noise, velocity_noise: sensor noise;
    moving_time: (s with v > threshold, s with v < -threshold)."""

    name: str
    bias: np.ndarray
    bias_ci: np.ndarray
    viscous: float
    viscous_ci: float
    coulomb: float
    coulomb_ci: float
    friction_identified: bool
    friction_note: str
    residual_std: float
    explained_std: float
    effort_noise: float
    velocity_noise: float
    moving_time: tuple[float, float]
    samples: int


def newey_west_covariance(X: np.ndarray, e: np.ndarray, run_id: np.ndarray,
                          lags: int) -> np.ndarray:
    """Heteroskedasticity and autocorrelation consistent covariance of least-squares
    coefficients (Newey and West, Econometrica 1987; Bartlett weights 1 - l/(L+1)); products
    are taken only within the same run of consecutive samples. X (N, p), e (N,), run_id (N,)."""
    u = X * e[:, None]
    S = u.T @ u
    for lag in range(1, lags + 1):
        same = run_id[lag:] == run_id[:-lag]
        if not same.any():
            break
        G = u[lag:][same].T @ u[:-lag][same]
        S += (1.0 - lag / (lags + 1.0)) * (G + G.T)
    XtX_inv = np.linalg.pinv(X.T @ X)
    return XtX_inv @ S @ XtX_inv


def correlation_lags(e: np.ndarray, run_id: np.ndarray, limit: int) -> int:
    """Newey-West bandwidth: 4 x the first lag at which the residual's autocorrelation (within
    runs) falls below 1/e, between 5 and ``limit`` samples."""
    var = float(e @ e) / max(len(e), 1)
    if var <= 0:
        return 5
    for lag in range(1, limit + 1):
        same = run_id[lag:] == run_id[:-lag]
        if same.sum() < 10:
            return min(max(4 * lag, 5), limit)
        rho = float(e[lag:][same] @ e[:-lag][same]) / (same.sum() * var)
        if rho < 1.0 / math.e:
            return min(max(4 * lag, 5), limit)
    return limit


@dataclass
class FreeData:
    """Free-motion samples of all bags, pooled: bag (K,), run (K,) ids of consecutive runs,
    raw (K, nv), columns (K, 5, nv), velocity (K, nv), dt (K,) s."""

    bag: np.ndarray
    run: np.ndarray
    raw: np.ndarray
    columns: np.ndarray
    velocity: np.ndarray
    dt: np.ndarray


def pool_free(taps: Sequence[Trace], masks: Sequence[np.ndarray]) -> FreeData:
    bags, runs, raw, cols, vel, dts = [], [], [], [], [], []
    run_counter = 0
    for b, (tr, m) in enumerate(zip(taps, masks)):
        dt_all = np.diff(tr.time, prepend=tr.time[0])
        for a, z in runs_of(m):
            k = z - a
            bags.append(np.full(k, b))
            runs.append(np.full(k, run_counter))
            run_counter += 1
            raw.append(tr.raw[a:z])
            cols.append(tr.columns[a:z])
            vel.append(tr.velocity[a:z])
            dts.append(dt_all[a:z])
    if not bags:
        raise TuneError("no free-motion samples")  # callers check first; a defect otherwise
    return FreeData(np.concatenate(bags), np.concatenate(runs), np.concatenate(raw),
                    np.concatenate(cols), np.concatenate(vel), np.concatenate(dts))


def _friction_excitation(v: np.ndarray, dt: np.ndarray, threshold: float) -> tuple[float, float]:
    return float(dt[v > threshold].sum()), float(dt[v < -threshold].sum())


def _least_squares(X: np.ndarray, y: np.ndarray, lower: np.ndarray, run_id: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Bounded linear least squares (scipy.optimize.lsq_linear, BVLS) on the columns of X that
    are not all zero; returns (coefficients (p,) with nan for empty columns, 95 % half-widths
    (p,) from the Newey-West covariance, residual (K,))."""
    from scipy.optimize import lsq_linear

    present = X.any(axis=0)
    Xp, lo = X[:, present], lower[present]
    theta = np.full(X.shape[1], np.nan)
    half = np.full(X.shape[1], np.nan)
    if not present.any():
        return theta, half, y.copy()
    sol = lsq_linear(Xp, y, bounds=(lo, np.full(len(lo), np.inf)), method="bvls")
    e = y - Xp @ sol.x
    cov = newey_west_covariance(Xp, e, run_id, correlation_lags(e, run_id, 2000))
    theta[present] = sol.x
    half[present] = Z95 * np.sqrt(np.maximum(np.diag(cov), 0.0))
    return theta, half, e


def fit_joint(j: int, name: str, data: FreeData, n_bags: int, motor: bool,
              base_friction: tuple[float, float], threshold: float,
              noise: tuple[float, float]) -> JointFit:
    """Bias per bag and (motor side, when the joint moved both ways) friction of joint j.

    Regression ``r_raw = b O(1) + f_v O(v) + f_c O(tanh(v/eps))`` (O: the observer, see
    :class:`_ObserverTap`), friction >= 0. A joint whose friction cannot be identified keeps
    the base friction and gets its bias alone; the residual level used to check the model
    always comes from the fit with friction terms (motor side), so that friction the data
    cannot pin down is not mistaken for a wrong model."""
    cols = data.columns[:, :, j]           # (K, 5): O(1), O(v), O(tanh), probe_v, probe_tau
    fv0, fc0 = base_friction
    y = data.raw[:, j] + fv0 * cols[:, 1] + fc0 * cols[:, 2]   # residual with no friction removed
    moving = _friction_excitation(data.velocity[:, j], data.dt, threshold)
    identify = motor and min(moving) >= MIN_MOVING_TIME
    note = ""
    if not motor:
        note = "link-side efforts: no friction to identify"
    elif not identify:
        note = (f"moved only {moving[0]:.2f} s forward and {moving[1]:.2f} s backward faster "
                f"than {threshold:g}; needs {MIN_MOVING_TIME:g} s each way")
    onehot = (data.bag[:, None] == np.arange(n_bags)[None, :]).astype(float)
    X_bias = onehot * cols[:, 0:1]
    free_bias = np.full(n_bags, -np.inf)
    if motor:
        X = np.column_stack([X_bias, cols[:, 1], cols[:, 2]])
        theta, half, e = _least_squares(X, y, np.r_[free_bias, 0.0, 0.0], data.run)
    else:
        theta, half, e = _least_squares(X_bias, y, free_bias, data.run)
    residual = float(np.std(e))
    if identify:
        viscous, coulomb = theta[n_bags], theta[n_bags + 1]
        v_ci, c_ci = half[n_bags], half[n_bags + 1]
        bias, bias_ci = theta[:n_bags], half[:n_bags]
    else:
        y_kept = y - fv0 * cols[:, 1] - fc0 * cols[:, 2]       # keep the base friction
        bias, bias_ci, _ = _least_squares(X_bias, y_kept, free_bias, data.run)
        viscous, coulomb, v_ci, c_ci = fv0, fc0, math.nan, math.nan
    sigma_tau, sigma_v = noise
    explained = math.sqrt(float(np.mean(sigma_v ** 2 * cols[:, 3] ** 2
                                        + sigma_tau ** 2 * cols[:, 4] ** 2)))
    return JointFit(name, bias, bias_ci, float(viscous), float(v_ci), float(coulomb),
                    float(c_ci), identify, note, residual, explained, sigma_tau, sigma_v,
                    moving, int(len(y)))


@dataclass
class Identification:
    """Bias, friction and noise of every joint (model order) and where they came from."""

    joints: list[JointFit]
    effort_noise: float        # N·m, median over joints
    velocity_noise: float      # rad/s, median over joints
    free_segments: list[Segment]
    free_time: float           # s, over all bags

    def bias_of_bag(self, b: int) -> list[float]:
        return [0.0 if not math.isfinite(j.bias[b]) else float(j.bias[b]) for j in self.joints]


def identify(taps: Sequence[Trace], masks: Sequence[np.ndarray], base: Settings,
             joints: Sequence[str]) -> Identification:
    """Bias/friction/noise from the free-motion samples ``masks`` of the tapped traces."""
    data = pool_free(taps, masks)
    motor = base["effort_side"] == "motor"
    eps = base["friction.smoothing_velocity"]
    fv0 = per_joint(base, "friction.viscous", joints)
    fc0 = per_joint(base, "friction.coulomb", joints)
    eff = _pooled_noise([t.effort for t in taps], masks)
    vel = _pooled_noise([t.velocity for t in taps], masks)
    sigma_tau = float(np.nanmedian(eff))
    sigma_v = float(np.nanmedian(vel))
    threshold = max(MOVING_FACTOR * eps, 5.0 * sigma_v)
    fits = [fit_joint(j, name, data, len(taps), motor, (fv0[j], fc0[j]), threshold,
                      (float(eff[j]), float(vel[j])))
            for j, name in enumerate(joints)]
    segs = [s for b, (t, m) in enumerate(zip(taps, masks)) for s in segments_of(b, t.time, m,
                                                                                "free")]
    return Identification(fits, sigma_tau, sigma_v, segs, float(data.dt.sum()))


def _pooled_noise(signals: Sequence[np.ndarray], masks: Sequence[np.ndarray]) -> np.ndarray:
    """Difference-based noise per joint over the free runs of all bags (pooled differences)."""
    x = np.concatenate([s for s in signals])
    m = np.concatenate([np.r_[mk[:-1], False] if len(mk) else mk for mk in masks])
    return difference_noise_std(x, m)


def check_model_fit(ident: Identification, contact_found: bool = True) -> None:
    """Stop when the free-motion residual is far above what the sensor noise explains.

    contact_found: whether the contact monitor found any contact; when it found none, the
    likeliest cause is a bag that starts in contact (the start-up phase then learns the contact
    torque as bias and nothing looks like contact afterwards), and the message says so."""
    bad = [j for j in ident.joints
           if j.residual_std > MISMATCH_RATIO * j.explained_std + MISMATCH_FLOOR]
    if not bad:
        return
    listing = "; ".join(f"{j.name}: {j.residual_std:.3g} left, noise explains "
                        f"{j.explained_std:.3g}" for j in bad)
    spans = ", ".join(f"bag {s.bag + 1} {s.start:.2f}-{s.end:.2f} s"
                      for s in ident.free_segments[:6])
    if not contact_found:
        raise TuneError(
            "no free motion found: the contact monitor saw no contact at all, yet the motion it "
            f"took as free ({spans}) leaves a residual (N·m or N, RMS) more than "
            f"{MISMATCH_RATIO:g} times what the sensor noise explains ({listing}). The bags "
            "probably start in contact (the start-up phase then learns the contact force as "
            "bias), or the URDF does not describe the recorded robot; expected bags that start "
            f"with at least {MIN_FREE_TIME:g} s of the robot moving without touching anything")
    raise TuneError(
        "after removing bias and friction, the free-motion residual (N·m or N, RMS) is more "
        f"than {MISMATCH_RATIO:g} times what the measured sensor noise explains on "
        f"{len(bad)} joint(s) ({listing}). Either the URDF does not describe the robot that "
        f"recorded the bags (masses, inertias, joint list), or the robot was not moving freely "
        f"in the segments taken as free motion ({spans}); expected the recorded robot's URDF "
        "and bags that start with free motion")


# ============================================================================================
# environment-filter noise: decimated maximum likelihood and covariance matching


@dataclass
class NoiseFit:
    """Environment-filter noise identified from contact.

    measurement_std N with its 95 % interval (from the sampling error of the mean NIS);
    process_std (4,) [kg/√s, N·s/m/√s, N/m/√s, N/√s] with 95 % intervals (4, 2) (likelihood
    ratio); tuned (4,) bool: changed from the base; notes (4,): why a value was kept or bounded;
    excited_fraction (4,); updates: filter updates used; contact_time s; decimation: every
    how many updates the likelihood used; innovation_correlation: lag-1 autocorrelation of the
    full-rate innovations at the base values; nis_base, nis_tuned: mean NIS over the updates at
    the base and at the tuned values (fixed noise); evaluations: filter re-runs made."""

    measurement_std: float
    measurement_interval: tuple[float, float]
    process_std: np.ndarray
    process_interval: np.ndarray
    tuned: np.ndarray
    notes: list[str]
    excited_fraction: np.ndarray
    updates: int
    contact_time: float
    decimation: int
    innovation_correlation: float
    nis_base: float
    nis_tuned: float
    evaluations: int
    per_bag_std: list[float] = field(default_factory=list)
    onset: float = 0.0


@dataclass
class _FilterRun:
    """Per-update results of a re-run: innovation y N, its variance S N^2, NIS, bag index,
    excited (M, 4) bool as the filter judged it."""

    innovation: np.ndarray
    variance: np.ndarray
    nis: np.ndarray
    bag: np.ndarray
    excited: np.ndarray

    def nll_of(self, mask: np.ndarray) -> float:
        """Negative log-likelihood 1/2 sum(log S + y^2/S) (Gaussian innovations) over the
        updates selected by ``mask`` (M,) bool."""
        return 0.5 * float(np.sum((np.log(self.variance) + self.nis)[mask]))

    def subset(self, mask: np.ndarray) -> "_FilterRun":
        return _FilterRun(self.innovation[mask], self.variance[mask], self.nis[mask],
                          self.bag[mask], self.excited[mask])


class FilterPool:
    """Reusable EnvironmentFilter objects: building one computes its chi-square table, which
    costs more than a short re-run; :meth:`get` applies new settings and resets instead."""

    def __init__(self) -> None:
        self._filters: dict[int, EnvironmentFilter] = {}

    def get(self, slot: int, settings: Settings) -> EnvironmentFilter:
        filt = self._filters.get(slot)
        if filt is None:
            filt = self._filters[slot] = EnvironmentFilter(settings)
        else:
            filt.update_settings(settings)
            filt.reset("tuning re-run")
        return filt


def replay_filter(tapes: Sequence[FilterTape], settings: Settings,
                  pool: FilterPool | None = None, slot: int = 0) -> _FilterRun:
    """Re-run the package's EnvironmentFilter on recorded inputs: a filter in its start state per
    bag, as the Pipeline starts one, inflations where the Pipeline made them."""
    pool = pool or FilterPool()
    ys, ss, bags, exc = [], [], [], []
    for b, tape in enumerate(tapes):
        filt = pool.get(slot * 1000 + b, settings)
        infl: dict[int, list[str]] = {}
        for i, reason in tape.inflations:
            infl.setdefault(i, []).append(reason)
        for k in range(len(tape)):
            for reason in infl.get(k, ()):
                filt.inflate(reason)
            step = filt.update(tape.time[k], tape.rows[k], tape.force[k])
            ys.append(step.innovation)
            ss.append(step.innovation_var)
            bags.append(b)
            exc.append(step.excited)
    y, s = np.array(ys), np.array(ss)
    return _FilterRun(y, s, y * y / s, np.array(bags), np.array(exc, bool).reshape(-1, 4))


def decimate(tape: FilterTape, every: int, offset: int) -> FilterTape:
    """Every ``every``-th update from ``offset`` (the filter then steps over every-times longer
    intervals; inflations move to the next kept update)."""
    idx = np.arange(offset, len(tape), every)
    pos = [(int(np.searchsorted(idx, i)), r) for i, r in tape.inflations]
    return FilterTape([tape.time[i] for i in idx], [tape.rows[i] for i in idx],
                      [tape.force[i] for i in idx], [tape.excited[i] for i in idx], pos)


def innovation_autocorrelation(run: _FilterRun, lags: int) -> np.ndarray:
    """Autocorrelation (lags + 1,) of the normalized innovations y/sqrt(S), within bags."""
    z = run.innovation / np.sqrt(run.variance)
    out = np.ones(lags + 1)
    var = float(np.mean(z * z))
    for lag in range(1, lags + 1):
        same = run.bag[lag:] == run.bag[:-lag]
        if same.sum() < 10 or var <= 0:
            return out[:lag]
        out[lag] = float(np.mean(z[lag:][same] * z[:-lag][same])) / var
    return out


class _Objective:
    """Noise settings from log-parameters, and the filter re-runs that evaluate them."""

    def __init__(self, tapes: Sequence[FilterTape], base: Settings, free: np.ndarray,
                 onset: float = 0.0):
        self.tapes = list(tapes)
        self.free = free
        self.steady = [steady_mask(t, onset) for t in self.tapes]
        self.steady_all = (np.concatenate(self.steady) if self.steady
                           else np.zeros(0, bool))
        self.steady_decimated: list[np.ndarray] = []
        q = np.array(base["filter.process_std"], float)
        self.q_ref = np.where(q > 0, q, np.array(SPEC_BY_NAME["filter.process_std"].default))
        # the fit runs the filter as configured, with fixed (not adapted) noise
        self.base = base.replace({"filter.noise_adaptation": "fixed",
                                  "filter.process_adaptation": "fixed"})
        self.evaluations = 0
        self.decimated: list[list[FilterTape]] = []
        self.pool = FilterPool()

    def settings(self, log_r: float, log_q: np.ndarray) -> Settings:
        q = self.q_ref.copy()
        q[self.free] = np.exp(log_q)
        return self.base.replace({"filter.measurement_std": _clamp("filter.measurement_std",
                                                                   math.exp(log_r)),
                                  "filter.process_std": [_clamp("filter.process_std", float(v))
                                                         for v in q]})

    def full(self, log_r: float, log_q: np.ndarray) -> _FilterRun:
        self.evaluations += 1
        return replay_filter(self.tapes, self.settings(log_r, log_q), self.pool, 0)

    def set_decimation(self, every: int, offsets: int) -> None:
        offs = sorted({int(round(i * every / offsets)) for i in range(offsets)})
        self.decimated = [[decimate(t, every, o) for t in self.tapes] for o in offs]
        self.steady_decimated = [np.concatenate([m[o::every] for m in self.steady])
                                 for o in offs]

    def decimated_nll(self, x: np.ndarray) -> float:
        """Mean over the offsets of the decimated filter's negative log-likelihood."""
        s = self.settings(float(x[0]), np.asarray(x[1:]))
        self.evaluations += len(self.decimated)
        return float(np.mean([replay_filter(d, s, self.pool, i + 1).nll_of(m)
                              for i, (d, m) in enumerate(zip(self.decimated,
                                                             self.steady_decimated))]))


def choose_decimation(run: _FilterRun, updates: int) -> int:
    """Smallest lag at which the normalized innovations' autocorrelation falls below
    :data:`WHITE_CORRELATION`, limited so that :data:`MIN_DECIMATED_UPDATES` remain."""
    limit = max(1, min(MAX_DECIMATION, updates // MIN_DECIMATED_UPDATES))
    acf = innovation_autocorrelation(run, limit)
    below = np.flatnonzero(np.abs(acf) < WHITE_CORRELATION)
    return int(below[0]) if len(below) else limit


def fit_filter_noise(tapes: Sequence[FilterTape], base: Settings, onset: float = 0.0
                     ) -> NoiseFit:
    """Measurement and process noise of the environment filter from its recorded inputs.

    1. Pilot: the filter at the base noise; the autocorrelation of its normalized innovations
       sets the decimation m (they are far from white at the sample rate: the force comes from
       the momentum observer and the acceleration from a smoothing differentiator).
    2. Process noise: maximum of the likelihood of the filter run on every m-th update (whose
       innovations are close to white), averaged over several offsets, over the logarithms of
       the measurement std and of the excited parameters' process std (bounded Brent searches,
       one coordinate at a time, :data:`SEARCH_SWEEPS` sweeps). A process noise intensity per
       second does not depend on the rate, so the value carries over.
    3. Measurement noise: covariance matching at the full rate (Mehra, IEEE TAC 1972): the value
       at which the filter's mean normalized innovation squared over the data is 1, the
       condition its NIS consistency test checks (Bar-Shalom, Li and Kirubarajan 2001).

    The filter runs over every update, but the first ``onset`` s of each contact (see
    :func:`onset_time`) count neither in the likelihood nor in the matching.
    """
    updates = sum(len(t) for t in tapes)
    contact_time = sum(float(t.time[-1] - t.time[0]) for t in tapes if len(t) > 1)
    obj = _Objective(tapes, base, np.ones(4, bool), onset)
    q_base = np.array(base["filter.process_std"], float)
    r0 = math.log(float(base["filter.measurement_std"]))
    pilot = obj.full(r0, np.log(obj.q_ref))
    frac = pilot.excited.mean(axis=0)       # excitation as the filter judges it
    free = frac >= MIN_EXCITED_FRACTION
    obj.free = free
    lq0 = np.log(obj.q_ref[free])
    every = choose_decimation(pilot, updates)
    obj.set_decimation(every, min(DECIMATION_OFFSETS, every))
    x0 = np.r_[r0, lq0]
    span = SEARCH_DECADES * math.log(10.0)
    lower = x0 - span
    lower[0] = max(lower[0], math.log(max(float(base["filter.measurement_std_floor"]), 1e-6)))
    upper = x0 + span

    x = _coordinate_search(obj.decimated_nll, x0, lower, upper)
    best = float(obj.decimated_nll(x))
    q_out, q_int, tuned, notes = q_base.copy(), np.full((4, 2), np.nan), np.zeros(4, bool), [""] * 4
    for k, i in enumerate(np.flatnonzero(free)):
        lo, hi = _likelihood_interval(obj, x, k + 1, best, lower[k + 1], upper[k + 1])
        q_out[i], q_int[i], tuned[i], notes[i] = _process_decision(
            PARAMETER_NAMES[i], math.exp(x[k + 1]), lo, hi, q_base[i])
    for i in np.flatnonzero(~free):
        notes[i] = (f"excited in only {100 * frac[i]:.0f} % of the contact updates (needs "
                    f"{100 * MIN_EXCITED_FRACTION:g} %): the data say nothing about how fast "
                    f"{PARAMETER_NAMES[i].replace('_', ' ')} changes; base value kept")
    lq_final = np.log(np.where(q_out > 0, q_out, obj.q_ref)[free])
    r_std, r_int, nis_tuned, per_bag = _match_measurement_noise(obj, x[0], lq_final)
    nis_base = float(np.mean(pilot.nis[obj.steady_all]))
    rho = float(innovation_autocorrelation(pilot, 1)[-1])
    return NoiseFit(r_std, r_int, q_out, q_int, tuned, notes, frac, updates, contact_time,
                    every, rho, nis_base, nis_tuned, obj.evaluations, per_bag, onset)


def _coordinate_search(f: Callable[[np.ndarray], float], x0: np.ndarray, lower: np.ndarray,
                       upper: np.ndarray) -> np.ndarray:
    """Minimize f over the box [lower, upper] one coordinate at a time (bounded Brent,
    scipy.optimize.minimize_scalar), :data:`SEARCH_SWEEPS` sweeps. Robust to the small jumps
    the filter's change detection puts into the likelihood, and cheap in evaluations."""
    from scipy.optimize import minimize_scalar

    x = np.array(x0, float)
    for _ in range(SEARCH_SWEEPS):
        for k in range(len(x)):
            def along(v: float, k: int = k) -> float:
                y = x.copy()
                y[k] = v
                return f(y)
            res = minimize_scalar(along, bounds=(lower[k], upper[k]), method="bounded",
                                  options={"xatol": 0.1, "maxiter": 14})
            if res.fun < f(x):
                x[k] = res.x
    return x


def _likelihood_interval(obj: _Objective, x: np.ndarray, k: int, best: float, lo_bound: float,
                         hi_bound: float) -> tuple[float, float]:
    """95 % likelihood-ratio interval of exp(x[k]) with the other values held at the optimum
    (2 dNLL <= chi-square(1) 95 %); an end that reaches the search bound is nan."""
    def excess(v: float) -> float:
        y = x.copy()
        y[k] = v
        return 2.0 * (obj.decimated_nll(y) - best) - CHI2_1_95

    ends = []
    for bound, step in ((lo_bound, -1.0), (hi_bound, 1.0)):
        inside, outside = x[k], None
        v = x[k]
        while outside is None:
            v = v + step * 1.15
            if (step < 0 and v <= bound) or (step > 0 and v >= bound):
                if excess(bound) <= 0:
                    break
                outside = bound
            elif excess(v) > 0:
                outside = v
            else:
                inside = v
        if outside is None:
            ends.append(math.nan)
            continue
        for _ in range(4):
            mid = 0.5 * (inside + outside)
            if excess(mid) > 0:
                outside = mid
            else:
                inside = mid
        ends.append(math.exp(inside))
    return ends[0], ends[1]


def _process_decision(name: str, best: float, lo: float, hi: float,
                      q_base: float) -> tuple[float, tuple[float, float], bool, str]:
    """Which process std to write, given the estimate and its likelihood interval."""
    label = name.replace("_", " ")
    if math.isfinite(lo) and math.isfinite(hi):
        return best, (lo, hi), True, ""
    if not math.isfinite(hi):
        return q_base, (lo, math.nan), False, (
            f"the likelihood does not bound the process noise of {label} from above: base "
            "value kept")
    # flat towards zero: the data show no change of this parameter
    if 0.0 < q_base <= hi:
        return q_base, (0.0, hi), False, (
            f"the data show no change of {label} and accept any value up to {hi:.3g}, the base "
            "value included: kept")
    return hi, (0.0, hi), True, (
        f"the data show no change of {label} and reject the base value {q_base:g} "
        "(likelihood ratio, 95 %): written as the largest value they accept")


def _match_measurement_noise(obj: _Objective, log_r0: float, log_q: np.ndarray
                             ) -> tuple[float, tuple[float, float], float, list[float]]:
    """Measurement std at which the full-rate mean NIS is 1, its 95 % interval from the
    Newey-West standard error of that mean, the mean NIS reached, and the value each bag
    alone would match (from its own mean NIS and the local slope).

    Secant iterations on log(mean NIS) against log R (nearly linear, slope about -2 where R
    dominates S), from the decimated fit's value; stops within :data:`MATCH_TOLERANCE`."""
    runs: dict[float, _FilterRun] = {}

    def log_nis(lr: float) -> float:
        if lr not in runs:
            runs[lr] = obj.full(lr, log_q).subset(obj.steady_all)
        return math.log(max(float(np.mean(runs[lr].nis)), 1e-300))

    a, fa = log_r0, log_nis(log_r0)
    b = a + 0.5 * fa      # first step with slope -2
    fb = log_nis(b)
    for _ in range(8):
        if abs(fb) < MATCH_TOLERANCE:
            break
        slope = (fb - fa) / (b - a) if b != a else -2.0
        slope = slope if slope < -0.05 else -2.0
        a, fa = b, fb
        b = b - fb / slope
        fb = log_nis(b)
    best = min(runs, key=lambda lr: abs(log_nis(lr)))
    run = runs[best]
    others = [lr for lr in runs if lr != best]
    near = min(others, key=lambda lr: abs(lr - best)) if others else best + 0.2
    slope = (log_nis(near) - log_nis(best)) / (near - best) if near != best else -2.0
    slope = slope if slope < -0.05 else -2.0
    nis = run.nis
    centred = nis - nis.mean()
    lags = correlation_lags(centred, run.bag, 2000)
    se = math.sqrt(max(_long_run(centred[:, None], run.bag, lags)[0, 0], 0.0)) / len(nis)
    half = Z95 * (se / max(float(nis.mean()), 1e-12)) / abs(slope)
    r = math.exp(best)
    per_bag = [r * float(np.mean(nis[run.bag == b])) ** (1.0 / abs(slope))
               if np.any(run.bag == b) else math.nan for b in range(len(obj.tapes))]
    return r, (r * math.exp(-half), r * math.exp(half)), float(np.mean(nis)), per_bag


def _long_run(G: np.ndarray, run_id: np.ndarray, lags: int) -> np.ndarray:
    """Newey-West long-run covariance (sum, not mean) of rows G (M, p), within bags."""
    S = G.T @ G
    for lag in range(1, lags + 1):
        same = run_id[lag:] == run_id[:-lag]
        if not same.any():
            break
        C = G[lag:][same].T @ G[:-lag][same]
        S += (1.0 - lag / (lags + 1.0)) * (C + C.T)
    return S


# ============================================================================================
# the whole tuning


@dataclass
class TunedEntry:
    """One written setting: value, and the comment lines saying where it came from."""

    name: str
    value: Any
    comment: list[str]


@dataclass
class TuneResult:
    """Everything the tuning found. settings: the base with the tuned values; entries: the tuned
    settings and their comments; identification, noise: the fits; segments: free and contact
    stretches used (bag index, times s); warnings: things the user should know; bags: names;
    joints: model joint order; base: the base settings; traces: last pass per bag;
    free_only: indices of the bags in which the contact monitor found no contact (free motion
    only: used for bias, friction and sensor noise, not for the environment filter)."""

    settings: Settings
    base: Settings
    entries: dict[str, TunedEntry]
    identification: Identification
    noise: NoiseFit
    segments: list[Segment]
    warnings: list[str]
    bags: list[str]
    joints: tuple[str, ...]
    passes: int
    traces: list[Trace] = field(default_factory=list)
    written: list[str] = field(default_factory=list)
    taps: list[Trace] = field(default_factory=list)
    masks: list[np.ndarray] = field(default_factory=list)
    free_only: list[int] = field(default_factory=list)

    def parameter_file(self, header: Sequence[str]) -> str:
        """The ROS 2 parameter YAML text of the result."""
        return parameter_yaml(self.settings, self.written, self.entries, header)


def bag_settings(base: Settings, recommended: Mapping[str, Any], params: Mapping[str, Any],
                 tuned: Mapping[str, Any]) -> Settings:
    """Settings for one bag's pass: defaults <- the bag's recommendations <- the parameter file
    <- tuned values (the replay's order, plus the tuning)."""
    try:
        s = Settings().replace(dict(recommended))
    except SettingsError as exc:
        raise TuneError(f"the bag's recommended settings are not valid: {exc}") from None
    return s.replace({**params, **tuned})


def _check_inputs(recs: Sequence[Recording], base: Settings) -> None:
    for rec in recs:
        if len(rec.samples) < 2 or rec.duration < MIN_BAG_DURATION:
            raise TuneError(
                f"{rec.name}: too short ({len(rec.samples)} joint states over "
                f"{rec.duration:.2f} s); expected at least {MIN_BAG_DURATION:g} s with free "
                f"motion (bias.startup = {base['bias.startup']:g} s at the start) and contact")


def tune(recordings: Sequence[Recording], urdf: str, params: Mapping[str, Any] | None = None,
         log: Callable[[str], None] | None = None) -> TuneResult:
    """Identify bias, friction and noise from the recordings; returns the tuned settings.

    urdf: the robot description (text). params: settings from the base parameter file, flat
    dotted names (None: none). log: progress messages. Raises TuneError (or SettingsError,
    ModelError) with a message naming what is missing.
    """
    say = log or (lambda _m: None)
    params = dict(params or {})
    if not recordings:
        raise TuneError("no recordings given; expected one or more bags")
    common = _common_recommendations(recordings)
    base = Settings().replace(common).replace(params)
    _check_inputs(recordings, base)
    per_bag = [bag_settings(base, r.recommended, params, {}) for r in recordings]
    pipe = Pipeline(per_bag[0], urdf)  # validates URDF, contact frame and per-joint lists
    joints = pipe.model.joint_names
    clear = margin(base, joints)
    warnings = _joint_name_warnings(recordings, joints)

    say(f"pass 1: {len(recordings)} bag(s) through the pipeline with the base settings")
    taps = [run_pass(r, s, urdf, taps=True) for r, s in zip(recordings, per_bag)]
    startup = base["bias.startup"] > 0 and any((t.phase == LEARNING).any() for t in taps)
    masks = [free_mask(t, clear, startup_only=startup) for t in taps]
    _require_free(recordings, masks, taps, clear)
    ident = identify(taps, masks, base, joints)
    traces = taps
    passes = 1
    def segmentation_pass() -> list[Trace]:
        nonlocal passes
        tuned_vals = _pass_values(ident, joints)
        settings_b = [bag_settings(base, r.recommended, params,
                                   {**tuned_vals, "bias.initial": ident.bias_of_bag(b)})
                      for b, r in enumerate(recordings)]
        passes += 1
        say(f"pass {passes}: re-segmenting with the identified bias and friction")
        return [run_pass(r, s, urdf) for r, s in zip(recordings, settings_b)]

    for _ in range(MAX_SEGMENTATION_PASSES):
        traces = segmentation_pass()
        new_masks = [free_mask(t, clear, startup_only=False) for t in traces]
        _require_free(recordings, new_masks, traces, clear)
        if _same_masks(masks, new_masks):
            break
        masks = new_masks
        ident = identify(taps, masks, base, joints)
    else:  # the values changed after the last pass: the filter inputs must come from them
        traces = segmentation_pass()
    check_model_fit(ident, any(bool((t.phase == CONTACT).any()) for t in traces))
    warnings += _friction_warnings(ident)
    segments = list(ident.free_segments)
    for b, t in enumerate(traces):
        segments += contact_segments(b, t)
    free_only = [b for b, t in enumerate(traces) if not (t.phase == CONTACT).any()]
    tapes = [t.tape for t in traces]
    _require_contact(recordings, tapes, traces)
    if free_only:
        say("no contact in " + ", ".join(recordings[b].name for b in free_only)
            + ": " + FREE_ONLY_USE)
    say(f"fitting the environment filter's noise to {sum(len(t) for t in tapes)} contact "
        "updates")
    noise = fit_filter_noise(tapes, base, onset_time(base, joints))
    warnings += [n for n, t in zip(noise.notes, noise.tuned) if n and t]
    lo, hi = noise.measurement_interval
    if len(recordings) > 1 and any(math.isfinite(v) and not lo <= v <= hi
                                   for v in noise.per_bag_std):
        warnings.append(
            "the measurement noise differs between bags beyond its 95 % interval ("
            + ", ".join(f"{Path(r.name).name}: {v:.3g} N" for r, v in zip(recordings,
                                                                          noise.per_bag_std))
            + f"; pooled {noise.measurement_std:.3g} N): tasks that load the robot differently"
            " may deserve files of their own")
    entries = build_entries(ident, noise, base, joints, recordings)
    values = {**_per_joint_in_model_order(base, joints),
              **{name: e.value for name, e in entries.items()}}
    tuned_settings = base.replace(values)
    written = list(params) + list(common)
    differing = sorted({k for r in recordings for k in r.recommended} - set(common)
                       - set(params))
    if differing:
        warnings.append(f"the bags recommend different values for {differing} (different "
                        "tasks?): not written; set them per task")
    return TuneResult(tuned_settings, base, entries, ident, noise, segments, warnings,
                      [r.name for r in recordings], joints, passes, traces, written, taps, masks,
                      free_only)


PER_JOINT_SETTINGS = ("observer.gain", "bias.initial", "friction.viscous", "friction.coulomb")


def _per_joint_in_model_order(base: Settings, joints: Sequence[str]) -> dict[str, list[float]]:
    """The base's per-joint lists with one value per joint, re-expressed in the model's joint
    order (the written file lists ``joint_names`` in that order)."""
    return {name: [float(v) for v in per_joint(base, name, joints)]
            for name in PER_JOINT_SETTINGS if len(base[name]) > 1}


def _common_recommendations(recs: Sequence[Recording]) -> dict[str, Any]:
    """Settings the bags recommend alike (simulated bags recommend their task's direction). A bag
    that recommends nothing for a setting has no say on it (a commissioning bag, which has no
    object, recommends no direction)."""
    keys = dict.fromkeys(k for r in recs for k in r.recommended)
    out = {}
    for k in keys:
        values = [r.recommended[k] for r in recs if k in r.recommended]
        if all(v == values[0] for v in values[1:]):
            out[k] = values[0]
    return out


def _joint_name_warnings(recs: Sequence[Recording], joints: Sequence[str]) -> list[str]:
    extra = sorted({n for r in recs for n in r.samples[0].names} - set(joints))
    if not extra:
        return []
    return [f"joints {extra} are in the joint states but not in the URDF; they were ignored"]


def _pass_values(ident: Identification, joints: Sequence[str]) -> dict[str, Any]:
    return {"joint_names": list(joints),
            "friction.viscous": [max(j.viscous, 0.0) for j in ident.joints],
            "friction.coulomb": [max(j.coulomb, 0.0) for j in ident.joints],
            "observer.effort_noise": _clamp("observer.effort_noise", ident.effort_noise),
            "observer.velocity_noise": _clamp("observer.velocity_noise", ident.velocity_noise)}


def _clamp(name: str, value: float) -> float:
    spec = SPEC_BY_NAME[name]
    lo = spec.minimum if spec.minimum is not None else -math.inf
    hi = spec.maximum if spec.maximum is not None else math.inf
    return float(min(max(value, lo), hi))


def _same_masks(a: Sequence[np.ndarray], b: Sequence[np.ndarray]) -> bool:
    changed = sum(int(np.sum(x != y)) for x, y in zip(a, b) if len(x) == len(y))
    total = max(sum(int(x.sum()) for x in a), 1)
    return all(len(x) == len(y) for x, y in zip(a, b)) and changed <= 0.01 * total


def _require_free(recs: Sequence[Recording], masks: Sequence[np.ndarray],
                  traces: Sequence[Trace], clear: float) -> None:
    times = [float(np.sum(np.diff(t.time, prepend=t.time[0])[m])) for t, m in zip(traces, masks)]
    if sum(times) >= MIN_FREE_TIME:
        return
    per = ", ".join(f"{r.name}: {x:.2f} s" for r, x in zip(recs, times))
    raise TuneError(
        f"not enough free motion: {sum(times):.2f} s usable over all bags ({per}); expected at "
        f"least {MIN_FREE_TIME:g} s of the robot moving without touching anything, more than "
        f"{clear:.2f} s away from contact (record the bag from before the robot reaches the "
        "object)")


def _require_contact(recs: Sequence[Recording], tapes: Sequence[FilterTape],
                     traces: Sequence[Trace]) -> None:
    times = [float(np.sum(np.diff(t.time))) if len(t) > 1 else 0.0 for t in tapes]
    if sum(times) >= MIN_CONTACT_TIME:
        return
    per = ", ".join(f"{r.name}: {x:.2f} s" for r, x in zip(recs, times))
    raise TuneError(
        f"not enough contact: the contact monitor found {sum(times):.2f} s of contact over all "
        f"bags ({per}); expected at least {MIN_CONTACT_TIME:g} s of the robot moving the object "
        "(the environment filter's noise is identified from contact)")


def _friction_warnings(ident: Identification) -> list[str]:
    out = []
    for j in ident.joints:
        if j.friction_note and not j.friction_note.startswith("link-side"):
            one_way = max(j.moving_time) >= MIN_MOVING_TIME
            out.append(f"{j.name}: friction not identified ({j.friction_note}); base friction "
                       "kept." + (" Its bias includes part of its Coulomb friction (it moved "
                                  "one way only)." if one_way else ""))
        elif j.friction_identified:
            for label, val, ci in (("viscous", j.viscous, j.viscous_ci),
                                   ("Coulomb", j.coulomb, j.coulomb_ci)):
                if math.isfinite(ci) and ci > 0.5 * max(abs(val), 1e-9):
                    out.append(f"{j.name}: {label} friction poorly determined "
                               f"({val:.3g} +/- {ci:.2g}); move the joint faster and both ways")
    return out


# ============================================================================================
# entries and their comments


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def _round(x: float) -> float:
    """A tuned number to 6 significant digits (far below its uncertainty), as float."""
    return float(f"{float(x):.6g}")


def build_entries(ident: Identification, noise: NoiseFit, base: Settings,
                  joints: Sequence[str], recs: Sequence[Recording]) -> dict[str, TunedEntry]:
    """The tuned settings with comment lines (ASCII) stating source and confidence."""
    last = len(recs) - 1
    free_desc = (f"{ident.free_time:.2f} s of free motion in {len(recs)} bag(s)")
    entries: dict[str, TunedEntry] = {}
    entries["joint_names"] = TunedEntry("joint_names", list(joints),
                                        ["order of the per-joint lists below (the URDF's)"])
    lines = [f"tuned: least squares on the observer residual, {free_desc};",
             f"value of the last bag ({Path(recs[last].name).name}), +/- 95 % interval:"]
    lines += [f"  {j.name}: {_fmt(j.bias[last])} +/- {_fmt(j.bias_ci[last])}"
              + (f" (bags: {', '.join(_fmt(b) for b in j.bias)})" if len(recs) > 1 else "")
              for j in ident.joints]
    entries["bias.initial"] = TunedEntry("bias.initial",
                                         [_round(b) for b in ident.bias_of_bag(last)], lines)
    if base["effort_side"] == "motor":
        for key, attr, ci_attr, unit in (("friction.viscous", "viscous", "viscous_ci",
                                          "N.m.s/rad"),
                                         ("friction.coulomb", "coulomb", "coulomb_ci", "N.m")):
            lines = [f"tuned: least squares on the observer residual, {free_desc}; "
                     f"{unit}, +/- 95 % interval:"]
            for j in ident.joints:
                if j.friction_identified:
                    lines.append(f"  {j.name}: {_fmt(getattr(j, attr))} +/- "
                                 f"{_fmt(getattr(j, ci_attr))}")
                else:
                    lines.append(f"  {j.name}: {_fmt(getattr(j, attr))} kept from the base "
                                 f"({j.friction_note})")
            entries[key] = TunedEntry(key, [_round(max(float(getattr(j, attr)), 0.0))
                                            for j in ident.joints], lines)
    for key, value, label, attr in (
            ("observer.effort_noise", ident.effort_noise, "effort", "effort_noise"),
            ("observer.velocity_noise", ident.velocity_noise, "velocity", "velocity_noise")):
        per = [getattr(j, attr) for j in ident.joints]
        entries[key] = TunedEntry(key, _round(_clamp(key, value)), [
            f"tuned: median over joints of the {label} noise (second differences of "
            f"{free_desc}); per joint {min(per):.3g} .. {max(per):.3g}"])
    lo, hi = noise.measurement_interval
    entries["filter.measurement_std"] = TunedEntry(
        "filter.measurement_std",
        _round(_clamp("filter.measurement_std", noise.measurement_std)),
        [f"tuned: innovation covariance matching (mean NIS = 1) over {noise.updates} contact "
         f"updates ({noise.contact_time:.2f} s; the first {noise.onset:.3f} s of each contact,"
         f" the impact, left out), 95 % interval {_interval(lo, hi)} N"]
        + (["each bag alone: " + ", ".join(f"{_fmt(v)} N" if math.isfinite(v) else "no contact"
                                            for v in noise.per_bag_std)]
           if len(noise.per_bag_std) > 1 else []))
    entries["filter.noise_adaptation"] = TunedEntry("filter.noise_adaptation", "fixed", [
        "tuned: the measurement noise above was identified from the data; online adaptation "
        f"(base: {base['filter.noise_adaptation']!r}) would move it during transients"])
    verb = "tuned" if noise.tuned.any() else "checked, base values kept"
    lines = [f"{verb}: maximum likelihood of the filter run on every {noise.decimation}th "
             f"of {noise.updates} contact updates ({noise.contact_time:.2f} s), 95 % "
             "likelihood-ratio intervals:"]
    for i, (p, u) in enumerate(zip(PARAMETER_NAMES, PARAMETER_UNITS)):
        unit = u.replace("·", ".") + "/sqrt(s)"
        if noise.tuned[i]:
            lines.append(f"  {p}: {_fmt(noise.process_std[i])} {unit} "
                         f"({_interval(*noise.process_interval[i])})"
                         + (f": {noise.notes[i]}" if noise.notes[i] else ""))
        else:
            lines.append(f"  {p}: {_fmt(noise.process_std[i])} {unit}: {noise.notes[i]}")
    entries["filter.process_std"] = TunedEntry(
        "filter.process_std",
        [_round(_clamp_elem("filter.process_std", v)) for v in noise.process_std],
        lines)
    return entries


def _clamp_elem(name: str, v: float) -> float:
    """One element of a float-array setting, clipped into its allowed range."""
    return _clamp(name, float(v))


def _interval(lo: float, hi: float) -> str:
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return "not determined"
    return f"{_fmt(lo)} .. {_fmt(hi)}"


# ============================================================================================
# the parameter file


def _yaml_scalar(value: Any) -> str:
    """One value as ROS 2 parameter YAML that PyYAML and rcl read with the same type."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"non-finite value {value!r}")  # Settings never holds one
        text = repr(value)
        if "e" in text and "." not in text.split("e")[0]:
            mant, exp = text.split("e")
            text = f"{mant}.0e{exp}"
        return text
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    raise TypeError(f"cannot write {value!r} as a parameter")


def _yaml_value(name: str, value: Any) -> str:
    if isinstance(value, list):
        spec = SPEC_BY_NAME[name]
        if spec.kind == "float_array":
            value = [float(v) for v in value]
        return "[" + ", ".join(_yaml_scalar(v) for v in value) + "]"
    return _yaml_scalar(value)


def parameter_yaml(settings: Settings, names: Iterable[str], entries: Mapping[str, TunedEntry],
                   header: Sequence[str]) -> str:
    """The parameter file text: the settings ``names`` (in registry order; empty lists, which
    ROS 2 cannot type, are left out: they mean the default) with their values from
    ``settings``, tuned entries preceded by their comments."""
    wanted = set(names) | set(entries)
    flat = {s.name: settings[s.name] for s in SPECS if s.name in wanted
            and not (isinstance(settings[s.name], list) and not settings[s.name])}
    lines = [f"# {h}" for h in header]
    lines += [f"{NODE_NAME}:", "  ros__parameters:"]

    def emit(tree: Mapping[str, Any], prefix: str, indent: int) -> None:
        pad = " " * indent
        for key, value in tree.items():
            name = f"{prefix}{key}"
            if isinstance(value, dict):
                lines.append(f"{pad}{key}:")
                emit(value, name + ".", indent + 2)
                continue
            entry = entries.get(name)
            if entry is not None:
                lines.extend(f"{pad}# {c}" for c in entry.comment)
            lines.append(f"{pad}{key}: {_yaml_value(name, value)}")

    emit(nest(flat), "", 4)
    return "\n".join(lines) + "\n"


def write_text_atomic(path: Path, text: str) -> None:
    """Write ``text`` to a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".partial", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def file_header(result: TuneResult, base_source: str) -> list[str]:
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    lines = [f"written by `{PROG}` on {now}",
             f"base: {base_source}",
             "bags: " + ", ".join(result.bags),
             f"free motion used: {result.identification.free_time:.2f} s; contact used: "
             f"{result.noise.contact_time:.2f} s; pipeline passes: {result.passes}",
             *([free_only_text(result)] if result.free_only else []),
             "entries preceded by 'tuned:' (or 'checked') were identified from (or checked"
             " against) these bags; the others come from "
             "the base; settings not listed keep their defaults"]
    lines += [f"warning: {w}" for w in result.warnings]
    return lines


def free_only_text(result: TuneResult) -> str:
    """One line naming the bags without contact and what they were used for."""
    names = ", ".join(Path(result.bags[b]).name for b in result.free_only)
    return f"bags without contact ({FREE_ONLY_USE}): {names}"


# ============================================================================================
# explanation


def explain(result: TuneResult) -> str:
    """A plain-text account of what was found (printed by the command)."""
    r, ident, noise = result, result.identification, result.noise
    out = [f"bags: {len(r.bags)}; pipeline passes: {r.passes}"]
    out.append("segments used (bag, kind, s):")
    for s in sorted(r.segments, key=lambda s: (s.bag, s.start)):
        out.append(f"  bag {s.bag + 1}  {s.kind:<7} {s.start:9.3f} .. {s.end:9.3f}"
                   f"  ({s.duration:.2f} s)")
    for b in r.free_only:
        out.append(f"  bag {b + 1}  no contact: {FREE_ONLY_USE}")
    out.append(f"free motion: {ident.free_time:.2f} s; contact: {noise.contact_time:.2f} s "
               f"({noise.updates} filter updates)")
    out.append(f"{'joint':<24}{'bias':>10}{'+/-':>8}{'viscous':>10}{'+/-':>8}{'coulomb':>10}"
               f"{'+/-':>8}{'resid':>8}{'noise':>8}{'effort':>8}{'veloc':>9}")
    for j in ident.joints:
        def ci(x: float) -> str:
            return f"{x:8.3g}" if math.isfinite(x) else f"{'kept':>8}"
        out.append(f"{j.name:<24}{j.bias[-1]:10.4g}{j.bias_ci[-1]:8.2g}{j.viscous:10.4g}"
                   f"{ci(j.viscous_ci)}{j.coulomb:10.4g}{ci(j.coulomb_ci)}"
                   f"{j.residual_std:8.3g}{j.explained_std:8.3g}{j.effort_noise:8.3g}"
                   f"{j.velocity_noise:9.3g}")
    out.append("  (bias of the last bag; 'resid': free-motion residual left by the fit, 'noise':"
               " what the sensor noise explains, both RMS)")
    out.append(f"sensor noise: effort {ident.effort_noise:.4g} N·m, velocity "
               f"{ident.velocity_noise:.4g} rad/s (medians over joints)")
    lo, hi = noise.measurement_interval
    if len(noise.per_bag_std) > 1:
        out.append("measurement std each bag alone: " + ", ".join(
            f"{v:.3g} N" if b not in r.free_only else "no contact"
            for b, v in enumerate(noise.per_bag_std)))
    out.append(f"environment filter: measurement std {noise.measurement_std:.4g} N "
               f"(95 %: {_interval(lo, hi)}); mean NIS {noise.nis_base:.3g} at the base values ->"
               f" {noise.nis_tuned:.3g} tuned (fixed noise); innovations decimated by "
               f"{noise.decimation} for the likelihood (lag-1 autocorrelation "
               f"{noise.innovation_correlation:.2f}); {noise.evaluations} filter runs")
    for i, p in enumerate(PARAMETER_NAMES):
        state = ("tuned" if noise.tuned[i] else "kept")
        out.append(f"  process std {p:<13} {noise.process_std[i]:10.4g}  {state}"
                   f"  excited {100 * noise.excited_fraction[i]:.0f} %"
                   + (f"  ({_interval(*noise.process_interval[i])})" if noise.tuned[i] else "")
                   + (f"  {noise.notes[i]}" if noise.notes[i] else ""))
    for w in r.warnings:
        out.append(f"warning: {w}")
    return "\n".join(out)


# ============================================================================================
# command line


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The ``tune`` subcommand's arguments."""
    parser.add_argument("bags", nargs="+", metavar="BAG", type=Path,
                        help="rosbag2 bags (directory, .mcap or .db3) of the robot moving freely "
                             "and then handling an object")
    parser.add_argument("--out", required=True, type=Path, metavar="FILE",
                        help="parameter YAML to write (the base with the tuned values)")
    parser.add_argument("--params", type=Path, metavar="BASE",
                        help="base parameter YAML (default: the defaults and the bags' "
                             "recommended settings)")
    parser.add_argument("--urdf", type=Path, metavar="FILE",
                        help="URDF of the robot (default: robot_description_file, else the "
                             "bag's robot_description)")
    parser.add_argument("--report", type=Path, metavar="DIR",
                        help=f"also write DIR/{REPORT_NAME}: default against tuned settings on "
                             "held-out data")
    parser.add_argument("--topics", nargs="+", default=[], metavar="ROLE=TOPIC",
                        help="topic of a role: joint_states, joint_efforts, robot_description "
                             "(e.g. joint_states=/marten/joint_states)")


def _check_out(out: Path, report: Path | None) -> None:
    if out.exists() and out.is_dir():
        raise TuneError(f"--out {str(out)!r} is a directory; expected a file path for the "
                        "parameter YAML")
    if not out.parent.is_dir():
        raise TuneError(f"cannot write {str(out)!r}: directory {str(out.parent)!r} does not "
                        "exist")
    if report is not None:
        if report.exists() and not report.is_dir():
            raise TuneError(f"--report {str(report)!r} is a file; expected a directory")
        if not report.exists() and not report.parent.is_dir():
            raise TuneError(f"cannot write the report into {str(report)!r}: directory "
                            f"{str(report.parent)!r} does not exist")


def _load_inputs(args: argparse.Namespace) -> tuple[list[Recording], str, dict[str, Any], str]:
    from ..core.settings import load_parameter_file, parameters_from_yaml
    recs = [read_bag(Path(b), args.topics) for b in args.bags]
    params: dict[str, Any] = {}
    base_source = "defaults and the bags' recommended settings"
    if args.params is not None:
        load_parameter_file(args.params)  # validates: unknown names, ranges
        params = parameters_from_yaml(Path(args.params).read_text(encoding="utf-8"),
                                      str(args.params))
        base_source = f"{args.params}"
    urdf = _load_urdf(args.urdf, params, recs)
    return recs, urdf, params, base_source


def _load_urdf(urdf: Path | None, params: Mapping[str, Any], recs: Sequence[Recording]) -> str:
    if urdf is not None:
        try:
            return Path(urdf).read_text(encoding="utf-8")
        except OSError as exc:
            raise TuneError(f"URDF file {str(urdf)!r} cannot be read: {exc.strerror}") from None
    path = params.get("robot_description_file") or ""
    if path:
        try:
            return Path(path).read_text(encoding="utf-8")
        except OSError as exc:
            raise TuneError(f"robot_description_file {path!r} cannot be read: "
                            f"{exc.strerror}") from None
    texts = {r.urdf for r in recs if r.urdf}
    if not texts:
        raise TuneError("no URDF: the bags have no robot_description and none was given; "
                        "expected --urdf FILE (or robot_description_file in --params)")
    if len(texts) > 1:
        raise TuneError("the bags carry different robot descriptions (different robots?); "
                        "expected bags of one robot, or --urdf FILE to choose its URDF")
    return texts.pop()


def run(args: argparse.Namespace) -> int:
    """Run the tuning for parsed arguments; returns the exit code (0 ok, 2 bad input)."""
    from ..io.bag import BagError
    try:
        _check_out(Path(args.out), args.report)
        recs, urdf, params, base_source = _load_inputs(args)
        result = tune(recs, urdf, params, log=lambda m: print(m, file=sys.stderr))
        text = result.parameter_file(file_header(result, base_source))
        report_html = None
        if args.report is not None:
            from .tune_report import build_tuning_report
            report_html = build_tuning_report(result, recs, urdf, params)
        write_text_atomic(Path(args.out), text)
        if report_html is not None:
            Path(args.report).mkdir(exist_ok=True)
            write_text_atomic(Path(args.report) / REPORT_NAME, report_html)
    except (TuneError, BagError, SettingsError, ModelError) as exc:
        print(f"{PROG}: error: {exc}", file=sys.stderr)
        print("no file written", file=sys.stderr)
        return EXIT_USAGE
    print(explain(result))
    print(f"wrote {args.out}" + (f" and {Path(args.report) / REPORT_NAME}"
                                 if args.report is not None else ""))
    return EXIT_OK


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog=PROG, description=(
        "Identify torque bias, joint friction and noise levels from recorded bags and write "
        "them into a parameter file."))
    add_arguments(parser)
    return run(parser.parse_args(argv))


if __name__ == "__main__":
    sys.exit(main())
