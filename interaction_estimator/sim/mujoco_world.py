"""Ground-truth physics: URDF robots (our Marten, and real robots' published URDFs) in MuJoCo.

The independent ground truth of the tests and of the Monte-Carlo validation
(interaction_estimator/offline/validation). It stays independent of the estimator: MuJoCo is
the physics engine here, and nothing else from ``interaction_estimator`` is imported (the URDF is
read as a text file). MuJoCo (PyPI ``mujoco``) is a test and validation dependency, not a runtime
one: nothing the node or the replay imports imports this module.

Scenarios:

* :func:`run_applied_force` -- the arm moves along a smooth joint-space path under a
  computed-torque controller; after ``free_time`` the environment pushes on the contact frame
  with ``F_ext(t) = -force_fn(t)`` (``mj_applyFT`` at the frame's origin).
* :func:`run_attached_object` -- an object (a body on a slide joint along ``direction``, with
  MuJoCo's own spring and damper, its own mass and a constant resisting force) is attached to
  the contact frame with an equality ``connect`` constraint at ``free_time``; a task-space
  (resolved-acceleration) controller makes the tool follow ``path_fn`` along the direction.
* :class:`ObjectWorld` -- the same object world for any URDF and a schedule of phases (free
  motion, contact, object changes, release and a new object), recorded at a sample rate below
  the simulation's: the validation's runs.

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
import math
import xml.etree.ElementTree as ET
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import mujoco
import numpy as np

STANDARD_GRAVITY = 9.80665  # m/s^2, CGPM (3rd General Conference on Weights and Measures, 1901)
CONTACT_FRAME = "tool_tip"
_SITE_NAME = "harness_contact_site"
_OBJECT_BODY = "harness_object"
_OBJECT_JOINT = "harness_object_slide"
_EQUALITY = "harness_attach"
SOLIMP = [0.9999, 0.9999, 0.001, 0.5, 2.0]
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
    root = ET.fromstring(urdf_text)
    # top-level <joint> only: a <transmission> names its joints too, without a type
    return {j.get("name"): j.get("type") for j in root.findall("joint")}


def physics_urdf(urdf_text: str) -> tuple[str, list[str]]:
    """The URDF as MuJoCo simulates it here, and notes on what was changed.

    Real robots' URDFs (PyPI ``example-robot-data``) carry ``package://`` meshes, transmissions,
    gazebo tags and joint ``<dynamics>``. MuJoCo would try to open the meshes (collision meshes
    even with ``discardvisual``), so ``<visual>`` and ``<collision>`` are removed (contacts are
    off in these worlds anyway); ``<transmission>`` and ``<gazebo>`` are dropped; joint
    ``<dynamics>`` (damping, friction) is dropped because the recorded efforts are link-side
    torques, which an ideal joint torque sensor measures after the joint's own friction (the
    estimator's model, Pinocchio, has no joint damping either). An inertia tensor that is not
    physically valid (a negative principal moment or one breaking the triangle inequality,
    e.g. TIAGo's 1 mg antenna links) is replaced by the nearest valid one (principal moments
    clipped at zero and raised to satisfy the triangle inequality), and noted; the links seen so
    far are welded to the fixed base, so the robot's dynamics do not change. Mimic joints are
    kept (MuJoCo couples them with a joint equality)."""
    root = ET.fromstring(urdf_text)
    notes: list[str] = []
    for child in list(root):
        if child.tag in ("transmission", "gazebo"):
            root.remove(child)
    for joint in root.findall("joint"):
        for dyn in joint.findall("dynamics"):
            joint.remove(dyn)
    for link in root.findall("link"):
        for tag in ("visual", "collision"):
            for el in link.findall(tag):
                link.remove(el)
        inertial = link.find("inertial")
        inertia = None if inertial is None else inertial.find("inertia")
        if inertia is None:
            continue
        a = {k: float(inertia.get(k, 0.0)) for k in ("ixx", "iyy", "izz", "ixy", "ixz", "iyz")}
        tensor = np.array([[a["ixx"], a["ixy"], a["ixz"]], [a["ixy"], a["iyy"], a["iyz"]],
                           [a["ixz"], a["iyz"], a["izz"]]])
        w, vecs = np.linalg.eigh(tensor)
        if w.min() >= 0.0 and w[0] + w[1] >= w[2] * (1.0 - 1e-9):
            continue
        w = np.maximum(w, 0.0)
        w[0] = max(w[0], w[2] - w[1])   # the smallest rise meeting the triangle inequality
        fixed = vecs @ np.diag(w) @ vecs.T
        for key, (i, j) in {"ixx": (0, 0), "iyy": (1, 1), "izz": (2, 2), "ixy": (0, 1),
                            "ixz": (0, 2), "iyz": (1, 2)}.items():
            inertia.set(key, repr(float(fixed[i, j])))
        notes.append(f"link {link.get('name')}: inertia not physically valid, replaced "
                     f"(principal moments {np.round(np.linalg.eigvalsh(tensor), 12).tolist()} -> "
                     f"{np.round(w, 12).tolist()} kg m^2)")
    return ET.tostring(root, encoding="unicode"), notes


def _make_spec(urdf_text: str, dt: float, contact_frame: str) -> mujoco.MjSpec:
    urdf_text = physics_urdf(urdf_text)[0]
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
            if name == _OBJECT_JOINT or name.startswith("harness_"):   # the object's own
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
        self._leading = bool(np.array_equal(self.vadr, np.arange(self.n)))
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
        if self._leading:
            return self.M[:self.n, :self.n].copy()
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


# --------------------------------------------------------------------------------------------
# Scheduled object runs: the world of the Monte-Carlo validation
# --------------------------------------------------------------------------------------------
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


# --------------------------------------------------------------------------------------------
# Mechanisms and 3-D objects attached to the tool (the checks of the models beyond one
# direction: environment.model cartesian, revolute, prismatic)
# --------------------------------------------------------------------------------------------

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
