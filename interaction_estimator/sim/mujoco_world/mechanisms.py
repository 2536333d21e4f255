"""Mechanisms and 3-D objects attached to the tool, the checks of the object models beyond one
direction (``environment.model`` cartesian, revolute, prismatic): a fixture of masses, springs
and dampers in 3-D (:func:`run_attached_fixture`) and a hinged door (:func:`run_hinged_door`),
both through the task-space harness of :func:`~.arm.run_attached_object`."""
from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import mujoco
import numpy as np

from .common import (
    _EQUALITY,
    CONTACT_FRAME,
    JOINT_OMEGA,
    JOINT_ZETA,
    NULL_OMEGA,
    NULL_ZETA,
    SOLIMP,
    TASK_OMEGA,
    TASK_OMEGA_ROT,
    TASK_ZETA,
    GroundTruthRun,
    _cosine_path,
    _make_spec,
    _Recorder,
    _Robot,
    read_urdf,
)
from .schedule import MultiSine


def rotation_matrix(axis: Sequence[float], angle: float) -> np.ndarray:
    """Rotation about a unit axis by ``angle`` rad (Rodrigues' formula)."""
    k = np.asarray(axis, float) / np.linalg.norm(axis)
    K = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return np.eye(3) + math.sin(angle) * K + (1.0 - math.cos(angle)) * K @ K


def _quaternion(R: np.ndarray) -> list[float]:
    q = np.zeros(4)
    mujoco.mju_mat2Quat(q, np.ascontiguousarray(R, float).ravel())
    return q.tolist()


def _run_attached(urdf_text: str, build: Callable, reference: Callable, duration: float,
                  free_time: float, dt: float, q0: Sequence[float] | None, seed: int,
                  contact_frame: str) -> tuple[GroundTruthRun, Any, Any]:
    """The task-space harness of :func:`run_attached_object` for any object built by
    ``build(spec, p_attach) -> (body, anchor, applied)``: ``body`` the name of the object's
    body the tool holds at ``anchor`` (its frame), ``applied`` {joint name: constant
    generalized force, N or N·m} on the object's own joints from the attachment on. From
    ``free_time`` on, the tool's origin tracks ``reference(tau, p_attach) -> (p, v, a)``
    (world, m, m/s, m/s^2), orientation held, posture q0 in the null space; before, a
    joint-space free motion ending at rest at q0. Returns (run, model, data)."""
    probe = _Robot(_make_spec(urdf_text, dt, contact_frame), urdf_text)
    q_start = probe.default_q0() if q0 is None else np.asarray(q0, float)
    probe.set_state(q_start, np.zeros(probe.n))
    mujoco.mj_kinematics(probe.model, probe.data)
    p_attach = probe.site_pos()
    spec = _make_spec(urdf_text, dt, contact_frame)
    body, anchor, applied = build(spec, p_attach)
    spec.add_equality(name=_EQUALITY, type=mujoco.mjtEq.mjEQ_CONNECT,
                      objtype=mujoco.mjtObj.mjOBJ_BODY, name1=body, name2=contact_frame,
                      active=False, solref=[2 * dt, 1.0], solimp=SOLIMP)
    robot = _Robot(spec, urdf_text)
    m, d = robot.model, robot.data
    n = robot.n
    eq = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_EQUALITY, _EQUALITY)
    m.eq_data[eq, :6] = 0.0
    m.eq_data[eq, 0:3] = anchor
    own = {name: int(m.jnt_dofadr[mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, name)])
           for name in applied}
    qadr_own = [int(m.jnt_qposadr[mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, name)])
                for name in applied]
    rng = np.random.default_rng(seed)
    amp = rng.uniform(0.05, 0.12, n) * rng.choice([-1.0, 1.0], n)
    cycles = np.maximum(1, np.round(rng.uniform(0.6, 1.6, n) * free_time))
    omega = 2 * np.pi * cycles / free_time
    amp = amp / np.maximum(1.0, cycles)
    amp[np.array(robot.joint_kinds) == "prismatic"] *= 0.3
    kpj, kdj = JOINT_OMEGA**2, 2 * JOINT_ZETA * JOINT_OMEGA
    kpt, kdt = TASK_OMEGA**2, 2 * TASK_ZETA * TASK_OMEGA
    kpr, kdr = TASK_OMEGA_ROT**2, 2 * TASK_ZETA * TASK_OMEGA_ROT
    kpn, kdn = NULL_OMEGA**2, 2 * NULL_ZETA * NULL_OMEGA
    steps = int(round(duration / dt))
    out = _Recorder(steps, n)
    robot.set_state(q_start, np.zeros(n))
    held = d.qpos[qadr_own].copy()
    R_hold = None
    rows = None
    for k in range(steps):
        t = k * dt
        attached = t >= free_time
        if not d.eq_active[eq]:
            d.qpos[qadr_own] = held   # the object waits at rest where the tool will take it
            d.qvel[list(own.values())] = 0.0
            if attached:
                d.eq_active[eq] = 1
        mujoco.mj_step1(m, d)
        q, v = robot.q(), robot.v()
        robot.check_limits(q, t)
        M = robot.mass_matrix()
        p = robot.site_pos()
        if not attached:
            q_ref, qd_ref, qdd_ref = _cosine_path(q_start, amp, omega, t)
            qdd_cmd = qdd_ref + kdj * (qd_ref - v) + kpj * (q_ref - q)
            out.ref[k] = np.nan
            for dof in own.values():
                d.qfrc_applied[dof] = 0.0
        else:
            if R_hold is None:
                R_hold = robot.site_rot()
            p_ref, v_ref, a_ref = reference(t - free_time, p_attach)
            jp, jr = robot.jacobian()
            J = np.vstack([jp, jr])
            vel = J @ v
            R = robot.site_rot()
            e_rot = 0.5 * sum(np.cross(R[:, i], R_hold[:, i]) for i in range(3))
            a = np.concatenate([a_ref + kdt * (v_ref - vel[:3]) + kpt * (p_ref - p),
                                -kdr * vel[3:] + kpr * e_rot])
            Jpinv = np.linalg.pinv(J)
            qdd0 = kpn * (q_start - q) - kdn * v
            qdd_cmd = Jpinv @ (a - robot.jacobian_dot_v()) + (np.eye(n) - Jpinv @ J) @ qdd0
            out.ref[k] = p_ref
            for name, dof in own.items():
                d.qfrc_applied[dof] = applied[name]
        tau = M @ qdd_cmd + robot.bias()
        d.qfrc_applied[robot.vadr] = tau
        mujoco.mj_step2(m, d)
        f_robot = np.zeros(3)
        if attached:
            if rows is None:
                equality = int(mujoco.mjtConstraint.mjCNSTR_EQUALITY)
                rows = np.flatnonzero((d.efc_type[:d.nefc] == equality)
                                      & (d.efc_id[:d.nefc] == eq))
                if len(rows) != 3:
                    raise RuntimeError(f"expected 3 connect rows, found {len(rows)}")
            f_robot = d.efc_force[rows].copy()
        out.record(k, t, q, v, tau, f_robot, d.qfrc_constraint[robot.vadr], p, attached)
    run = out.finish(robot, urdf_text, dt)
    run.reference_position = out.ref.copy()
    run.truth = {"attach_point": p_attach.tolist(), "free_time": free_time,
                 "contact_frame": contact_frame, "q0": q_start.tolist()}
    return run, m, d


def run_attached_fixture(urdf_path: str | Path, masses: Sequence[float],
                         dampings: Sequence[float], stiffnesses: Sequence[float],
                         static_forces: Sequence[float], rotation: np.ndarray,
                         amplitudes: Sequence[Sequence[float]] = ((0.025, 0.008),
                                                                  (0.022, 0.007),
                                                                  (0.020, 0.006)),
                         frequencies: Sequence[Sequence[float]] = ((0.45, 1.7), (0.65, 2.1),
                                                                   (0.85, 1.3)),
                         duration: float = 12.0, free_time: float = 1.5, dt: float = 1e-3,
                         seed: int = 0, q0: Sequence[float] | None = None,
                         contact_frame: str = CONTACT_FRAME) -> GroundTruthRun:
    """An object held by three orthogonal slide joints (a chain of three bodies, each sliding
    along one axis of the frame ``rotation`` (3x3, columns the axes, world frame) with
    MuJoCo's own spring ``stiffnesses[i]`` N/m and damper ``dampings[i]`` N·s/m and a constant
    resisting force ``static_forces[i]`` N), the last body held by the tool. Body i has mass
    ``masses[i]`` kg; moving along axis i moves bodies i..2, so along the axes the mass is
    diag(m0 + m1 + m2, m1 + m2, m2). Gravity on the object is compensated. The tool wiggles
    along every world axis (sums of sines, ``amplitudes`` m and ``frequencies`` Hz per axis).

    Ground truth (``truth``): ``mass_matrix``, ``damping_matrix``, ``stiffness_matrix``
    (rotation diag(...) rotation^T, world frame) and ``static_force`` (rotation f, N): the
    force the robot applies is F = M x'' + D x' + K x + f_s, x the displacement from the
    attach point."""
    R = np.asarray(rotation, float)
    mass_axes = np.array([sum(masses[i:]) for i in range(3)], float)

    def build(spec, p_attach):
        parent = spec.worldbody
        names = []
        for i in range(3):
            body = parent.add_body(name=f"harness_fixture_{i}",
                                   pos=(p_attach if i == 0 else np.zeros(3)).tolist(),
                                   quat=_quaternion(R) if i == 0 else [1.0, 0.0, 0.0, 0.0])
            body.explicitinertial = True
            body.mass = float(masses[i])
            body.inertia = [1e-4, 1e-4, 1e-4]
            body.gravcomp = 1.0
            axis = [0.0, 0.0, 0.0]
            axis[i] = 1.0
            joint = body.add_joint(name=f"harness_fixture_slide_{i}",
                                   type=mujoco.mjtJoint.mjJNT_SLIDE, axis=axis)
            joint.stiffness = [float(stiffnesses[i]), 0.0, 0.0]
            joint.damping = [float(dampings[i]), 0.0, 0.0]
            joint.springref = 0.0
            joint.limited = mujoco.mjtLimited.mjLIMITED_FALSE
            names.append(joint.name)
            parent = body
        return ("harness_fixture_2", np.zeros(3),
                {name: -float(f) for name, f in zip(names, static_forces, strict=True)})

    motions = [MultiSine(a, f, np.zeros(len(a)), hold=0.3, ramp=0.8,
                         duration=duration - free_time, fade_out=False)
               for a, f in zip(amplitudes, frequencies, strict=True)]

    def reference(tau, p_attach):
        parts = np.array([motion(tau) for motion in motions])   # rows: axes; x, x', x''
        return p_attach + parts[:, 0], parts[:, 1], parts[:, 2]

    run, _, _ = _run_attached(read_urdf(urdf_path), build, reference, duration, free_time, dt,
                              q0, seed, contact_frame)
    run.truth.update({
        "scenario": "attached_fixture",
        "mass_matrix": (R @ np.diag(mass_axes) @ R.T).tolist(),
        "damping_matrix": (R @ np.diag(dampings) @ R.T).tolist(),
        "stiffness_matrix": (R @ np.diag(stiffnesses) @ R.T).tolist(),
        "static_force": (R @ np.asarray(static_forces, float)).tolist(),
        "rotation": R.tolist(), "principal_damping": list(map(float, dampings)),
        "principal_stiffness": list(map(float, stiffnesses))})
    return run


def run_hinged_door(urdf_path: str | Path, axis: Sequence[float], opening: Sequence[float],
                    radius: float, door_mass: float, door_inertia: float, damping: float,
                    stiffness: float, closing_torque: float,
                    angle: Callable[[float], tuple[float, float, float]],
                    duration: float = 12.0, free_time: float = 1.5, dt: float = 1e-3,
                    seed: int = 0, q0: Sequence[float] | None = None,
                    contact_frame: str = CONTACT_FRAME) -> GroundTruthRun:
    """A door on a hinge joint about the unit ``axis`` (world), held by the tool at its handle,
    ``radius`` m from the axis; ``opening`` (world) is the handle's direction of motion when
    the door opens (made perpendicular to the axis and to the handle's arm). The hinge has
    MuJoCo's own spring ``stiffness`` N·m/rad (at rest where the tool takes the handle) and
    damper ``damping`` N·m·s/rad, and a constant closing torque ``closing_torque`` N·m. The door
    is a body of ``door_mass`` kg with its centre of mass half way to the handle and the
    rotational inertia ``door_inertia`` kg·m² about every axis through it; gravity on it is
    compensated. The tool follows the handle's circle at the opening angle ``angle(tau) ->
    (theta, theta', theta'')`` rad.

    Ground truth (``truth``): ``axis`` (unit, opening positive), ``axis_point`` (the hinge's
    position, m), ``radius``, the door's moment of inertia about the hinge from MuJoCo's mass
    matrix (``inertia``, kg·m²), ``rotary_damping``, ``rotary_stiffness``, ``torque`` and the
    parameters at the handle along the arc: mass = I / r^2, damping = c / r^2, stiffness =
    k / r^2, static_force = tau0 / r; ``angle`` (N,) the hinge angle, rad."""
    a = np.asarray(axis, float) / np.linalg.norm(axis)
    t0 = np.asarray(opening, float)
    t0 = t0 - (t0 @ a) * a
    t0 /= np.linalg.norm(t0)
    arm = np.cross(t0, a)   # hinge -> handle, so that a x arm = t0 (opening positive)
    hinge_box: dict[str, np.ndarray] = {}

    def build(spec, p_attach):
        hinge = p_attach - radius * arm
        hinge_box["point"] = hinge
        body = spec.worldbody.add_body(name="harness_door", pos=hinge.tolist())
        body.explicitinertial = True
        body.mass = float(door_mass)
        body.ipos = (0.5 * radius * arm).tolist()
        body.inertia = [float(door_inertia)] * 3
        body.gravcomp = 1.0
        joint = body.add_joint(name="harness_door_hinge", type=mujoco.mjtJoint.mjJNT_HINGE,
                               axis=a.tolist(), pos=[0.0, 0.0, 0.0])
        joint.stiffness = [float(stiffness), 0.0, 0.0]
        joint.damping = [float(damping), 0.0, 0.0]
        joint.springref = 0.0
        joint.limited = mujoco.mjtLimited.mjLIMITED_FALSE
        return "harness_door", radius * arm, {"harness_door_hinge": -float(closing_torque)}

    def reference(tau, p_attach):
        th, thd, thdd = angle(tau)
        w = rotation_matrix(a, th) @ (radius * arm)
        tangent = np.cross(a, w)
        p = hinge_box["point"] + w
        return p, thd * tangent, thdd * tangent + thd**2 * np.cross(a, tangent)

    run, m, d = _run_attached(read_urdf(urdf_path), build, reference, duration, free_time, dt,
                              q0, seed, contact_frame)
    joint = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, "harness_door_hinge")
    dof = int(m.jnt_dofadr[joint])
    full = np.zeros((m.nv, m.nv))
    mujoco.mj_fullM(m, d, full)
    inertia = float(full[dof, dof])
    hinge = hinge_box["point"]
    to_handle = run.contact_position - hinge
    cos = to_handle @ arm
    sin = to_handle @ t0
    run.truth.update({
        "scenario": "hinged_door", "axis": a.tolist(), "axis_point": hinge.tolist(),
        "radius": float(radius), "inertia": inertia, "rotary_damping": float(damping),
        "rotary_stiffness": float(stiffness), "torque": float(closing_torque),
        "mass": inertia / radius**2, "damping": damping / radius**2,
        "stiffness": stiffness / radius**2, "static_force": closing_torque / radius,
        "angle": np.where(run.in_contact, np.arctan2(sin, cos), 0.0).tolist()})
    return run
