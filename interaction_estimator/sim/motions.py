"""Desired motions of the built-in scenarios: smooth profiles, the path along the object after
contact, the tool path and posture reference on the control grid (:class:`_Plan`) and the
joint-space sweep of a scenario without an object (:class:`_JointPlan`), with the
controller gains they are followed with (see :mod:`.simulator`)."""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pinocchio as pin
from scipy.interpolate import CubicSpline

from .dynamics import _Robot, _Terms
from .scenarios import _ARM_PREFERRED, JOINT_NAMES, ScenarioSpec

# Controller gains (task space, per axis; posture as natural frequency and damping ratio).
TASK_STIFFNESS = 2500.0      # N/m
TASK_DAMPING = 200.0         # N·s/m
POSTURE_FREQUENCY = 8.0      # rad/s
POSTURE_DAMPING_RATIO = 1.0



# ------------------------------------------------------------------------------------------
# smooth profiles


def _smoothstep(s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Quintic 0 -> 1 on s in [0, 1] (clipped) and its first two derivatives in s."""
    s = np.clip(s, 0.0, 1.0)
    return (s**3 * (10 - 15 * s + 6 * s**2), 30 * s**2 * (1 - s) ** 2,
            60 * s * (1 - s) * (1 - 2 * s))


def _bump(s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """64 (s (1 - s))^3 on [0, 1], zero with zero slope and curvature at both ends, peak 1."""
    s = np.clip(s, 0.0, 1.0)
    w = s * (1 - s)
    dw, ddw = 1 - 2 * s, -2.0
    return 64 * w**3, 192 * w**2 * dw, 64 * (6 * w * dw**2 + 3 * w**2 * ddw)


def _envelope(s: np.ndarray, length: float, ramp: float
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Plateau 0 -> 1 -> 0 over [0, length] with quintic ramps of ``ramp`` s; zero outside."""
    up = _smoothstep(s / ramp)
    down = _smoothstep((length - s) / ramp)
    e = up[0] * down[0]
    de = up[1] / ramp * down[0] - up[0] * down[1] / ramp
    dde = (up[2] / ramp**2 * down[0] - 2 * up[1] * down[1] / ramp**2
           + up[0] * down[2] / ramp**2)
    inside = (s >= 0) & (s <= length)
    return e * inside, de * inside, dde * inside


def _contact_path(spec: ScenarioSpec, s: np.ndarray, contact_length: float
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Desired motion along u after contact, at contact times s (M,) s.

    Returns (x, x', x'', x_slow) in m, m/s, m/s^2, m:
    ``x = V int(e_s) + c e_w sum(a (cos(phi) - cos(w s + phi)))``. ``e_s`` is a plateau envelope
    over the moving time (the slow motion covers ``travel``), ``e_w`` a narrower one for the
    wiggles (with phi = 0 every wiggle is >= 0, so the object never goes behind its start);
    ``c`` = 1, or less for ``monotone`` scenarios if needed to keep ``x' >= 0``. x_slow is the
    slow part alone (for the posture keyframes).
    """
    move = contact_length - spec.hold
    ramp = min(1.5, move / 3.0)
    inset = 0.5 * ramp

    def envelopes(s_: np.ndarray):
        return _envelope(s_, move, ramp), _envelope(s_ - inset, move - 2 * inset, ramp)

    def wiggle(s_: np.ndarray):
        w_, dw_, ddw_ = np.zeros_like(s_), np.zeros_like(s_), np.zeros_like(s_)
        for wig in spec.wiggles:
            om = 2 * math.pi * wig.frequency
            w_ += wig.amplitude * (math.cos(wig.phase) - np.cos(om * s_ + wig.phase))
            dw_ += wig.amplitude * om * np.sin(om * s_ + wig.phase)
            ddw_ += wig.amplitude * om**2 * np.cos(om * s_ + wig.phase)
        return w_, dw_, ddw_

    grid = np.linspace(0.0, move, 8001)
    (eg, _, _), (ewg, dewg, _) = envelopes(grid)
    integral_e = np.concatenate(([0.0], np.cumsum(np.diff(grid) * 0.5 * (eg[1:] + eg[:-1]))))
    speed = spec.travel / integral_e[-1]
    scale = 1.0
    if spec.monotone:  # shrink the wiggles if they would make the desired motion go backwards
        wg, dwg, _ = wiggle(grid)
        back = dewg * wg + ewg * dwg
        neg = back < 0
        if np.any(neg):
            scale = min(1.0, 0.9 * float(np.min(speed * eg[neg] / -back[neg])))
    (e, de, dde), (ew, dew, ddew) = envelopes(s)
    w, dw, ddw = (scale * c for c in wiggle(s))
    slow = speed * np.interp(np.clip(s, 0.0, move), grid, integral_e)
    x = slow + ew * w
    xd = speed * e + dew * w + ew * dw
    xdd = speed * de + ddew * w + 2 * dew * dw + ew * ddw
    return x, xd, xdd, slow



class _Plan:
    """Desired tool path and posture reference on the control grid."""

    def __init__(self, spec: ScenarioSpec, robot: _Robot, t_ctrl: np.ndarray, t_contact: float,
                 duration: float):
        self.spec = spec
        u = np.asarray(spec.direction, float)
        pc = np.asarray(spec.contact_point, float)
        a_base = np.zeros(robot.nv)
        a_base[3:] = _ARM_PREFERRED
        a_contact = robot.ik(pc, a_base)
        a_start = robot.ik(pc + np.asarray(spec.start_offset), a_contact)
        self.a_initial = a_start
        nt = len(t_ctrl)
        self.p = np.zeros((nt, 3))
        self.v = np.zeros((nt, 3))
        self.acc = np.zeros((nt, 3))
        self.tangent = np.tile(u, (nt, 1))
        self.q_ref = np.zeros((nt, robot.nv))
        self.v_ref = np.zeros((nt, robot.nv))
        free = t_ctrl < t_contact
        # free phase: smooth transfer start -> contact point, with wiggles touching nothing
        tf = t_ctrl[free]
        S, dS, ddS = _smoothstep(tf / t_contact)
        off = np.asarray(spec.start_offset)
        b, db, ddb = _bump(tf / t_contact)
        wig = np.array([[0.05, 0.7], [0.04, 1.1], [0.035, 0.9]])  # m, Hz per world axis
        for ax in range(3):
            amp, om = wig[ax, 0], 2 * math.pi * wig[ax, 1]
            s_, c_ = np.sin(om * tf), np.cos(om * tf)
            w, dw, ddw = amp * s_, amp * om * c_, -amp * om**2 * s_
            T = t_contact
            self.p[free, ax] = pc[ax] + off[ax] * (1 - S) + b * w
            self.v[free, ax] = -off[ax] * dS / T + db / T * w + b * dw
            self.acc[free, ax] = (-off[ax] * ddS / T**2 + ddb / T**2 * w + 2 * db / T * dw
                                  + b * ddw)
        self.q_ref[free] = a_start + S[:, None] * (a_contact - a_start)
        self.v_ref[free] = dS[:, None] / t_contact * (a_contact - a_start)
        # contact phase
        sc = t_ctrl[~free] - t_contact
        x, xd, xdd, slow = _contact_path(spec, sc, duration - t_contact)
        if spec.direction_kind == "cartesian":
            # every world axis wiggles on its own (travel 0: the fixture stays near its rest)
            x3 = np.zeros((len(sc), 3))
            xd3 = np.zeros((len(sc), 3))
            xdd3 = np.zeros((len(sc), 3))
            for ax, wiggles in enumerate(spec.axis_wiggles):
                sub = replace(spec, wiggles=wiggles, travel=0.0, direction_kind="world",
                              axis_wiggles=(), mass=0.0, damping=0.0, stiffness=0.0,
                              static_force=0.0, physical={})
                x3[:, ax], xd3[:, ax], xdd3[:, ax], _ = _contact_path(sub, sc,
                                                                       duration - t_contact)
            self.p[~free] = pc + x3
            self.v[~free] = xd3
            self.acc[~free] = xdd3

            def slow_point(xs: float) -> np.ndarray:
                return pc
        elif spec.direction_kind == "arc":
            R = spec.physical["handle_radius_m"]
            n0 = np.cross(u, [0.0, 0.0, 1.0])
            hinge = pc - R * n0
            th, thd, thdd = x / R, xd / R, xdd / R
            nvec = np.cos(th)[:, None] * n0 + np.sin(th)[:, None] * u
            tvec = -np.sin(th)[:, None] * n0 + np.cos(th)[:, None] * u
            self.p[~free] = hinge + R * nvec
            self.v[~free] = R * thd[:, None] * tvec
            self.acc[~free] = R * thdd[:, None] * tvec - R * (thd**2)[:, None] * nvec
            self.tangent[~free] = tvec

            def slow_point(xs: float) -> np.ndarray:
                return hinge + R * (math.cos(xs / R) * n0 + math.sin(xs / R) * u)
        else:
            self.p[~free] = pc + x[:, None] * u
            self.v[~free] = xd[:, None] * u
            self.acc[~free] = xdd[:, None] * u

            def slow_point(xs: float) -> np.ndarray:
                return pc + xs * u
        # posture keyframes along the slow path (IK), cubic spline with zero end slopes
        move = duration - t_contact - spec.hold
        s_key = np.linspace(0.0, move, 7)
        _, _, _, slow_key = _contact_path(spec, s_key, duration - t_contact)
        keys = []
        seed = a_contact.copy()
        for xs in slow_key:
            if spec.base_follows:
                seed[:3] = a_contact[:3] + xs * u * np.array([1.0, 1.0, 0.0])
            seed = robot.ik(slow_point(xs), seed)
            keys.append(seed.copy())
        spline = CubicSpline(s_key, np.array(keys), bc_type="clamped")
        sc_c = np.clip(sc, 0.0, move)
        self.q_ref[~free] = spline(sc_c)
        self.v_ref[~free] = spline(sc_c, 1) * (sc <= move)[:, None]

    def torque(self, k: int, robot: _Robot, tm: _Terms, q: np.ndarray, v: np.ndarray,
               in_contact: bool) -> np.ndarray:
        """Joint torque (nv,) N·m/N at control tick k: task-space tracking of the tool path
        plus the null-space posture (see the module text), the pre-load once in contact."""
        Minv = np.linalg.inv(tm.M)
        JMi = tm.J @ Minv
        Lam = np.linalg.inv(JMi @ tm.J.T)
        vp = tm.J @ v
        F = (Lam @ (self.acc[k] - tm.gamma) + TASK_STIFFNESS * (self.p[k] - tm.p)
             + TASK_DAMPING * (self.v[k] - vp))
        if in_contact:
            F = F + self.spec.feedforward * self.tangent[k]
        kq = POSTURE_FREQUENCY**2
        dq = 2 * POSTURE_DAMPING_RATIO * POSTURE_FREQUENCY
        diag = np.diag(tm.M)
        err = pin.difference(robot.model, q, robot.config(self.q_ref[k]))
        tau_post = diag * (kq * err + dq * (self.v_ref[k] - v))
        tau_null = tau_post - tm.J.T @ (Lam @ (JMi @ tau_post))
        return tm.h + tm.J.T @ F + tau_null


class _JointPlan:
    """Desired joint trajectory on the control grid for a scenario without an object, and its
    computed-torque controller (free motion only)."""

    def __init__(self, spec: ScenarioSpec, robot: _Robot, t_ctrl: np.ndarray,
                 duration: float):
        nt, nv = len(t_ctrl), robot.nv
        e, de, dde = _envelope(t_ctrl, duration - spec.hold, spec.ramp)
        self.q_ref = np.zeros((nt, nv))
        self.v_ref = np.zeros((nt, nv))
        self.a_ref = np.zeros((nt, nv))
        by_joint = {s.joint: s for s in spec.joint_motion}
        for j, name in enumerate(JOINT_NAMES):
            sweep = by_joint[name]
            w, dw, ddw = np.zeros(nt), np.zeros(nt), np.zeros(nt)
            for term in sweep.terms:
                om = 2 * math.pi * term.frequency
                sn, cs = np.sin(om * t_ctrl + term.phase), np.cos(om * t_ctrl + term.phase)
                w += term.amplitude * sn
                dw += term.amplitude * om * cs
                ddw -= term.amplitude * om**2 * sn
            # the envelope scales the velocity, not the displacement: while it ramps, speeds
            # and accelerations stay those of the sinusoids (no fast transient of the whole
            # amplitude); the position is the integral (trapezoid rule on the control grid)
            self.v_ref[:, j] = e * dw
            self.a_ref[:, j] = de * dw + e * ddw
            self.q_ref[:, j] = sweep.centre + np.concatenate((
                [0.0], np.cumsum(0.5 * np.diff(t_ctrl) * (self.v_ref[1:, j]
                                                          + self.v_ref[:-1, j]))))
        self.a_initial = self.q_ref[0].copy()   # the centres, at rest

    def torque(self, k: int, robot: _Robot, tm: _Terms, q: np.ndarray, v: np.ndarray,
               in_contact: bool) -> np.ndarray:
        """Computed torque (Siciliano, Sciavicco, Villani and Oriolo, Robotics: Modelling,
        Planning and Control, 2009, sec. 8.5.2): ``tau = h + M (a_ref + K_q e + D_q e')``,
        ``e = q_ref - q``; joint torque (nv,) N·m/N."""
        kq = POSTURE_FREQUENCY**2
        dq = 2 * POSTURE_DAMPING_RATIO * POSTURE_FREQUENCY
        err = pin.difference(robot.model, q, robot.config(self.q_ref[k]))
        return tm.h + tm.M @ (self.a_ref[k] + kq * err + dq * (self.v_ref[k] - v))


