"""What is removed from the measured effort before the observer: joint friction and torque bias.

Joint-side torque ``tau = tau_m - b - tau_f(q')``: ``tau_f = f_v q' + f_c tanh(q'/eps)`` is the
friction model (motor-side efforts only) and ``b`` the per-joint bias, learned while the robot
moves freely. The bias is applied to the observer's output (the residual computed without bias
settles at -b in free motion), which is the same thing for a constant b.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike

from .compiled import kernel
from .records import B1, F8, record

FRICTION_PARAMS = record(
    "friction parameters",
    ("enabled", B1, "", "motor-side efforts with a non-zero friction model"),
    ("smoothing_velocity", F8, "rad/s or m/s", "eps of the smooth sign tanh(q'/eps)"),
)
FRICTION_JOINTS = record(
    "friction, per joint",
    ("viscous", F8, "N·m·s/rad or N·s/m", "viscous coefficient f_v"),
    ("coulomb", F8, "N·m or N", "Coulomb level f_c"),
)
BIAS_PARAMS = record(
    "torque bias parameters",
    ("time_constant_s", F8, "s", "time constant of bias learning in free motion"),
    ("max_rate", F8, "N·m/s", "largest change of the bias per second"),
    ("limit", F8, "N·m", "largest magnitude of the bias"),
    ("learn", B1, "", "learn the bias in free motion"),
)
BIAS_STATE = record(
    "torque bias state",
    ("learned", B1, "", "the bias has been learned since the last reset"),
    ("last_learned_s", F8, "s", "when it was last learned"),
)
BIAS_JOINTS = record(
    "torque bias, per joint",
    ("initial", F8, "N·m or N", "the bias to start from (parameter file)"),
    ("value", F8, "N·m or N", "the bias b now"),
)


@kernel
def friction_torque(out, v, joints, eps):
    """out (nv,) = tau_f = f_v v + f_c tanh(v / eps), N·m, at joint velocity v (nv,) rad/s;
    joints: (nv,) FRICTION_JOINTS."""
    for i in range(out.shape[0]):
        out[i] = joints[i].viscous * v[i] + joints[i].coulomb * math.tanh(v[i] / eps)


@kernel
def bias_update(p, s, joints, t, dt, raw, limited):
    """Move each joint's bias toward -raw (the residual computed without bias, (nv,) N·m):
    a first-order low-pass with time constant p.time_constant_s, its size limited to
    +/- p.limit N·m and, when ``limited`` (free motion, as opposed to the start-up phase), its
    change to p.max_rate N·m/s: a sensor's bias drifts slowly, a contact building up does not,
    so a force that rises faster than that shows in the residual instead of being learned."""
    if not p.learn or dt <= 0.0:
        return
    alpha = 1.0 - math.exp(-dt / p.time_constant_s)
    rate = p.max_rate * dt if limited else math.inf
    limit = p.limit
    for i in range(joints.shape[0]):
        value = joints[i].value
        step = -alpha * (raw[i] + value)
        if step > rate:
            step = rate
        elif step < -rate:
            step = -rate
        b = value + step
        if b > limit:
            b = limit
        elif b < -limit:
            b = -limit
        joints[i].value = b
    s.learned = True
    s.last_learned_s = t


class FrictionRecords(NamedTuple):
    params: np.ndarray   # (1,) FRICTION_PARAMS
    joints: np.ndarray   # (nv,) FRICTION_JOINTS


class BiasRecords(NamedTuple):
    params: np.ndarray   # (1,) BIAS_PARAMS
    state: np.ndarray    # (1,) BIAS_STATE
    joints: np.ndarray   # (nv,) BIAS_JOINTS


class FrictionModel:
    """Joint friction ``tau_f = f_v q' + f_c tanh(q' / eps)`` (N·m), for motor-side efforts.

    Viscous plus Coulomb friction with a smooth sign (a common smooth approximation, e.g.
    Olsson et al., "Friction models and friction compensation", Eur. J. Control 1998).
    """

    def __init__(self, viscous: ArrayLike, coulomb: ArrayLike, eps: float, enabled: bool,
                 records: FrictionRecords | None = None):
        viscous, coulomb = np.asarray(viscous, float), np.asarray(coulomb, float)
        self.records = (FrictionRecords(FRICTION_PARAMS.one(), FRICTION_JOINTS.many(len(viscous)))
                        if records is None else records)
        self.records.joints["viscous"] = viscous
        self.records.joints["coulomb"] = coulomb
        p = self.records.params[0]
        p["smoothing_velocity"] = float(eps)
        p["enabled"] = bool(enabled) and bool(np.any(viscous) or np.any(coulomb))

    viscous = property(lambda self: self.records.joints["viscous"].copy())
    coulomb = property(lambda self: self.records.joints["coulomb"].copy())
    eps = property(lambda self: float(self.records.params[0]["smoothing_velocity"]))
    enabled = property(lambda self: bool(self.records.params[0]["enabled"]))

    def torque(self, velocity: np.ndarray) -> np.ndarray | float:
        """Friction torque (nv,) N·m at joint velocity (nv,) rad/s; 0.0 when disabled."""
        if not self.enabled:
            return 0.0
        out = np.empty(len(self.records.joints))
        friction_torque(out, np.ascontiguousarray(velocity, dtype=float), self.records.joints,
                        self.eps)
        return out


class BiasEstimator:
    """Per-joint torque-sensor bias b (N·m), learned while the robot moves freely.

    In free motion the residual computed without bias settles at -b, so b is a first-order
    low-pass (time constant T s) of -r_raw, its change limited to max_rate N·m/s and its size to
    +/- limit N·m. ``age`` is the time since the bias was last learned, s.
    """

    def __init__(self, initial: ArrayLike, time_constant: float, max_rate: float,
                 limit: float, learn: bool, records: BiasRecords | None = None):
        initial = np.asarray(initial, float)
        self.records = (BiasRecords(BIAS_PARAMS.one(), BIAS_STATE.one(),
                                    BIAS_JOINTS.many(len(initial)))
                        if records is None else records)
        self.records.joints["initial"] = initial
        p = self.records.params[0]
        p["time_constant_s"], p["max_rate"], p["limit"] = time_constant, max_rate, limit
        p["learn"] = bool(learn)
        self.reset()

    initial = property(lambda self: self.records.joints["initial"].copy())
    time_constant = property(lambda self: float(self.records.params[0]["time_constant_s"]))
    max_rate = property(lambda self: float(self.records.params[0]["max_rate"]))
    limit = property(lambda self: float(self.records.params[0]["limit"]))
    learn = property(lambda self: bool(self.records.params[0]["learn"]))

    @property
    def value(self) -> np.ndarray:
        """(nv,) the bias now, N·m (a copy)."""
        return self.records.joints["value"].copy()

    @value.setter
    def value(self, values: np.ndarray) -> None:
        self.records.joints["value"] = values

    @property
    def last_learned(self) -> float | None:
        """s, when the bias was last learned (None: never)."""
        s = self.records.state[0]
        return float(s["last_learned_s"]) if s["learned"] else None

    @last_learned.setter
    def last_learned(self, t: float | None) -> None:
        s = self.records.state[0]
        s["learned"] = t is not None
        s["last_learned_s"] = 0.0 if t is None else t

    def reset(self) -> None:
        self.records.joints["value"] = np.clip(self.initial, -self.limit, self.limit)
        self.last_learned = None

    def update(self, t: float, dt: float, raw_residual: np.ndarray) -> None:
        """Move b toward -raw_residual (raw_residual (nv,) N·m, computed without bias)."""
        r = self.records
        bias_update(r.params[0], r.state[0], r.joints, float(t), float(dt),
                    np.ascontiguousarray(raw_residual, dtype=float), True)

    def age(self, t: float) -> float:
        """s since the bias was last learned (inf when never)."""
        last = self.last_learned
        return math.inf if last is None else t - last
