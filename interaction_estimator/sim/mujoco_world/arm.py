"""The arm worlds: a robot on a smooth path with a known force applied at its contact frame
(:func:`run_applied_force`), or with an object attached there and moved along one direction
(:func:`run_attached_object`); the reference paths and example forces they take."""
from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path

import mujoco
import numpy as np

from .common import (
    _EQUALITY,
    _OBJECT_BODY,
    _OBJECT_JOINT,
    CONTACT_FRAME,
    DEFAULT_ARM_CONFIGURATION,
    JOINT_OMEGA,
    JOINT_ZETA,
    NULL_OMEGA,
    NULL_ZETA,
    SOLIMP,
    STANDARD_GRAVITY,
    TASK_OMEGA,
    TASK_OMEGA_ROT,
    TASK_ZETA,
    GroundTruthRun,
    _cosine_path,
    _make_spec,
    _Recorder,
    _Robot,
    _smoothstep,
    read_urdf,
)


def make_path(amplitudes: Sequence[float] = (0.03, 0.02, 0.012),
              frequencies: Sequence[float] = (0.4, 0.9, 1.4),
              phases: Sequence[float] | None = None,
              hold: float = 0.5, ramp: float = 0.5) -> Callable[[float], float]:
    """Displacement along the direction (m) versus time since attachment (s).

    Zero for ``hold`` s (a quasi-static phase right after attaching), then a sum of sinusoids
    faded in by a quintic over ``ramp`` s. The defaults (3, 2, 1.2 cm at 0.4, 0.9, 1.4 Hz) excite
    acceleration (peak about 1.5 m/s^2), velocity (about 0.25 m/s) and displacement (about 5 cm).
    """
    amps = np.asarray(amplitudes, float)
    freqs = np.asarray(frequencies, float)
    ph = np.zeros_like(amps) if phases is None else np.asarray(phases, float)

    def path(tau: float) -> float:
        s = tau - hold
        if s <= 0.0:
            return 0.0
        w = _smoothstep(s / ramp)[0]
        return float(w * np.sum(amps * np.sin(2 * np.pi * freqs * s + ph)))

    path.hold = hold  # type: ignore[attr-defined]
    return path


def example_force(free_time: float = 1.0, peak: float = 30.0, ramp: float = 0.3,
                  direction: Sequence[float] | None = None) -> Callable[[float], np.ndarray]:
    """An invented contact force (N, robot on environment): varying at 0.5 to 2 Hz.

    Faded in over ``ramp`` s from ``free_time``. Without ``direction``, a 3-D force whose norm
    peaks near ``peak``; with a direction, a force along it between about 0.3 and 1.0 x peak.
    """
    u = None if direction is None else np.asarray(direction, float) / np.linalg.norm(direction)

    def force(t: float) -> np.ndarray:
        s = t - free_time
        if s < 0.0:
            return np.zeros(3)
        w = _smoothstep(s / ramp)[0] if ramp > 0 else 1.0
        if u is not None:
            mag = peak * (0.65 + 0.2 * np.sin(2 * np.pi * 0.7 * s)
                          + 0.15 * np.sin(2 * np.pi * 2.0 * s + 0.4))
            return w * mag * u
        return w * peak * np.array([
            0.35 * np.sin(2 * np.pi * 0.5 * s) + 0.15 * np.sin(2 * np.pi * 1.7 * s),
            0.30 * np.cos(2 * np.pi * 0.8 * s) * np.sin(2 * np.pi * 0.3 * s + 0.5),
            -0.55 - 0.25 * np.sin(2 * np.pi * 2.0 * s + 0.3),
        ])

    return force


# --------------------------------------------------------------------------------------------
# Run 1: known force applied at the contact frame
# --------------------------------------------------------------------------------------------

def run_applied_force(urdf_path: str | Path, force_fn: Callable[[float], Sequence[float]],
                      duration: float = 4.0, free_time: float = 1.0, dt: float = 1e-3,
                      seed: int = 0, q0: Sequence[float] | None = None,
                      motion_scale: float = 1.0, base_motion: bool = True,
                      contact_frame: str = CONTACT_FRAME) -> GroundTruthRun:
    """Simulate the robot on a smooth joint-space path; from ``free_time`` on the environment
    applies ``F_ext(t) = -force_fn(t)`` at the contact frame's origin.

    Controller: computed torque with MuJoCo's own M and qfrc_bias (gravity compensation
    included), ``tau = M (qdd_ref + Kd (qd_ref - qd) + Kp (q_ref - q)) + bias``,
    ``Kp = JOINT_OMEGA^2``, ``Kd = 2 JOINT_ZETA JOINT_OMEGA``. The controller does not know the
    external force, so the arm yields to it (a few degrees at 30 N). The path is
    ``q0 + A (1 - cos(w t))`` per joint, A 0.10 to 0.22 rad, 0.2 to 0.5 Hz (chosen by ``seed``,
    scaled by ``motion_scale``); base joints of a mobile URDF move slowly (5 cm and 0.1 rad at
    0.1 to 0.15 Hz) if ``base_motion``, else they hold still.

    ``force_fn(t)`` gets the absolute time (s) and returns the force (N, world frame) the robot
    applies to the environment; it is not called before ``free_time``.
    """
    urdf_text = read_urdf(urdf_path)
    robot = _Robot(_make_spec(urdf_text, dt, contact_frame), urdf_text)
    m, d = robot.model, robot.data
    n = robot.n
    rng = np.random.default_rng(seed)
    q_start = robot.default_q0() if q0 is None else np.asarray(q0, float)
    is_base = np.array([nm not in DEFAULT_ARM_CONFIGURATION for nm in robot.joint_names])
    amp = rng.uniform(0.10, 0.22, n) * rng.choice([-1.0, 1.0], n) * motion_scale
    omega = 2 * np.pi * rng.uniform(0.2, 0.5, n)
    base_amp = np.where(np.array(robot.joint_kinds) == "prismatic", 0.05, 0.1)
    amp[is_base] = base_amp[is_base] * (motion_scale if base_motion else 0.0)
    omega[is_base] = 2 * np.pi * rng.uniform(0.10, 0.15, int(is_base.sum()))

    kp, kd = JOINT_OMEGA**2, 2 * JOINT_ZETA * JOINT_OMEGA
    steps = int(round(duration / dt))
    out = _Recorder(steps, n)
    robot.set_state(q_start, np.zeros(n))
    qfrc_ext = np.zeros(m.nv)
    for k in range(steps):
        t = k * dt
        mujoco.mj_step1(m, d)
        q, v = robot.q(), robot.v()
        robot.check_limits(q, t)
        q_ref, qd_ref, qdd_ref = _cosine_path(q_start, amp, omega, t)
        tau = robot.mass_matrix() @ (qdd_ref + kd * (qd_ref - v) + kp * (q_ref - q)) + robot.bias()
        p = robot.site_pos()
        qfrc_ext[:] = 0.0
        contact = t >= free_time
        f_robot = np.asarray(force_fn(t), float).reshape(3) if contact else np.zeros(3)
        if contact:
            mujoco.mj_applyFT(m, d, -f_robot, np.zeros(3), p, robot.body, qfrc_ext)
        d.qfrc_applied[:] = qfrc_ext
        d.qfrc_applied[robot.vadr] += tau
        mujoco.mj_step2(m, d)
        out.record(k, t, q, v, tau, f_robot, qfrc_ext[robot.vadr], p, contact)
    run = out.finish(robot, urdf_text, dt)
    run.truth = {
        "scenario": "applied_force", "free_time": free_time, "contact_frame": contact_frame,
        "gravity": STANDARD_GRAVITY, "q0": q_start.tolist(),
        "controller": {"type": "joint computed torque", "kp": kp, "kd": kd},
    }
    run.reference_position = None
    return run


# --------------------------------------------------------------------------------------------
# Run 2: object attached at the contact frame
# --------------------------------------------------------------------------------------------

def run_attached_object(urdf_path: str | Path, mass: float, damping: float, stiffness: float,
                        static_force: float, direction: Sequence[float],
                        path_fn: Callable[[float], float] | None = None,
                        duration: float = 5.0, free_time: float = 1.0, dt: float = 1e-3,
                        gravity_on_object: bool = False, seed: int = 0,
                        q0: Sequence[float] | None = None, free_motion_scale: float = 1.0,
                        load_feedforward: bool = True,
                        contact_frame: str = CONTACT_FRAME) -> GroundTruthRun:
    """Simulate the robot moving an object along ``direction`` (world unit vector).

    The object is a point mass ``mass`` (kg) on a slide joint along ``direction`` through the
    contact point's position at the moment of attachment (``truth["attach_point"]``), with
    MuJoCo's joint spring (``stiffness``, N/m, rest at the attach point) and damper
    (``damping``, N s/m), and a constant resisting force ``static_force`` (N,
    ``qfrc_applied = -static_force`` on the slide, from attachment on).
    With ``gravity_on_object`` gravity acts on the object too (a lifted payload: the robot then
    carries ``mass * 9.80665 * u_z`` more along u); otherwise the object's weight is
    compensated (``gravcomp = 1``). Thus, along u, the robot applies
    ``f = mass x'' + damping x' + stiffness x + static_force_total`` with
    ``static_force_total = static_force + (mass * 9.80665 * u_z if gravity_on_object else 0)``,
    stored in ``truth["static_force"]``.

    Timeline: ``[0, free_time)`` free motion (a joint-space path with whole cycles that returns
    to rest at ``q0``; the object is detached and held at rest); at ``free_time`` the equality
    ``connect`` constraint (soft, solref = (2 dt, 1)) attaches the contact frame's origin to the
    object; from then on a resolved-acceleration task-space controller tracks
    ``p_ref = p_attach + u * path_fn(t - free_time)`` with the orientation held, and the null
    space holds the posture q0. ``path_fn`` defaults to :func:`make_path` (). With
    ``load_feedforward`` the controller also knows the object (like a configured payload) and
    adds ``J^T u (mass x_ref'' + damping x_ref' + stiffness x_ref + static_force_total)``;
    without it, the load is rejected by feedback alone, and the coupling of the arm's inertia
    across directions then makes the slide's guide push back perpendicular to u (e.g. -18.5 N
    along x beside the 19.6 N lift of a 2 kg payload at the default q0).

    Ground truth force from the equality constraint's own forces (efc_force), robot on object,
    world frame; true_external_torque = qfrc_constraint on the robot's joints.
    """
    urdf_text = read_urdf(urdf_path)
    u = np.asarray(direction, float).reshape(3)
    if np.linalg.norm(u) == 0:
        raise ValueError("direction must be non-zero")
    u = u / np.linalg.norm(u)
    if mass <= 0:
        raise ValueError("mass must be positive")
    path_fn = make_path() if path_fn is None else path_fn

    # Where the contact point rests at q0 (kinematics only, on the robot-only model).
    probe = _Robot(_make_spec(urdf_text, dt, contact_frame), urdf_text)
    q_start = probe.default_q0() if q0 is None else np.asarray(q0, float)
    probe.set_state(q_start, np.zeros(probe.n))
    mujoco.mj_kinematics(probe.model, probe.data)
    p_attach = probe.site_pos()

    spec = _make_spec(urdf_text, dt, contact_frame)
    obj = spec.worldbody.add_body(name=_OBJECT_BODY, pos=p_attach.tolist())
    obj.explicitinertial = True
    obj.mass = float(mass)
    obj.inertia = [1e-4, 1e-4, 1e-4]  # rotation is locked by the slide joint; any value works
    obj.gravcomp = 0.0 if gravity_on_object else 1.0
    jnt = obj.add_joint(name=_OBJECT_JOINT, type=mujoco.mjtJoint.mjJNT_SLIDE, axis=u.tolist(),
                        pos=[0.0, 0.0, 0.0])
    jnt.stiffness = [float(stiffness), 0.0, 0.0]
    jnt.damping = [float(damping), 0.0, 0.0]
    jnt.springref = 0.0
    jnt.limited = mujoco.mjtLimited.mjLIMITED_FALSE
    spec.add_equality(name=_EQUALITY, type=mujoco.mjtEq.mjEQ_CONNECT,
                      objtype=mujoco.mjtObj.mjOBJ_BODY, name1=_OBJECT_BODY, name2=contact_frame,
                      active=False, solref=[2 * dt, 1.0], solimp=SOLIMP)
    robot = _Robot(spec, urdf_text)
    m, d = robot.model, robot.data
    n = robot.n
    eq = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_EQUALITY, _EQUALITY)
    # connect: eq_data[0:3] anchor in body1 (object), [3:6] in body2 (tool): both origins.
    m.eq_data[eq, :6] = 0.0
    oj = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, _OBJECT_JOINT)
    obj_id = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_BODY, _OBJECT_BODY)
    oq, ov = m.jnt_qposadr[oj], m.jnt_dofadr[oj]

    # Free-motion path: whole cycles, so it ends at rest at q0 exactly at free_time.
    rng = np.random.default_rng(seed)
    amp = rng.uniform(0.05, 0.12, n) * rng.choice([-1.0, 1.0], n) * free_motion_scale
    if free_time > 0:
        cycles = np.maximum(1, np.round(rng.uniform(0.6, 1.6, n) * free_time))
        omega = 2 * np.pi * cycles / free_time
        amp = amp / np.maximum(1.0, cycles)  # keep accelerations modest for short free phases
    else:
        omega = np.zeros(n)
    kind = np.array(robot.joint_kinds)
    amp[kind == "prismatic"] *= 0.3

    kpj, kdj = JOINT_OMEGA**2, 2 * JOINT_ZETA * JOINT_OMEGA
    kpt, kdt = TASK_OMEGA**2, 2 * TASK_ZETA * TASK_OMEGA
    kpr, kdr = TASK_OMEGA_ROT**2, 2 * TASK_ZETA * TASK_OMEGA_ROT
    kpn, kdn = NULL_OMEGA**2, 2 * NULL_ZETA * NULL_OMEGA
    f_static = float(static_force)
    f0_total = f_static + (mass * STANDARD_GRAVITY * u[2] if gravity_on_object else 0.0)
    h = 1e-4  # s, central differences of path_fn for the reference velocity and acceleration

    steps = int(round(duration / dt))
    out = _Recorder(steps, n)
    xo, vo, ao = np.zeros(steps), np.zeros(steps), np.zeros(steps)
    robot.set_state(q_start, np.zeros(n))
    d.qpos[oq] = 0.0
    d.qvel[ov] = 0.0
    R_hold = None
    rows = None
    for k in range(steps):
        t = k * dt
        attached = t >= free_time
        if not d.eq_active[eq]:
            d.qpos[oq] = 0.0  # detached object held at rest at the attach point
            d.qvel[ov] = 0.0
            if attached:
                # Move the (resting) object to where the tool actually is, so the constraint
                # starts satisfied (the free-motion tracking leaves ~0.05 mm of error).
                mujoco.mj_kinematics(m, d)
                p_attach = robot.site_pos()
                m.body_pos[obj_id] = p_attach
                d.eq_active[eq] = 1
        mujoco.mj_step1(m, d)
        q, v = robot.q(), robot.v()
        robot.check_limits(q, t)
        M = robot.mass_matrix()
        p = robot.site_pos()
        if not attached:
            q_ref, qd_ref, qdd_ref = _cosine_path(q_start, amp, omega, t)
            qdd_cmd = qdd_ref + kdj * (qd_ref - v) + kpj * (q_ref - q)
            out.ref[k] = np.nan  # joint-space phase: no task reference
            d.qfrc_applied[ov] = 0.0
        else:
            if R_hold is None:
                R_hold = robot.site_rot()
            tau_s = t - free_time
            x = path_fn(tau_s)
            xd = (path_fn(tau_s + h) - path_fn(tau_s - h)) / (2 * h) if tau_s >= h else \
                (path_fn(tau_s + h) - x) / h
            xdd = (path_fn(tau_s + h) - 2 * x + path_fn(tau_s - h)) / h**2 if tau_s >= h else 0.0
            p_ref = p_attach + u * x
            jp, jr = robot.jacobian()
            J = np.vstack([jp, jr])
            vel = J @ v
            R = robot.site_rot()
            e_rot = 0.5 * sum(np.cross(R[:, i], R_hold[:, i]) for i in range(3))
            a = np.concatenate([u * xdd + kdt * (u * xd - vel[:3]) + kpt * (p_ref - p),
                                -kdr * vel[3:] + kpr * e_rot])
            Jpinv = np.linalg.pinv(J)
            qdd0 = kpn * (q_start - q) - kdn * v
            qdd_cmd = Jpinv @ (a - robot.jacobian_dot_v()) + (np.eye(n) - Jpinv @ J) @ qdd0
            out.ref[k] = p_ref
            d.qfrc_applied[ov] = -f_static
            if load_feedforward:
                f_ref = mass * xdd + damping * xd + stiffness * x + f0_total
                tau_ff = jp.T @ (u * f_ref)
        tau = M @ qdd_cmd + robot.bias() + (tau_ff if attached and load_feedforward else 0.0)
        d.qfrc_applied[robot.vadr] = tau
        xo[k], vo[k] = d.qpos[oq], d.qvel[ov]
        mujoco.mj_step2(m, d)
        # Forces of this step (state k). The connect residual is pos(object) - pos(tool) in
        # world axes; its Jacobian is J_object - J_tool, so qfrc_constraint = J^T efc_force and
        # efc_force is the force acting on body1 = the object, applied by the robot.
        f_robot = np.zeros(3)
        if attached:
            if rows is None or len(rows) != 3:
                equality = int(mujoco.mjtConstraint.mjCNSTR_EQUALITY)
                rows = np.flatnonzero((d.efc_type[:d.nefc] == equality)
                                      & (d.efc_id[:d.nefc] == eq))
            f_robot = d.efc_force[rows].copy()
            if len(rows) != 3:
                raise RuntimeError(f"expected 3 connect rows, found {len(rows)}")
        ao[k] = d.qacc[ov] if attached else 0.0  # held at rest while detached
        out.record(k, t, q, v, tau, f_robot, d.qfrc_constraint[robot.vadr], p, attached)
    run = out.finish(robot, urdf_text, dt)
    run.reference_position = out.ref.copy()
    run.object_position, run.object_velocity, run.object_acceleration = xo, vo, ao
    run.truth = {
        "scenario": "attached_object", "mass": float(mass), "damping": float(damping),
        "stiffness": float(stiffness), "static_force": f0_total,
        "static_force_applied": f_static, "direction": u.tolist(),
        "gravity_on_object": bool(gravity_on_object), "gravity": STANDARD_GRAVITY,
        "attach_point": p_attach.tolist(), "free_time": free_time,
        "contact_frame": contact_frame, "q0": q_start.tolist(),
        "controller": {"type": "task-space resolved acceleration", "kp": kpt, "kd": kdt,
                       "kp_rot": kpr, "kd_rot": kdr, "kp_null": kpn, "kd_null": kdn,
                       "free_motion_kp": kpj, "free_motion_kd": kdj,
                       "load_feedforward": bool(load_feedforward)},
        "attachment": {"type": "connect", "solref": [2 * dt, 1.0]},
    }
    return run
