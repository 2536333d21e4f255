"""An independent physics engine for the identification tests: a fixed- or mobile-base URDF
robot in MuJoCo (PyPI ``mujoco``), driven along a joint trajectory, and perturbed URDFs.

Test support, independent of the estimator: nothing from ``interaction_estimator`` is imported;
the URDF is read as text. MuJoCo loads it with the compiler settings of /work/shared/NOTES.md
(visual and collision elements removed first: their ``package://`` meshes cannot be opened
here, and dynamics do not use them).

:func:`track` runs MuJoCo's semi-implicit Euler with the implicit damping off and no contacts or
limits, under a computed-torque controller that uses MuJoCo's own M and bias forces: each sample
holds the state at t_k, the effort applied over [t_k, t_k+1) and MuJoCo's own joint
acceleration of that step (``data.qacc``), which makes ``M(q) qacc + bias(q, v) = effort``
exactly (to the solver's round-off): noise-free free-motion data.
"""
from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from collections.abc import Callable
from dataclasses import dataclass

import mujoco
import numpy as np

STANDARD_GRAVITY = 9.80665  # m/s^2, CGPM 1901
_COMPILER = ('<mujoco><compiler discardvisual="true" fusestatic="false" '
             'balanceinertia="false"/></mujoco>')
OMEGA = 2 * np.pi * 12.0    # rad/s, computed-torque bandwidth (critically damped)


def kinematic_only(urdf: str) -> str:
    """The URDF without visual, collision, transmission and gazebo elements, and without the
    joints' ``<dynamics>`` (MuJoCo would apply their damping and friction: these test robots
    are frictionless, their efforts link-side)."""
    root = ET.fromstring(urdf)
    for link in root.iter("link"):
        for tag in ("visual", "collision"):
            for e in link.findall(tag):
                link.remove(e)
    for joint in root.iter("joint"):
        for e in joint.findall("dynamics"):
            joint.remove(e)
    for tag in ("transmission", "gazebo"):
        for e in root.findall(tag):
            root.remove(e)
    return ET.tostring(root, encoding="unicode")


@dataclass
class World:
    model: mujoco.MjModel
    data: mujoco.MjData
    joint_names: tuple[str, ...]
    qadr: np.ndarray
    vadr: np.ndarray

    def set(self, q: np.ndarray, v: np.ndarray) -> None:
        self.data.qpos[:] = 0.0
        self.data.qvel[:] = 0.0
        self.data.qpos[self.qadr] = q
        self.data.qvel[self.vadr] = v
        mujoco.mj_forward(self.model, self.data)

    def mass_matrix(self, q: np.ndarray) -> np.ndarray:
        self.set(q, np.zeros(len(q)))
        M = np.zeros((self.model.nv, self.model.nv))
        mujoco.mj_fullM(self.model, self.data, M)
        return M[np.ix_(self.vadr, self.vadr)]

    def gravity(self, q: np.ndarray) -> np.ndarray:
        self.set(q, np.zeros(len(q)))
        return self.data.qfrc_bias[self.vadr].copy()

    def inverse(self, q: np.ndarray, v: np.ndarray, a: np.ndarray) -> np.ndarray:
        """Joint efforts for (q, v, a) (``mj_inverse``)."""
        self.set(q, v)
        self.data.qacc[:] = 0.0
        self.data.qacc[self.vadr] = a
        mujoco.mj_inverse(self.model, self.data)
        return self.data.qfrc_inverse[self.vadr].copy()


def load(urdf: str, dt: float = 1e-3) -> World:
    text = kinematic_only(urdf)
    idx = text.rfind("</robot>")
    spec = mujoco.MjSpec.from_string(text[:idx] + _COMPILER + text[idx:])
    spec.option.timestep = dt
    spec.option.gravity = [0.0, 0.0, -STANDARD_GRAVITY]
    spec.option.integrator = mujoco.mjtIntegrator.mjINT_EULER
    spec.option.disableflags |= (mujoco.mjtDisableBit.mjDSBL_EULERDAMP
                                 | mujoco.mjtDisableBit.mjDSBL_CONTACT
                                 | mujoco.mjtDisableBit.mjDSBL_LIMIT)
    spec.option.tolerance = 1e-14
    model = spec.compile()
    names, qadr, vadr = [], [], []
    for j in range(model.njnt):
        names.append(mujoco.mj_id2name(model, mujoco.mjtObj.mjOBJ_JOINT, j))
        qadr.append(model.jnt_qposadr[j])
        vadr.append(model.jnt_dofadr[j])
    return World(model, mujoco.MjData(model), tuple(names), np.array(qadr), np.array(vadr))


def track(world: World, reference: Callable[[float], tuple[np.ndarray, ...]],
          duration: float, dt: float = 1e-3) -> dict[str, np.ndarray]:
    """Follow ``reference(t) -> (q, v, a)`` for ``duration`` s from the reference's own start
    state. Returns time (N,), position, velocity, acceleration (MuJoCo's qacc), effort (N, n)."""
    m, d = world.model, world.data
    q0, v0, _ = reference(0.0)
    world.set(q0, v0)
    steps = int(round(duration / dt))
    n = len(world.joint_names)
    out = {k: np.zeros((steps, n)) for k in ("position", "velocity", "acceleration", "effort")}
    out["time"] = np.arange(steps) * dt
    kp, kd = OMEGA ** 2, 2 * OMEGA
    M = np.zeros((m.nv, m.nv))
    for k in range(steps):
        t = k * dt
        mujoco.mj_step1(m, d)
        q, v = d.qpos[world.qadr].copy(), d.qvel[world.vadr].copy()
        qr, vr, ar = reference(t)
        mujoco.mj_fullM(m, d, M)
        Mj = M[np.ix_(world.vadr, world.vadr)]
        tau = Mj @ (ar + kd * (vr - v) + kp * (qr - q)) + d.qfrc_bias[world.vadr]
        d.qfrc_applied[:] = 0.0
        d.qfrc_applied[world.vadr] = tau
        mujoco.mj_step2(m, d)
        out["position"][k], out["velocity"][k], out["effort"][k] = q, v, tau
        out["acceleration"][k] = d.qacc[world.vadr]
    return out


def fourier(q0: np.ndarray, amplitude: np.ndarray, base: float, harmonics: int, seed: int
            ) -> Callable[[float], tuple[np.ndarray, ...]]:
    """A random band-limited periodic joint reference about q0 (test motion, invented):
    sum over l of (a_l sin(l w t) + b_l (cos(l w t) - 1)), amplitude scaled per joint."""
    rng = np.random.default_rng(seed)
    n = len(q0)
    a = rng.normal(size=(harmonics, n))
    b = rng.normal(size=(harmonics, n))
    norm = np.sum(np.abs(a) + 2 * np.abs(b), axis=0)
    a, b = a / norm * amplitude, b / norm * amplitude
    w = 2 * np.pi * base
    ls = np.arange(1, harmonics + 1)[:, None]

    def ref(t: float) -> tuple[np.ndarray, ...]:
        s, c = np.sin(ls * w * t), np.cos(ls * w * t)
        q = q0 + np.sum(a * s + b * (c - 1), axis=0)
        v = np.sum(ls * w * (a * c - b * s), axis=0)
        acc = np.sum(-(ls * w) ** 2 * (a * s + b * c), axis=0)
        return q, v, acc
    return ref


# --------------------------------------------------------------------------------------------
# perturbed and extended URDFs (text edits)


def _fmt(x: float) -> str:
    return repr(float(x))


def perturb(urdf: str, seed: int, mass_range=(0.10, 0.25), com_range=(0.01, 0.02),
            skip: tuple[str, ...] = ()) -> tuple[str, dict]:
    """Every link with a positive mass (except ``skip``): mass scaled by 1 +- U(mass_range),
    centre of mass moved by U(com_range) m in a random direction; rotational inertia about the
    centre of mass scaled with the mass (a consistent body stays consistent). Returns the URDF
    and what was changed."""
    rng = np.random.default_rng(seed)
    root = ET.fromstring(urdf)
    changes = {}
    for link in root.iter("link"):
        el = link.find("inertial")
        if el is None or link.get("name") in skip:
            continue
        mass_el = el.find("mass")
        m = float(mass_el.get("value"))
        if m <= 0:
            continue
        f = 1 + rng.choice([-1, 1]) * rng.uniform(*mass_range)
        mass_el.set("value", _fmt(m * f))
        ie = el.find("inertia")
        for k in ("ixx", "ixy", "ixz", "iyy", "iyz", "izz"):
            ie.set(k, _fmt(float(ie.get(k)) * f))
        origin = el.find("origin")
        if origin is None:
            origin = ET.SubElement(el, "origin", {"xyz": "0 0 0", "rpy": "0 0 0"})
        xyz = np.array([float(x) for x in origin.get("xyz", "0 0 0").split()])
        d = rng.normal(size=3)
        xyz = xyz + d / np.linalg.norm(d) * rng.uniform(*com_range)
        origin.set("xyz", " ".join(_fmt(x) for x in xyz))
        changes[link.get("name")] = {"mass_factor": f}
    return ET.tostring(root, encoding="unicode"), changes


def add_tool(urdf: str, parent: str, mass: float, com: tuple[float, float, float],
             inertia: tuple[float, float, float], name: str = "mounted_tool") -> str:
    """The URDF with a tool: a link ``name`` (mass kg, centre of mass m in the parent link's
    frame, principal moments kg·m² about it along the parent's axes) fixed to ``parent``."""
    ixx, iyy, izz = inertia
    tool = (f'<joint name="{name}_mount" type="fixed"><parent link="{parent}"/>'
            f'<child link="{name}"/><origin xyz="0 0 0" rpy="0 0 0"/></joint>'
            f'<link name="{name}"><inertial><origin xyz="{com[0]} {com[1]} {com[2]}" '
            f'rpy="0 0 0"/><mass value="{mass}"/><inertia ixx="{ixx}" ixy="0" ixz="0" '
            f'iyy="{iyy}" iyz="0" izz="{izz}"/></inertial></link>')
    idx = urdf.rfind("</robot>")
    return urdf[:idx] + tool + urdf[idx:]


def link_masses(urdf: str) -> dict[str, float]:
    return {m.group(1): float(m.group(2)) for m in re.finditer(
        r'<link name="([^"]+)">\s*<inertial>.*?<mass value="([^"]+)"', urdf, re.S)}
