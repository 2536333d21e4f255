"""The schedule of a validation run (:class:`~.object_world.ObjectWorld`): the object's
parameters (:class:`ObjectParams`), the motions along u (multi-sine, push, steps, hold), the
phases (free motion, contact) and the recorded run with its truth (:class:`ScheduledRun`)."""
from __future__ import annotations

import copy
import math
from dataclasses import dataclass

import numpy as np

from .common import _smoothstep

#
# One robot, one object on a slide along a world direction u, and a schedule of phases: free
# motion (joint space), contact (the contact frame attached to the object and moved along u),
# free motion again (object released), and so on; within a contact the object's parameters may
# change at given times. MuJoCo steps at ``dt`` (1 ms by default); the joint states are recorded
# at the sample rate (an integer divisor of 1/dt), as a robot publishes them while its own
# controller runs faster.

@dataclass(frozen=True)
class ObjectParams:
    """An object along u: f = mass x'' + damping x' + stiffness x + static_force (+ its weight
    along u when gravity acts on it). kg, N·s/m, N/m, N."""

    mass: float
    damping: float
    stiffness: float
    static_force: float

    def __post_init__(self):
        if not self.mass > 0:
            raise ValueError(f"object mass must be > 0 kg, got {self.mass!r}")
        if self.damping < 0 or self.stiffness < 0:
            raise ValueError(f"object damping and stiffness must be >= 0, got {self.damping!r}, "
                             f"{self.stiffness!r}")


class Motion:
    """Displacement of the contact point along u (m) against the time since contact began (s):
    ``motion(tau) -> (x, x', x'')``, analytic derivatives. Subclasses below."""

    duration: float = math.inf

    def __call__(self, tau: float) -> tuple[float, float, float]:
        raise NotImplementedError

    def peaks(self, step: float = 2e-3) -> tuple[float, float, float]:
        """(max |x| m, max |x'| m/s, max |x''| m/s^2) over [0, duration], sampled."""
        taus = np.arange(0.0, self.duration + step, step)
        vals = np.abs(np.array([self(t) for t in taus]))
        return tuple(float(v) for v in vals.max(axis=0))


def _quintic(s: float) -> tuple[float, float, float]:
    """Quintic smoothstep 10s^3 - 15s^4 + 6s^5 on [0, 1] and its derivatives w.r.t. s."""
    return _smoothstep(s)


def _quintic_integral(s: float) -> float:
    """Integral of the quintic smoothstep from 0 to s (s clipped to [0, 1] inside; linear after)."""
    if s <= 0.0:
        return 0.0
    if s >= 1.0:
        return 0.5 + (s - 1.0)
    return 2.5 * s**4 - 3.0 * s**5 + s**6


class Window:
    """1 for tau in [hold + ramp, duration - ramp], 0 before ``hold``, quintic ramps between, and
    after ``duration - ramp`` a quintic fade to 0 at ``duration`` (``fade_out``)."""

    def __init__(self, hold: float, ramp: float, duration: float, fade_out: bool = True):
        self.hold, self.ramp, self.duration, self.fade_out = hold, ramp, duration, fade_out

    def __call__(self, tau: float) -> tuple[float, float, float]:
        w, wd, wdd = _quintic((tau - self.hold) / self.ramp)
        wd, wdd = wd / self.ramp, wdd / self.ramp**2
        if self.fade_out:
            o, od, odd = _quintic((self.duration - tau) / self.ramp)
            od, odd = -od / self.ramp, odd / self.ramp**2
            w, wd, wdd = w * o, wd * o + w * od, wdd * o + 2 * wd * od + w * odd
        return w, wd, wdd


class MultiSine(Motion):
    """Sum of sines (amplitudes m, frequencies Hz, phases rad) under a :class:`Window`."""

    def __init__(self, amplitudes, frequencies, phases, hold: float, ramp: float,
                 duration: float, fade_out: bool = True):
        self.a = np.asarray(amplitudes, float)
        self.w = 2 * np.pi * np.asarray(frequencies, float)
        self.p = np.asarray(phases, float)
        self.window = Window(hold, ramp, duration, fade_out)
        self.hold, self.duration = hold, duration

    def __call__(self, tau):
        if tau <= self.hold or tau >= self.duration:
            return 0.0, 0.0, 0.0
        s_arg = self.w * (tau - self.hold) + self.p
        s = float(np.sum(self.a * np.sin(s_arg)))
        sd = float(np.sum(self.a * self.w * np.cos(s_arg)))
        sdd = float(-np.sum(self.a * self.w**2 * np.sin(s_arg)))
        w, wd, wdd = self.window(tau)
        return w * s, wd * s + w * sd, wdd * s + 2 * wd * sd + w * sdd

    def scaled(self, factor: float) -> MultiSine:
        out = copy.copy(self)
        out.a = self.a * factor
        return out


class Push(Motion):
    """A push at constant ``speed`` (m/s, signed) after ``hold`` s: the speed ramps up over
    ``ramp`` s (quintic), stays, and (``fade_out``) ramps down to rest at ``duration``."""

    def __init__(self, speed: float, hold: float, ramp: float, duration: float,
                 fade_out: bool = True):
        self.speed, self.hold, self.ramp, self.duration = speed, hold, ramp, duration
        self.fade_out = fade_out

    def __call__(self, tau):
        tau = min(tau, self.duration)
        r = self.ramp
        s_up = (tau - self.hold) / r
        up, upd, _ = _quintic(s_up)
        x = self.speed * r * _quintic_integral(s_up)
        v = self.speed * up
        a = self.speed * upd / r
        if self.fade_out:
            s_dn = (tau - (self.duration - r)) / r
            dn, dnd, _ = _quintic(s_dn)
            x -= self.speed * r * _quintic_integral(s_dn)
            v -= self.speed * dn
            a -= self.speed * dnd / r
        return x, v, a

    def scaled(self, factor: float) -> Push:
        out = copy.copy(self)
        out.speed = self.speed * factor
        return out


class Steps(Motion):
    """Moves of ``moves[i]`` m, each a quintic over ``times[i][1]`` s starting at ``times[i][0]``
    s, at rest in between (move, hold, move back, ...)."""

    def __init__(self, moves, times, duration: float):
        self.moves = np.asarray(moves, float)
        self.times = [tuple(map(float, t)) for t in times]
        self.duration = duration

    def __call__(self, tau):
        x = v = a = 0.0
        for dx, (t0, dur) in zip(self.moves, self.times):
            s, sd, sdd = _quintic((tau - t0) / dur)
            x += dx * s
            v += dx * sd / dur
            a += dx * sdd / dur**2
        return x, v, a

    def scaled(self, factor: float) -> Steps:
        out = copy.copy(self)
        out.moves = self.moves * factor
        return out


class Hold(Motion):
    """No motion: the contact point is held where contact began."""

    def __init__(self, duration: float):
        self.duration = duration

    def __call__(self, tau):
        return 0.0, 0.0, 0.0

    def scaled(self, factor: float) -> Hold:
        return self


@dataclass(frozen=True)
class FreePhase:
    """Free motion for ``duration`` s: the joints that move the contact frame follow
    ``q_rest + A (1 - cos(w t))`` in whole cycles (so the phase ends at rest where it began),
    A 0.05-0.12 rad (x 0.3 for prismatic joints) times ``scale`` divided by the cycle count;
    the other joints hold. ``seed`` draws A and w."""

    duration: float
    scale: float = 1.0
    seed: int = 0


@dataclass(frozen=True)
class ContactPhase:
    """Contact for ``duration`` s: the contact frame is attached to the object (where it is at
    the phase's start) and follows ``motion`` along u. ``objects``: (time since the phase
    began s, ObjectParams) pairs, the first at 0; a later pair changes the object's parameters
    while attached."""

    duration: float
    motion: Motion
    objects: tuple


@dataclass
class ScheduledRun:
    """A scheduled run recorded at the sample rate. SI units, world frame = URDF root.

    Joint states: ``time`` (N,) s, ``position``, ``velocity``, ``effort`` (N, n) in the
    JointState convention (continuous joints wrapped to [-pi, pi)); the effort is the link-side
    torque applied from that sample's step on (the controller runs at every MuJoCo step).
    Truth: ``force`` (N, 3) the force the robot applies to the object; ``external_torque`` (N, n)
    ``J^T F_ext`` of the attachment alone (MuJoCo's constraint rows of the attachment);
    ``other_constraint_torque`` (N, n) the rest of ``qfrc_constraint`` (mimic-joint couplings);
    ``contact_position`` (N, 3); ``attached`` (N,); ``episode`` (N,) the index of the object
    episode (a constant object in contact; -1 while detached); ``object_position``,
    ``object_velocity``, ``object_acceleration`` (N,) the object's slide state (x from the
    attach point; the acceleration is MuJoCo's qacc of that step); ``object_parameters`` (N, 4)
    [mass, damping, stiffness, static force including the weight along u] (NaN while detached);
    ``jacobian`` (K, 3, n) the contact point's positional Jacobian (world frame, joint order) at
    the samples ``jacobian_index`` (K,).
    """

    time: np.ndarray
    joint_names: tuple
    joint_kinds: tuple
    position: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray
    force: np.ndarray
    external_torque: np.ndarray
    other_constraint_torque: np.ndarray
    contact_position: np.ndarray
    attached: np.ndarray
    episode: np.ndarray
    object_position: np.ndarray
    object_velocity: np.ndarray
    object_acceleration: np.ndarray
    object_parameters: np.ndarray
    direction: np.ndarray
    jacobian: np.ndarray
    jacobian_index: np.ndarray
    rate: float
    dt: float
    urdf: str
    notes: list

    ARRAYS = ("time", "position", "velocity", "effort", "force", "external_torque",
              "other_constraint_torque", "contact_position", "attached", "episode",
              "object_position", "object_velocity", "object_acceleration", "object_parameters",
              "direction", "jacobian", "jacobian_index")

    @property
    def force_along(self) -> np.ndarray:
        """(N,) N: the truth force along u."""
        return self.force @ self.direction

    def regressor(self) -> np.ndarray:
        """(N, 4) truth regressor [x'', x', x, 1] of the object's own state."""
        return np.column_stack([self.object_acceleration, self.object_velocity,
                                self.object_position, np.ones(len(self.time))])
