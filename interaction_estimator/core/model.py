"""RobotModel: URDF -> Pinocchio model, JointState-name mapping, dynamics terms per sample.

The rigid-body terms of ``M(q) q'' + C(q, q') q' + g(q) = tau + tau_ext`` come from Pinocchio
(Carpentier et al., "The Pinocchio C++ library", IEEE/SICE SII 2019): ``crba`` for M,
``computeCoriolisMatrix`` for C, ``computeGeneralizedGravity`` for g and the contact frame's
Jacobian in the world-aligned frame (``LOCAL_WORLD_ALIGNED``: linear rows are the contact point's
velocity in world axes). Continuous joints take two configuration entries (cos, sin) in Pinocchio;
JointState carries their angle, which :class:`JointMap` converts.

Moving base (``floating_base=True``, the setting ``base.source: odometry``): the URDF's root link
is the base, joined to the world by Pinocchio's free-flyer joint (``JointModelFreeFlyer``:
configuration [x, y, z, qx, qy, qz, qw] of the root link in the world, velocity [v, w] of the
root link in its own frame). Joints that hang off the base body and do not lead to the contact
frame (wheels, casters, a ball drive, a second arm) are locked at their neutral position
(``buildReducedModel``): no row of a joint on the way to the contact frame depends on them (in a
kinematic tree M[i, j] is zero unless one joint is an ancestor of the other, and g and C^T v of
a row depend only on the bodies the joint carries), so they need not be measured. The remaining
joints are the measured joints (:attr:`RobotModel.joint_names`); their velocity coordinates are
the last ``n`` of the model's ``nv``, after the base's six.
"""
from __future__ import annotations

import math
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pinocchio as pin

from .samples import Sample, SampleRejected
from .settings import STANDARD_GRAVITY
from .urdf_check import inertial_problems


class ModelError(ValueError):
    """The URDF cannot be used: it does not parse, a frame is missing, a joint is unsupported."""


class Dynamics(NamedTuple):
    """Dynamics terms at one sample (nv = number of velocity coordinates).

    mass_matrix (nv, nv) kg·m² / kg; coriolis_transpose_velocity (nv,) C(q,q')^T q', N·m;
    gravity (nv,) g(q), N·m; jacobian (6, nv) contact-frame Jacobian, world-aligned (rows
    v_x, v_y, v_z, w_x, w_y, w_z); position (3,) contact point in the world frame, m;
    rotation (3, 3) contact frame orientation in the world frame. Every array is the
    caller's own (Pinocchio returns copies), so it may be kept across samples.
    """

    mass_matrix: np.ndarray
    coriolis_transpose_velocity: np.ndarray
    gravity: np.ndarray
    jacobian: np.ndarray
    position: np.ndarray
    rotation: np.ndarray


class JointMap:
    """Maps one ordering of JointState names onto the model's configuration and velocity.

    Names the model does not have (grippers, other robots) are ignored; every model joint must be
    present. Built once per distinct name tuple and cached by :class:`RobotModel`.
    """

    def __init__(self, model: RobotModel, names: tuple[str, ...]):
        index = {}
        for i, n in enumerate(names):
            if n in index:
                raise SampleRejected("unknown_joint", f"joint name {n!r} appears twice")
            index[n] = i
        missing = [j for j in model.joint_names if j not in index]
        if missing:
            raise SampleRejected(
                "unknown_joint",
                f"joint state lacks model joints {missing}; it has {list(names)}")
        count = len(model.joint_names)
        self.source = np.array([index[j] for j in model.joint_names], dtype=int)  # (n,)
        self._identity = len(names) == count and bool(
            np.array_equal(self.source, np.arange(count)))
        self._base_nq, self._base_nv = model.base_nq, model.base_nv
        # q index -> the velocity index (joint) whose angle fills it; continuous joints' two
        # entries are then overwritten by (cos, sin)
        q_from = np.zeros(model.nq, dtype=int)
        q_from[model._simple_q] = model._simple_v
        q_from[model._circle_q] = model._circle_v
        q_from[model._circle_q + 1] = model._circle_v
        self._q_from = q_from
        self._circles = tuple(zip(model._circle_q.tolist(), model._circle_v.tolist(),
                                  strict=True))

    def apply(self, sample: Sample) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return (q (nq,), v (nv,), effort (n,)) in model order: new, writeable, contiguous
        float arrays (the compiled step is compiled for exactly that kind of array; a read-only
        view of a message buffer would make it compile again). With a moving base the base's
        entries (the first 7 of q, the first 6 of v) are left for the caller to fill (q's are
        zero, v's zero)."""
        if self._base_nv:
            return self._apply_floating(sample.position, sample.velocity, sample.effort)
        if self._identity:  # names already in model order: no reordering
            angle = sample.position
            v = np.array(sample.velocity, dtype=float)
            e = np.array(sample.effort, dtype=float)
        else:
            src = self.source
            angle = sample.position.take(src)
            v = sample.velocity.take(src).astype(float, copy=False)
            e = sample.effort.take(src).astype(float, copy=False)
        # every q entry from its joint's angle, then (cos, sin) for continuous joints
        q = angle.take(self._q_from).astype(float, copy=False)
        for iq, iv in self._circles:
            a = float(angle[iv])
            q[iq] = math.cos(a)
            q[iq + 1] = math.sin(a)
        return q, v, e


    def _apply_floating(self, position, velocity, effort):
        """:meth:`apply` (or :meth:`apply_block`, on (k, n) arrays) with a moving base."""
        src = self.source
        lead = position.shape[:-1]
        angle = position[..., src].astype(float)
        q = np.zeros(lead + (len(self._q_from),))
        q[..., self._base_nq:] = angle[..., self._q_from[self._base_nq:]]
        for iq, iv in self._circles:
            a = angle[..., iv]
            if a.ndim:
                q[:, iq] = [math.cos(x) for x in a.tolist()]
                q[:, iq + 1] = [math.sin(x) for x in a.tolist()]
            else:
                q[iq] = math.cos(float(a))
                q[iq + 1] = math.sin(float(a))
        v = np.zeros(lead + (self._base_nv + len(src),))
        v[..., self._base_nv:] = velocity[..., src]
        return q, v, np.ascontiguousarray(effort[..., src], dtype=float)

    def apply_block(self, block) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """:meth:`apply` for every sample of a :class:`~.samples.SampleBlock`: (q (k, nq),
        v (k, nv), effort (k, n)), new C-contiguous float arrays whose rows are what
        :meth:`apply` returns for each sample (continuous joints through math.cos/math.sin,
        as there)."""
        if self._base_nv:
            return self._apply_floating(block.position, block.velocity, block.effort)
        if self._identity:
            angle = block.position
            v = np.array(block.velocity, dtype=float, order="C")
            e = np.array(block.effort, dtype=float, order="C")
        else:
            src = self.source
            angle = block.position[:, src]
            v = np.ascontiguousarray(block.velocity[:, src], dtype=float)
            e = np.ascontiguousarray(block.effort[:, src], dtype=float)
        q = np.ascontiguousarray(angle[:, self._q_from], dtype=float)
        for iq, iv in self._circles:
            a = angle[:, iv].tolist()
            q[:, iq] = [math.cos(x) for x in a]
            q[:, iq + 1] = [math.sin(x) for x in a]
        return q, v, e


class RobotModel:
    """A robot built from URDF text, with a contact frame and gravity along -z of the world.

    joint_names: the measured joints in velocity order (n of them); nq, nv: the model's
    configuration and velocity sizes (with a moving base, ``floating_base``, 7 and 6 more than
    the joints', see the module docstring; base_nq, base_nv: those 7 and 6, else 0). Raises
    ModelError for a URDF that does not parse, a contact frame that does not exist, or an
    unsupported joint type.
    """

    def __init__(self, urdf: str, contact_frame: str, gravity: float = STANDARD_GRAVITY,
                 floating_base: bool = False):
        if not isinstance(urdf, str) or "<robot" not in urdf:
            raise ModelError("robot description is not URDF text: no <robot> element found")
        if problems := inertial_problems(urdf):  # unreadable values would be read as 0
            raise ModelError("URDF has unusable inertial values: " + "; ".join(problems))
        try:
            if floating_base:
                full = pin.buildModelFromXML(urdf, pin.JointModelFreeFlyer())
            else:
                full = pin.buildModelFromXML(urdf)
        except Exception as exc:  # Pinocchio raises ValueError/RuntimeError with the parser text
            raise ModelError(f"URDF does not parse: {str(exc).strip()}") from None
        if not full.existFrame(contact_frame):
            frames = sorted({f.name for f in full.frames} - {"universe", "root_joint"})
            raise ModelError(f"contact frame {contact_frame!r} is not in the URDF; expected one of "
                             f"{frames}")
        self.floating_base = bool(floating_base)
        self.base_nq, self.base_nv = (7, 6) if floating_base else (0, 0)
        self.locked_joints: tuple[str, ...] = ()
        if floating_base:
            locked = _base_branches(full, full.frames[full.getFrameId(contact_frame)].parentJoint)
            self.locked_joints = tuple(full.names[j] for j in locked)
            if locked:
                full = pin.buildReducedModel(full, locked, pin.neutral(full))
        self.model = full
        self.model.gravity.linear = np.array([0.0, 0.0, -gravity])
        self.data = self.model.createData()
        self.contact_frame = contact_frame
        self.frame_id = self.model.getFrameId(contact_frame)
        # the root link: the first body frame (frames 0 and, with a free flyer, 1 are joints')
        self.root_frame = next((f.name for f in self.model.frames
                                if f.type == pin.FrameType.BODY), "world")
        self.nq, self.nv = self.model.nq, self.model.nv

        names, simple_q, simple_v, circle_q, circle_v = [], [], [], [], []
        first = 2 if floating_base else 1
        for jid in range(first, self.model.njoints):
            joint = self.model.joints[jid]
            name = self.model.names[jid]
            kind = joint.shortname()
            if joint.nv != 1 or joint.nq not in (1, 2):
                raise ModelError(f"joint {name!r} of type {kind} is not supported; expected "
                                 "revolute, continuous, prismatic or fixed joints (write a mobile "
                                 "base as prismatic and continuous joints, or use base.source "
                                 "odometry)")
            names.append(name)
            if joint.nq == 1:
                simple_q.append(joint.idx_q)
                simple_v.append(joint.idx_v - self.base_nv)
            else:
                circle_q.append(joint.idx_q)
                circle_v.append(joint.idx_v - self.base_nv)
        self.joint_names: tuple[str, ...] = tuple(names)
        self.continuous_joints = tuple(names[i] for i in circle_v)
        self._simple_q, self._simple_v = np.array(simple_q, int), np.array(simple_v, int)
        self._circle_q, self._circle_v = np.array(circle_q, int), np.array(circle_v, int)
        self._maps: dict[tuple[str, ...], JointMap] = {}
        # Older Pinocchio releases fill only the upper triangle of M in crba: check once.
        probe = pin.crba(self.model, self.data, pin.neutral(self.model))
        self._symmetrize = self.nv > 1 and not np.allclose(probe, probe.T)

    def base_placement(self, frame: str) -> tuple[np.ndarray, np.ndarray] | None:
        """(R (3, 3), p (3,) m) of ``frame`` in the root link's frame when the frame is rigidly
        attached to the base body (the root link, a link fixed to it, or a locked branch's
        link); None otherwise, or without a moving base. An empty name is the root link."""
        if not self.floating_base:
            return None
        if frame == "":
            return np.eye(3), np.zeros(3)
        if not self.model.existFrame(frame):
            return None
        f = self.model.frames[self.model.getFrameId(frame)]
        if f.parentJoint != 1:
            return None
        return f.placement.rotation.copy(), f.placement.translation.copy()

    def base_frames(self) -> list[str]:
        """The frames rigidly attached to the base body (see :meth:`base_placement`)."""
        if not self.floating_base:
            return []
        return [f.name for f in self.model.frames if f.parentJoint == 1
                and f.type in (pin.FrameType.BODY, pin.FrameType.FIXED_JOINT)
                and f.name != "root_joint"]

    def has_link(self, name: str) -> bool:
        """True when ``name`` is a frame (link or joint) of the model."""
        return bool(self.model.existFrame(name))

    @classmethod
    def from_file(cls, path: str | Path, contact_frame: str,
                  gravity: float = STANDARD_GRAVITY) -> RobotModel:
        try:
            text = Path(path).read_text(encoding="utf-8")
        except OSError as exc:
            raise ModelError(f"URDF file {str(path)!r} cannot be read: {exc.strerror}") from None
        return cls(text, contact_frame, gravity)

    def joint_map(self, names: tuple[str, ...]) -> JointMap:
        """The cached mapping for this name order (raises SampleRejected for missing joints)."""
        m = self._maps.get(names)
        if m is None:
            m = JointMap(self, names)
            if len(self._maps) > 64:  # bounded: a publisher changing order every message
                self._maps.clear()
            self._maps[names] = m
        return m

    def configuration_from_angles(self, angles: np.ndarray) -> np.ndarray:
        """Model configuration q (nq,) from one angle/position per joint (n,), model order
        (a moving base at the world's origin, level)."""
        q = np.zeros(self.nq)
        if self.base_nq:
            q[6] = 1.0
        q[self._simple_q] = angles[self._simple_v]
        q[self._circle_q] = np.cos(angles[self._circle_v])
        q[self._circle_q + 1] = np.sin(angles[self._circle_v])
        return q

    def terms(self, q: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, ...]:
        """The Pinocchio calls of one sample, their results as they come: (pose (4, 4) of the
        contact frame, M (nv, nv), C (nv, nv) Coriolis matrix, g (nv,), contact Jacobian
        (6, nv), world-aligned). Every array is the caller's own."""
        m, d, fid = self.model, self.data, self.frame_id
        pin.computeJointJacobians(m, d, q)
        # the placement it returns (cheaper than looking it up again in data.oMf)
        pose = pin.updateFramePlacement(m, d, fid).homogeneous   # (4, 4) copy
        mass = pin.crba(m, d, q)   # a copy of data.M
        if self._symmetrize:
            mass = np.triu(mass) + np.triu(mass, 1).T
        return (pose, mass, pin.computeCoriolisMatrix(m, d, q, v),
                pin.computeGeneralizedGravity(m, d, q),
                pin.getFrameJacobian(m, d, fid, pin.LOCAL_WORLD_ALIGNED))

    def terms_block(self, Q: np.ndarray, V: np.ndarray) -> tuple[np.ndarray, ...]:
        """:meth:`terms` of each row of Q (k, nq) and V (k, nv), stacked: (poses (k, 4, 4),
        M (k, nv, nv), C (k, nv, nv), g (k, nv), Jacobians (k, 6, nv))."""
        k, nv = len(Q), self.nv
        H, M, C = np.empty((k, 4, 4)), np.empty((k, nv, nv)), np.empty((k, nv, nv))
        G, J = np.empty((k, nv)), np.empty((k, 6, nv))
        terms = self.terms
        for i, (q, v) in enumerate(zip(Q, V, strict=True)):
            H[i], M[i], C[i], G[i], J[i] = terms(q, v)
        return H, M, C, G, J

    def dynamics(self, q: np.ndarray, v: np.ndarray) -> Dynamics:
        """M, C^T q', g, contact Jacobian and pose at (q (nq,), v (nv,))."""
        pose, mass, coriolis, gravity, jac = self.terms(q, v)
        # C^T v as v^T C: one product, no transposed view
        return Dynamics(mass, v.dot(coriolis), gravity, jac, pose[:3, 3], pose[:3, :3])


def _base_branches(model: pin.Model, contact_joint: int) -> list[int]:
    """Joint ids of the branches that hang off the base body (the free flyer, joint 1) and do
    not carry the contact frame (whose parent joint is ``contact_joint``), subtrees included."""
    out: list[int] = []
    for jid in range(2, model.njoints):
        if model.parents[jid] == 1 and contact_joint not in model.subtrees[jid]:
            out.extend(int(j) for j in model.subtrees[jid])
    return sorted(out)
