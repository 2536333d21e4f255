"""One Pipeline pass over a recording, with taps on its observer."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from ...core.base import OdometryMessage
from ...core.observer import KalmanMomentumObserver, MomentumObserver
from ...core.pipeline import Pipeline
from ...core.settings import Settings
from .common import PHASES, TuneError
from .recordings import Recording

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


# ============================================================================================
# one Pipeline pass


@dataclass
class Trace:
    """What one Pipeline pass over one recording produced, per accepted sample (N of them).

    time (N,) s; phase (N,) codes LEARNING/FREE/CONTACT; restarted (N,) bool; force (N, 3) N;
    force_along (N,) N; parameters, parameter_std (N, 4) SI (the object's, for the report only).
    With taps: raw (N, nv) N·m observer output without bias; columns (N, 5, nv) observer
    responses (see :class:`_ObserverTap`); velocity (N, nv) rad/s and effort (N, nv) N·m in
    model joint order. rejected: samples the Pipeline refused.
    """

    time: np.ndarray
    phase: np.ndarray
    restarted: np.ndarray
    force: np.ndarray
    force_along: np.ndarray
    parameters: np.ndarray
    parameter_std: np.ndarray
    rejected: int
    reject_message: str
    raw: np.ndarray | None = None
    columns: np.ndarray | None = None
    velocity: np.ndarray | None = None
    effort: np.ndarray | None = None


def run_pass(rec: Recording, settings: Settings, urdf: str, taps: bool = False) -> Trace:
    """Feed a recording through a fresh Pipeline, recording its outputs per sample (and, when
    ``taps``, the observer's responses). Raises TuneError when no sample fits the URDF."""
    pipe = Pipeline(settings, urdf, whole_recording=True)
    if pipe.base is not None:   # base.source odometry: the recording's base messages first
        if not rec.base_messages:
            raise TuneError(f"{rec.name}: base.source is odometry but the recording has no "
                            "odometry messages; expected nav_msgs/Odometry (--topics "
                            "odometry=TOPIC)")
        for msg in rec.base_messages:
            if isinstance(msg, OdometryMessage):
                pipe.add_odometry(msg)
            else:
                pipe.add_imu(msg)
    base_nv = pipe.model.base_nv   # the measured joints' rows and columns follow the base's
    nv = len(pipe.model.joint_names)
    obs_tap = (_ObserverTap(pipe.observer, nv, settings["friction.smoothing_velocity"])
               if taps else None)
    n = len(rec.samples)
    cols = _TraceColumns(n, nv, taps, pipe.object_model.size)
    restarts = pipe.observer.restarts
    for sample in rec.samples:
        effort = None
        if obs_tap is not None:
            try:
                _, velocity, effort = pipe.model.joint_map(sample.names).apply(sample)
                obs_tap.velocity = velocity[base_nv:]
            except Exception:  # the Pipeline rejects and counts it below
                effort = None
        rejected = pipe.rejects.total
        est = pipe.process(sample)
        if est is None:
            if (obs_tap is not None and pipe.rejects.total > rejected
                    and pipe.rejects.last_reason == "non_finite_output"):
                obs_tap.reset()   # the Pipeline restarted its observer
            continue
        restarted = pipe.observer.restarts != restarts
        restarts = pipe.observer.restarts
        if obs_tap is not None:
            obs_tap.step(est.time, pipe.last_raw_residual(),
                         pipe.last_mass_matrix()[base_nv:, base_nv:])
        cols.add(est, restarted, obs_tap, effort)
    if cols.count == 0:
        raise TuneError(
            f"{rec.name}: none of its {n} joint states could be used with this URDF "
            f"({pipe.rejects.last_message}); expected joint states of the robot the URDF "
            f"describes (joints {list(pipe.model.joint_names)})")
    return cols.trace(pipe.rejects.total, pipe.rejects.last_message)


class _TraceColumns:
    """Pre-allocated per-sample arrays filled during a pass."""

    def __init__(self, n: int, nv: int, taps: bool, m: int):
        self.count = 0
        self.time = np.zeros(n)
        self.phase = np.zeros(n, np.int8)
        self.restarted = np.zeros(n, bool)
        self.force = np.zeros((n, 3))
        self.force_along = np.zeros(n)
        self.parameters = np.zeros((n, m))
        self.parameter_std = np.zeros((n, m))
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
        if self.taps and tap is not None:
            self.raw[k] = tap.raw
            self.columns[k] = tap.columns
            self.velocity[k] = tap.velocity
            self.effort[k] = effort if effort is not None else np.nan
        self.count = k + 1

    def trace(self, rejected: int, message: str) -> Trace:
        n = self.count
        extra = {}
        if self.taps:
            extra = dict(raw=self.raw[:n], columns=self.columns[:n],
                         velocity=self.velocity[:n], effort=self.effort[:n])
        return Trace(self.time[:n], self.phase[:n], self.restarted[:n], self.force[:n],
                     self.force_along[:n], self.parameters[:n], self.parameter_std[:n],
                     rejected, message, **extra)


