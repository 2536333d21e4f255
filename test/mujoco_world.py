"""Ground-truth physics harness: the Marten robot simulated in MuJoCo.

This module is test support, not part of the package. It stays independent of the estimator:
MuJoCo is the physics engine here, and nothing from ``interaction_estimator`` is imported
(the URDF is read as a text file). The estimator's tests feed the recorded joint states and
efforts to the estimator and compare its output with the ground truth recorded here.

Two scenarios:

* :func:`run_applied_force` -- the arm moves along a smooth joint-space path under a
  computed-torque controller; after ``free_time`` the environment pushes on the contact frame
  with ``F_ext(t) = -force_fn(t)`` (``mj_applyFT`` at the frame's origin).
* :func:`run_attached_object` -- an object (a body on a slide joint along ``direction``, with
  MuJoCo's own spring and damper, its own mass and a constant resisting force) is attached to
  the contact frame with an equality ``connect`` constraint at ``free_time``; a task-space
  (resolved-acceleration) controller makes the tool follow ``path_fn`` along the direction.

:func:`corrupt` adds sensor imperfections to a run (noise, encoder quantization, effort bias).

Conventions (the project's DESIGN.md, section 3):

* ``true_force`` is the force the ROBOT APPLIES TO THE ENVIRONMENT, world frame (the URDF root).
* ``true_external_torque`` is the external joint torque acting on the robot,
  ``J^T F_ext`` with ``F_ext = -true_force``.
* Sample ``k`` holds the state at ``time[k]`` and the effort applied from ``time[k]`` to
  ``time[k+1]``. MuJoCo's semi-implicit Euler integrator (with the implicit Euler damping
  switched off) makes ``(velocity[k+1] - velocity[k]) / dt`` exactly the joint acceleration
  that solves ``M(q_k) qdd + bias(q_k, v_k) = effort_k + true_external_torque_k``.
* Gravity: 9.80665 m/s^2 (standard gravity, CGPM 1901) along -z.

MuJoCo specifics verified on this machine (see /work/shared/NOTES.md): the URDF loads with
``MjSpec.from_string`` after a ``<mujoco><compiler .../></mujoco>`` element is inserted inside
``<robot>``; in 4.0 joint ``damping`` and ``stiffness`` are 3-vectors.
"""
from __future__ import annotations

import copy
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path

import mujoco
import numpy as np

STANDARD_GRAVITY = 9.80665  # m/s^2, CGPM (3rd General Conference on Weights and Measures, 1901)
CONTACT_FRAME = "tool_tip"
_SITE_NAME = "harness_contact_site"
_OBJECT_BODY = "harness_object"
_OBJECT_JOINT = "harness_object_slide"
_EQUALITY = "harness_attach"
_COMPILER_TAG = ('<mujoco><compiler discardvisual="true" fusestatic="false" '
                 'balanceinertia="false"/></mujoco>')

# Controller gains (closed-loop natural frequencies; computed torque decouples the joints, so
# each behaves as a unit-mass second-order system). omega * dt = 0.075 rad at 1 ms: far inside
# the stability region of the semi-implicit Euler step (omega * dt < 2).
JOINT_OMEGA = 2 * np.pi * 12.0     # rad/s, joint-space computed torque (run_applied_force)
JOINT_ZETA = 1.0                   # critically damped
TASK_OMEGA = 2 * np.pi * 10.0      # rad/s, task-space translation (run_attached_object)
TASK_OMEGA_ROT = 2 * np.pi * 10.0  # rad/s, task-space orientation
TASK_ZETA = 1.0
NULL_OMEGA = 2 * np.pi * 2.0       # rad/s, posture in the null space of the task
NULL_ZETA = 1.0

# Start configuration: bent and well conditioned (no aligned axes, elbow and wrist bent).
DEFAULT_ARM_CONFIGURATION = {
    "marten_shoulder_yaw": 0.1,
    "marten_shoulder_pitch": 0.5,
    "marten_upper_arm_roll": 0.2,
    "marten_elbow_pitch": 1.2,
    "marten_forearm_roll": -0.3,
    "marten_wrist_pitch": 0.6,
    "marten_wrist_roll": 0.1,
}


@dataclass
class GroundTruthRun:
    """One simulated run and its ground truth. Arrays are in SI units, rows are samples.

    ``time`` (N,) s; ``position``, ``velocity``, ``effort`` (N, n) as a JointState carries them
    (continuous joints as an angle wrapped to [-pi, pi)); ``effort`` is the joint torque/force
    the actuators applied (an ideal link-side torque sensor); ``true_force`` (N, 3) the force
    the robot applies to the environment at the contact point, world frame; ``true_external_torque``
    (N, n) ``J^T F_ext``; ``contact_position`` (N, 3) world position of the contact frame;
    ``in_contact`` (N,) bool. For :func:`run_attached_object`, ``object_position``,
    ``object_velocity`` and ``object_acceleration`` (N,) hold the object's own slide-joint state
    (x measured from the attach point along ``direction``; acceleration = forward difference of
    velocity, i.e. MuJoCo's qacc of that step); otherwise they are None.
    """

    time: np.ndarray
    joint_names: tuple[str, ...]
    position: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray
    true_force: np.ndarray
    true_external_torque: np.ndarray
    contact_position: np.ndarray
    in_contact: np.ndarray
    truth: dict
    urdf: str
    joint_kinds: tuple[str, ...] = ()          # "revolute", "continuous" or "prismatic"
    dt: float = 1e-3
    reference_position: np.ndarray | None = None  # (N, 3) task reference, world; NaN if none
    object_position: np.ndarray | None = None
    object_velocity: np.ndarray | None = None
    object_acceleration: np.ndarray | None = None
    corruption: dict = field(default_factory=dict)


# --------------------------------------------------------------------------------------------
# Model construction
# --------------------------------------------------------------------------------------------

def read_urdf(urdf: str | Path) -> str:
    """URDF text from a path, or the text itself if it already is URDF."""
    if isinstance(urdf, str) and urdf.lstrip().startswith("<"):
        return urdf
    return Path(urdf).read_text(encoding="utf-8")


def _urdf_joint_kinds(urdf_text: str) -> dict[str, str]:
    import xml.etree.ElementTree as ET
    root = ET.fromstring(urdf_text)
    return {j.get("name"): j.get("type") for j in root.iter("joint")}


def _make_spec(urdf_text: str, dt: float, contact_frame: str) -> mujoco.MjSpec:
    idx = urdf_text.rfind("</robot>")
    if idx < 0:
        raise ValueError("not a URDF: no </robot>")
    spec = mujoco.MjSpec.from_string(urdf_text[:idx] + _COMPILER_TAG + urdf_text[idx:])
    spec.option.timestep = dt
    spec.option.gravity = [0.0, 0.0, -STANDARD_GRAVITY]
    spec.option.integrator = mujoco.mjtIntegrator.mjINT_EULER
    # Explicit everything: no implicit Euler damping (keeps (v[k+1]-v[k])/dt == qacc[k]), no
    # contacts (the URDF has no collision geometry anyway), no joint limits (the harness checks
    # that its paths stay inside the URDF limits instead), so that qfrc_constraint holds only
    # the attachment's force.
    spec.option.disableflags |= (mujoco.mjtDisableBit.mjDSBL_EULERDAMP
                                 | mujoco.mjtDisableBit.mjDSBL_CONTACT
                                 | mujoco.mjtDisableBit.mjDSBL_LIMIT)
    # Newton solver run to round-off: M qacc = forces + J^T efc_force holds only as well as the
    # solver converged (the default 1e-8 leaves ~5e-8 N of imbalance in the attached runs).
    spec.option.tolerance = 1e-14
    body = spec.body(contact_frame)
    if body is None:
        raise ValueError(f"contact frame {contact_frame!r} is not a link of the URDF")
    body.add_site(name=_SITE_NAME, pos=[0.0, 0.0, 0.0])
    return spec


class _Robot:
    """Compiled model plus the indices the controllers need."""

    def __init__(self, spec: mujoco.MjSpec, urdf_text: str):
        self.model = spec.compile()
        self.data = mujoco.MjData(self.model)
        m = self.model
        kinds = _urdf_joint_kinds(urdf_text)
        names, qadr, vadr, lo, hi, jkinds = [], [], [], [], [], []
        for j in range(m.njnt):
            name = mujoco.mj_id2name(m, mujoco.mjtObj.mjOBJ_JOINT, j)
            if name == _OBJECT_JOINT:
                continue
            if int(m.jnt_type[j]) not in (int(mujoco.mjtJoint.mjJNT_HINGE),
                                          int(mujoco.mjtJoint.mjJNT_SLIDE)):
                raise ValueError(f"joint {name}: only revolute/continuous/prismatic supported")
            names.append(name)
            qadr.append(m.jnt_qposadr[j])
            vadr.append(m.jnt_dofadr[j])
            kind = kinds.get(name, "revolute")
            jkinds.append(kind)
            if kind == "continuous":
                lo.append(-np.inf)
                hi.append(np.inf)
            else:
                lo.append(m.jnt_range[j, 0])
                hi.append(m.jnt_range[j, 1])
        self.joint_names = tuple(names)
        self.joint_kinds = tuple(jkinds)
        self.qadr = np.array(qadr)
        self.vadr = np.array(vadr)
        self.lower = np.array(lo)
        self.upper = np.array(hi)
        self.continuous = np.array([k == "continuous" for k in jkinds])
        self.site = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_SITE, _SITE_NAME)
        self.body = m.site_bodyid[self.site]
        self.n = len(names)
        self.M = np.zeros((m.nv, m.nv))
        self.jacp = np.zeros((3, m.nv))
        self.jacr = np.zeros((3, m.nv))
        self.jdp = np.zeros((3, m.nv))
        self.jdr = np.zeros((3, m.nv))

    def default_q0(self) -> np.ndarray:
        return np.array([DEFAULT_ARM_CONFIGURATION.get(nm, 0.0) for nm in self.joint_names])

    def set_state(self, q: np.ndarray, v: np.ndarray) -> None:
        self.data.qpos[self.qadr] = q
        self.data.qvel[self.vadr] = v

    def q(self) -> np.ndarray:
        return self.data.qpos[self.qadr].copy()

    def v(self) -> np.ndarray:
        return self.data.qvel[self.vadr].copy()

    def mass_matrix(self) -> np.ndarray:
        mujoco.mj_fullM(self.model, self.data, self.M)
        return self.M[np.ix_(self.vadr, self.vadr)]

    def bias(self) -> np.ndarray:
        return self.data.qfrc_bias[self.vadr].copy()

    def jacobian(self) -> tuple[np.ndarray, np.ndarray]:
        mujoco.mj_jacSite(self.model, self.data, self.jacp, self.jacr, self.site)
        return self.jacp[:, self.vadr].copy(), self.jacr[:, self.vadr].copy()

    def jacobian_dot_v(self) -> np.ndarray:
        mujoco.mj_jacDot(self.model, self.data, self.jdp, self.jdr,
                         self.data.site_xpos[self.site], self.body)
        v = self.data.qvel
        return np.concatenate([self.jdp @ v, self.jdr @ v])

    def site_pos(self) -> np.ndarray:
        return self.data.site_xpos[self.site].copy()

    def site_rot(self) -> np.ndarray:
        return self.data.site_xmat[self.site].reshape(3, 3).copy()

    def site_vel(self) -> np.ndarray:
        jp, jr = self.jacobian()
        v = self.v()
        return np.concatenate([jp @ v, jr @ v])

    def check_limits(self, q: np.ndarray, t: float) -> None:
        bad = (q < self.lower) | (q > self.upper)
        if np.any(bad):
            i = int(np.argmax(bad))
            raise RuntimeError(f"t={t:.3f} s: joint {self.joint_names[i]} at {q[i]:.3f} left its "
                               f"URDF range [{self.lower[i]}, {self.upper[i]}]")


def _wrap(q: np.ndarray, mask: np.ndarray) -> np.ndarray:
    out = q.copy()
    out[..., mask] = (out[..., mask] + np.pi) % (2 * np.pi) - np.pi
    return out


# --------------------------------------------------------------------------------------------
# Reference paths and example forces
# --------------------------------------------------------------------------------------------

def _cosine_path(q0: np.ndarray, amp: np.ndarray, omega: np.ndarray, t: float):
    """q0 + amp (1 - cos(omega t)): starts at rest at q0; smooth. Returns q, qd, qdd."""
    c, s = np.cos(omega * t), np.sin(omega * t)
    return q0 + amp * (1 - c), amp * omega * s, amp * omega**2 * c


def _smoothstep(s: float) -> tuple[float, float, float]:
    """Quintic 10s^3 - 15s^4 + 6s^5 on [0, 1] and its first two derivatives (w.r.t. s)."""
    if s <= 0.0:
        return 0.0, 0.0, 0.0
    if s >= 1.0:
        return 1.0, 0.0, 0.0
    return (10 * s**3 - 15 * s**4 + 6 * s**5, 30 * s**2 - 60 * s**3 + 30 * s**4,
            60 * s - 180 * s**2 + 120 * s**3)


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
    (``damping``, N s/m), and a constant resisting force
    ``static_force`` (N, ``qfrc_applied = -static_force`` on the slide, from attachment on).
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
                      active=False, solref=[2 * dt, 1.0])
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


class _Recorder:
    def __init__(self, steps: int, n: int):
        self.t = np.zeros(steps)
        self.q = np.zeros((steps, n))
        self.v = np.zeros((steps, n))
        self.tau = np.zeros((steps, n))
        self.f = np.zeros((steps, 3))
        self.text = np.zeros((steps, n))
        self.p = np.zeros((steps, 3))
        self.c = np.zeros(steps, bool)
        self.ref = np.zeros((steps, 3))

    def record(self, k, t, q, v, tau, f, text, p, contact):
        self.t[k] = t
        self.q[k] = q
        self.v[k] = v
        self.tau[k] = tau
        self.f[k] = f
        self.text[k] = text
        self.p[k] = p
        self.c[k] = contact

    def finish(self, robot: _Robot, urdf_text: str, dt: float) -> GroundTruthRun:
        return GroundTruthRun(
            time=self.t, joint_names=robot.joint_names,
            position=_wrap(self.q, robot.continuous), velocity=self.v, effort=self.tau,
            true_force=self.f, true_external_torque=self.text, contact_position=self.p,
            in_contact=self.c, truth={}, urdf=urdf_text, joint_kinds=robot.joint_kinds, dt=dt)


# --------------------------------------------------------------------------------------------
# Sensor imperfections
# --------------------------------------------------------------------------------------------

def corrupt(run: GroundTruthRun, effort_noise: float | Sequence[float] = 0.0,
            velocity_noise: float | Sequence[float] = 0.0, encoder_bits: int | None = None,
            bias: Sequence[float] | None = None, seed: int = 0) -> GroundTruthRun:
    """A copy of ``run`` with sensor imperfections; the ground truth is left untouched.

    ``effort_noise`` (N·m or N) and ``velocity_noise`` (rad/s or m/s): standard deviations of
    white Gaussian noise, scalars or per joint. ``encoder_bits``: positions of revolute and
    continuous joints rounded to multiples of ``2 pi / 2**bits`` rad (prismatic joints are left
    as they are). ``bias`` (n,): constant offset added to every effort sample.
    """
    rng = np.random.default_rng(seed)
    out = replace(run, position=run.position.copy(), velocity=run.velocity.copy(),
                  effort=run.effort.copy(), truth=copy.deepcopy(run.truth),
                  corruption=dict(run.corruption))
    shape = run.effort.shape
    en = np.broadcast_to(np.asarray(effort_noise, float), (shape[1],))
    vn = np.broadcast_to(np.asarray(velocity_noise, float), (shape[1],))
    if np.any(en < 0) or np.any(vn < 0):
        raise ValueError("noise levels must be non-negative")
    out.effort += rng.standard_normal(shape) * en
    out.velocity += rng.standard_normal(shape) * vn
    if encoder_bits is not None:
        step = 2 * np.pi / 2**int(encoder_bits)
        kinds = run.joint_kinds or ("revolute",) * shape[1]
        ang = np.array([k != "prismatic" for k in kinds])
        out.position[:, ang] = np.round(run.position[:, ang] / step) * step
    if bias is not None:
        b = np.asarray(bias, float).reshape(shape[1])
        out.effort += b
    out.corruption.update({"effort_noise": en.tolist(), "velocity_noise": vn.tolist(),
                           "encoder_bits": encoder_bits,
                           "bias": None if bias is None else np.asarray(bias, float).tolist(),
                           "seed": seed})
    return out
