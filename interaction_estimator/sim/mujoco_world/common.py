"""What the MuJoCo worlds share: constants (standard gravity, the harness's names, controller
gains, Marten's start configuration), :class:`GroundTruthRun` (a run and its truth), the URDF
prepared for MuJoCo (:func:`physics_urdf`) and the model built from it, the robot's MuJoCo
quantities (``_Robot``: M, bias forces, contact Jacobian), smooth joint paths, the recorder of a
run, and :func:`corrupt` (sensor imperfections added to a run). The package's docstring states
the conventions every world keeps."""
from __future__ import annotations

import copy
import xml.etree.ElementTree as ET
from collections.abc import Sequence
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
