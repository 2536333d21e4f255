"""The world of the Monte-Carlo validation: :class:`ObjectWorld`, any URDF robot with an object
on a slide along a world direction, attached to and released from the contact frame as a
schedule (:mod:`.schedule`) says, recorded at a sample rate below the simulation's."""
from __future__ import annotations

import xml.etree.ElementTree as ET
from collections.abc import Sequence
from pathlib import Path

import mujoco
import numpy as np

from .common import (
    _EQUALITY,
    _OBJECT_BODY,
    _OBJECT_JOINT,
    JOINT_OMEGA,
    JOINT_ZETA,
    NULL_OMEGA,
    NULL_ZETA,
    SOLIMP,
    STANDARD_GRAVITY,
    TASK_OMEGA,
    TASK_OMEGA_ROT,
    TASK_ZETA,
    _cosine_path,
    _make_spec,
    _Robot,
    _wrap,
    physics_urdf,
    read_urdf,
)
from .schedule import ContactPhase, FreePhase, ObjectParams, ScheduledRun


def _urdf_effort_limits(urdf_text: str) -> dict[str, float]:
    root = ET.fromstring(urdf_text)
    out = {}
    for j in root.findall("joint"):
        lim = j.find("limit")
        if lim is not None and lim.get("effort") is not None:
            out[j.get("name")] = float(lim.get("effort"))
    return out


class ObjectWorld:
    """A robot (URDF) with an object on a slide along ``direction`` (world unit vector),
    attachable to ``contact_frame`` by an equality ``connect`` constraint.

    The object: a point mass on a slide joint with MuJoCo's own joint spring (rest where it is
    attached) and damper, and a constant resisting force applied on the slide; its weight is
    compensated (``gravcomp``) unless ``gravity_on_object`` (a lifted load: its weight along u
    then adds to the static force). The attachment is made nearly rigid (solref (2 dt, 1),
    solimp 0.9999): the contact point and the object stay within about 1e-9 m/N of each other.

    Controllers (MuJoCo's own M and bias forces, i.e. computed torque): in free motion a
    joint-space PD on a cosine path (12 Hz, critically damped); in contact a task-space
    resolved-acceleration controller (10 Hz translation and orientation, orientation held, the
    posture held in the null space at 2 Hz) with the object's force as feed-forward (the robot
    knows its load, as a configured payload). The estimator sees none of this: only the joint
    states and efforts.
    """

    def __init__(self, urdf: str | Path, contact_frame: str, direction: Sequence[float],
                 q0: dict | None = None, dt: float = 1e-3, gravity_on_object: bool = False):
        self.urdf = read_urdf(urdf)
        u = np.asarray(direction, float).reshape(3)
        if not np.linalg.norm(u) > 0:
            raise ValueError(f"direction must be non-zero, got {direction!r}")
        self.u = u / np.linalg.norm(u)
        self.dt = float(dt)
        self.contact_frame = contact_frame
        self.gravity_on_object = bool(gravity_on_object)
        spec = _make_spec(self.urdf, dt, contact_frame)
        obj = spec.worldbody.add_body(name=_OBJECT_BODY, pos=[0.0, 0.0, 0.0])
        obj.explicitinertial = True
        obj.mass = 1.0
        obj.inertia = [1e-4, 1e-4, 1e-4]  # rotation is locked by the slide joint
        obj.gravcomp = 0.0 if gravity_on_object else 1.0
        jnt = obj.add_joint(name=_OBJECT_JOINT, type=mujoco.mjtJoint.mjJNT_SLIDE,
                            axis=self.u.tolist(), pos=[0.0, 0.0, 0.0])
        jnt.springref = 0.0
        jnt.limited = mujoco.mjtLimited.mjLIMITED_FALSE
        spec.add_equality(name=_EQUALITY, type=mujoco.mjtEq.mjEQ_CONNECT,
                          objtype=mujoco.mjtObj.mjOBJ_BODY, name1=_OBJECT_BODY,
                          name2=contact_frame, active=False, solref=[2 * dt, 1.0],
                          solimp=SOLIMP)
        self.robot = _Robot(spec, self.urdf)
        m = self.robot.model
        self.eq = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_EQUALITY, _EQUALITY)
        m.eq_data[self.eq, :6] = 0.0   # anchors at both bodies' origins
        self.oj = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, _OBJECT_JOINT)
        self.obj_id = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_BODY, _OBJECT_BODY)
        self.oq, self.ov = m.jnt_qposadr[self.oj], m.jnt_dofadr[self.oj]
        self.notes = physics_urdf(self.urdf)[1]
        r = self.robot
        q_start = np.array([(q0 or {}).get(nm, 0.0) for nm in r.joint_names])
        # start inside the joint ranges (e.g. fingers whose range does not contain 0)
        lo = np.where(np.isfinite(r.lower), r.lower, -np.inf)
        hi = np.where(np.isfinite(r.upper), r.upper, np.inf)
        unset = np.array([nm not in (q0 or {}) for nm in r.joint_names])
        finite = np.isfinite(lo) & np.isfinite(hi)
        mid = np.where(finite, 0.5 * (np.where(finite, lo, 0.0) + np.where(finite, hi, 0.0)), 0.0)
        outside = unset & ((q_start <= lo) | (q_start >= hi))
        q_start[outside] = mid[outside]
        self.q0 = q_start
        r.set_state(q_start, np.zeros(r.n))
        mujoco.mj_kinematics(m, r.data)
        mujoco.mj_comPos(m, r.data)
        jp, _ = r.jacobian()
        jp, jr = r.jacobian()
        self.chain = (np.abs(jp) + np.abs(jr)).sum(axis=0) > 1e-12   # joints moving the frame
        limits = _urdf_effort_limits(self.urdf)
        self.effort_limit = np.array([limits.get(nm, 0.0) for nm in r.joint_names])

    def force_budget(self, cap: float = 150.0) -> float:
        """The largest force along u (N) that the URDF's effort limits allow at q0: min over the
        joints moving the contact point of effort_limit / |J_p^T u|, capped at ``cap`` N."""
        r = self.robot
        r.set_state(self.q0, np.zeros(r.n))
        mujoco.mj_kinematics(r.model, r.data)
        mujoco.mj_comPos(r.model, r.data)
        lever = np.abs(r.jacobian()[0].T @ self.u)
        ok = (lever > 1e-9) & (self.effort_limit > 0)
        if not ok.any():
            return cap
        return float(min(cap, np.min(self.effort_limit[ok] / lever[ok])))

    def _set_object(self, p: ObjectParams) -> None:
        m = self.robot.model
        m.body_mass[self.obj_id] = p.mass
        m.dof_damping[self.ov] = p.damping
        m.jnt_stiffness[self.oj] = p.stiffness

    def static_total(self, p: ObjectParams) -> float:
        """Static force along u (N) the robot must apply: the applied one plus the object's
        weight along u when gravity acts on it."""
        w = p.mass * STANDARD_GRAVITY * self.u[2] if self.gravity_on_object else 0.0
        return p.static_force + w

    def simulate(self, phases: Sequence, rate: float,
                 jacobian_interval: float = 0.1) -> ScheduledRun:
        """Run ``phases`` (FreePhase / ContactPhase) from rest at q0; record at ``rate`` Hz
        (and the contact point's positional Jacobian every ``jacobian_interval`` s)."""
        dt = self.dt
        decim = int(round(1.0 / (rate * dt)))
        if decim < 1 or abs(decim * rate * dt - 1.0) > 1e-9:
            raise ValueError(f"rate {rate!r} Hz must divide the simulation rate {1 / dt:g} Hz")
        r = self.robot
        m, d = r.model, r.data
        n, u = r.n, self.u
        mujoco.mj_resetData(m, d)
        r.set_state(self.q0, np.zeros(n))
        d.eq_active[self.eq] = 0
        kpj, kdj = JOINT_OMEGA**2, 2 * JOINT_ZETA * JOINT_OMEGA
        kpt, kdt = TASK_OMEGA**2, 2 * TASK_ZETA * TASK_OMEGA
        kpr, kdr = TASK_OMEGA_ROT**2, 2 * TASK_ZETA * TASK_OMEGA_ROT
        kpn, kdn = NULL_OMEGA**2, 2 * NULL_ZETA * NULL_OMEGA
        kinds = np.array(r.joint_kinds)
        steps = sum(int(round(ph.duration / dt)) for ph in phases)
        ns = (steps + decim - 1) // decim
        rec = {name: np.zeros(shape) for name, shape in (
            ("time", ns), ("position", (ns, n)), ("velocity", (ns, n)), ("effort", (ns, n)),
            ("force", (ns, 3)), ("external_torque", (ns, n)), ("other_constraint_torque", (ns, n)),
            ("contact_position", (ns, 3)), ("attached", ns), ("episode", ns),
            ("object_position", ns), ("object_velocity", ns), ("object_acceleration", ns),
            ("object_parameters", (ns, 4)))}
        jac_every = max(1, int(round(jacobian_interval * rate)))
        jac_index = np.arange(0, ns, jac_every)
        jac = np.zeros((len(jac_index), 3, n))
        efc_vec = np.zeros(0)
        qfrc = np.zeros(m.nv)
        eye = np.eye(n)
        episode = -1
        k = 0
        t = 0.0
        for ph in phases:
            n_steps = int(round(ph.duration / dt))
            q_rest = r.q()
            if isinstance(ph, FreePhase):
                d.eq_active[self.eq] = 0
                rng = np.random.default_rng(ph.seed)
                amp = rng.uniform(0.05, 0.12, n) * rng.choice([-1.0, 1.0], n) * ph.scale
                cycles = np.maximum(1, np.round(rng.uniform(0.6, 1.6, n) * ph.duration))
                omega = 2 * np.pi * cycles / ph.duration
                amp = amp / cycles
                amp[kinds == "prismatic"] *= 0.3
                amp[~self.chain] = 0.0
                contact = None
            elif isinstance(ph, ContactPhase):
                if not ph.objects or ph.objects[0][0] != 0.0:
                    raise ValueError("a ContactPhase's first object must start at 0 s")
                mujoco.mj_kinematics(m, d)
                p_attach = r.site_pos()
                R_hold = r.site_rot()
                if not d.eq_active[self.eq]:
                    m.body_pos[self.obj_id] = p_attach
                    d.qpos[self.oq] = 0.0
                    d.qvel[self.ov] = 0.0
                    d.eq_active[self.eq] = 1
                x_offset = float(d.qpos[self.oq])
                changes = list(ph.objects)
                contact = True
            else:
                raise TypeError(f"unknown phase {ph!r}")
            current = None
            for i in range(n_steps):
                tau_s = i * dt
                if contact:
                    while changes and changes[0][0] <= tau_s + 1e-12:
                        current = changes.pop(0)[1]
                        self._set_object(current)
                        episode += 1
                    f0 = self.static_total(current)
                    d.qfrc_applied[self.ov] = -current.static_force
                else:
                    d.qpos[self.oq] = 0.0   # a released object rests where it was attached
                    d.qvel[self.ov] = 0.0
                    d.qfrc_applied[self.ov] = 0.0
                mujoco.mj_step1(m, d)
                q, v = r.q(), r.v()
                r.check_limits(q, t)
                M = r.mass_matrix()
                p = r.site_pos()
                if not contact:
                    q_ref, qd_ref, qdd_ref = _cosine_path(q_rest, amp, omega, tau_s)
                    qdd_cmd = qdd_ref + kdj * (qd_ref - v) + kpj * (q_ref - q)
                    tau = M @ qdd_cmd + r.bias()
                else:
                    x, xd, xdd = ph.motion(tau_s)
                    p_ref = p_attach + u * x
                    jp, jr = r.jacobian()
                    J = np.vstack([jp, jr])
                    vel = J @ v
                    # orientation error 0.5 sum_i R[:, i] x R_hold[:, i] = 0.5 vee(Rh R^T - R Rh^T)
                    R = r.site_rot()
                    S = R_hold @ R.T
                    e_rot = 0.5 * np.array([S[2, 1] - S[1, 2], S[0, 2] - S[2, 0],
                                            S[1, 0] - S[0, 1]])
                    a = np.concatenate([u * xdd + kdt * (u * xd - vel[:3]) + kpt * (p_ref - p),
                                        -kdr * vel[3:] + kpr * e_rot])
                    # J has full row rank near q0: J^+ = J^T (J J^T)^-1
                    Jpinv = np.linalg.solve(J @ J.T, J).T
                    qdd0 = kpn * (q_rest - q) - kdn * v
                    qdd_cmd = Jpinv @ (a - r.jacobian_dot_v()) + (eye - Jpinv @ J) @ qdd0
                    f_ref = (current.mass * xdd + current.damping * xd
                             + current.stiffness * (x + x_offset) + f0)
                    tau = M @ qdd_cmd + r.bias() + jp.T @ (u * f_ref)
                d.qfrc_applied[r.vadr] = tau
                xo, vo = float(d.qpos[self.oq]), float(d.qvel[self.ov])
                if k % decim == 0 and (k // decim) % jac_every == 0:
                    jac[(k // decim) // jac_every] = r.jacobian()[0]   # at q_k
                mujoco.mj_step2(m, d)
                if (k % decim) == 0:
                    j = k // decim
                    rec["time"][j] = t
                    rec["position"][j] = q
                    rec["velocity"][j] = v
                    rec["effort"][j] = tau
                    rec["contact_position"][j] = p
                    if contact:
                        rows = np.flatnonzero(
                            (d.efc_type[:d.nefc] == int(mujoco.mjtConstraint.mjCNSTR_EQUALITY))
                            & (d.efc_id[:d.nefc] == self.eq))
                        if len(rows) != 3:
                            raise RuntimeError(f"expected 3 connect rows, found {len(rows)}")
                        # the connect residual is pos(object) - pos(tool): efc_force acts on
                        # the object (body1), applied by the robot
                        rec["force"][j] = d.efc_force[rows]
                        if len(efc_vec) < d.nefc:
                            efc_vec = np.zeros(d.nefc)
                        efc_vec[:] = 0.0
                        efc_vec[rows] = d.efc_force[rows]
                        mujoco.mj_mulJacTVec(m, d, qfrc, efc_vec[:d.nefc])
                        rec["external_torque"][j] = qfrc[r.vadr]
                        rec["object_position"][j] = xo
                        rec["object_velocity"][j] = vo
                        rec["object_acceleration"][j] = d.qacc[self.ov]
                        rec["object_parameters"][j] = (current.mass, current.damping,
                                                       current.stiffness, f0)
                        rec["attached"][j] = 1.0
                        rec["episode"][j] = episode
                    else:
                        rec["object_parameters"][j] = np.nan
                        rec["episode"][j] = -1
                    rec["other_constraint_torque"][j] = (d.qfrc_constraint[r.vadr]
                                                         - rec["external_torque"][j])
                k += 1
                t = k * dt
        rec["position"] = _wrap(rec["position"], r.continuous)
        return ScheduledRun(
            **{key: rec[key] for key in rec if key not in ("attached", "episode")},
            attached=rec["attached"].astype(bool), episode=rec["episode"].astype(int),
            joint_names=r.joint_names, joint_kinds=r.joint_kinds, direction=u.copy(),
            jacobian=jac, jacobian_index=jac_index,
            rate=float(rate), dt=dt, urdf=self.urdf, notes=list(self.notes))
