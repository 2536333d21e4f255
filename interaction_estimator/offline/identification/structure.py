"""Which inertial parameters a URDF has, and how they enter Pinocchio's bodies.

Pinocchio merges every link fixed to a moving joint's child link into one body per joint
(``model.inertias[j]``, in the joint's frame). The identification changes only the child link of
each joint (the link whose frame is the joint frame); links fixed to it keep their URDF values
and are a constant part of the body. An added tool (payload) is one more rigid body fixed to a
URDF link the user names; its ten parameters, in that link's frame, enter the body of that
link's joint through a constant 10x10 transform (:func:`~.inertia.transform_matrix`).

The URDF is read twice: Pinocchio builds the model (frames, placements), and xml.etree reads the
inertial elements to know which link is which (they were checked by
:func:`~interaction_estimator.core.urdf_check.inertial_problems` when the model was built).
"""
from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field

import numpy as np
import pinocchio as pin

from ...core.model import ModelError, RobotModel
from . import inertia as inr

MASS_FLOOR_FRACTION = 0.01    # prior mass scale floor, of the moving bodies' total mass
LENGTH_FLOOR_FRACTION = 0.05  # prior length scale floor, of the robot's reach


@dataclass
class Tool:
    """A tool or payload fixed to URDF link ``link`` that the URDF does not have.

    mass_guess kg (0: none; the prior then centres on no tool); the identified parameters are
    in ``link``'s frame. body: index (0-based, = joint index - 1) of the moving body it joins;
    transform (10, 10): its pi in the link frame -> pi in that body's joint frame."""

    name: str
    link: str
    mass_guess: float = 0.0
    body: int = -1
    transform: np.ndarray = field(default_factory=lambda: np.eye(10))


@dataclass
class Body:
    """One moving joint's body. joint: joint name; link: its child link (URDF);
    link_urdf (10,): that link's own pi in the joint frame (the URDF's); rest (10,): pi of the
    links fixed to it (constant); has_inertial: whether the URDF gives the link an inertial;
    scale (10,): prior standard deviations (see :func:`prior_scales`)."""

    joint: str
    link: str
    link_urdf: np.ndarray
    rest: np.ndarray
    has_inertial: bool
    scale: np.ndarray = field(default_factory=lambda: np.ones(10))
    placement: np.ndarray = field(default_factory=lambda: np.eye(10))  # link -> joint frame

    @property
    def urdf(self) -> np.ndarray:
        """pi (10,) of the whole body as the URDF has it."""
        return self.link_urdf + self.rest


@dataclass
class Layout:
    """The robot's bodies (model joint order) and tools, with their prior scales."""

    robot: RobotModel
    bodies: list[Body]
    tools: list[Tool]
    reach: float          # m, largest distance of a joint origin from the root at q = neutral
    moving_mass: float    # kg, the moving bodies' total in the URDF

    @property
    def n_parameters(self) -> int:
        """Length of the stacked body vector (10 per moving body)."""
        return 10 * len(self.bodies)

    def body_parameters(self, links: np.ndarray, tools: np.ndarray) -> np.ndarray:
        """Stacked body pi (10 n,) from each child link's pi (n, 10) and each tool's (k, 10)."""
        out = np.array([links[b] + body.rest for b, body in enumerate(self.bodies)])
        for t, tool in enumerate(self.tools):
            out[tool.body] += tool.transform @ tools[t]
        return out.reshape(-1)


def _rpy_xyz(origin: ET.Element | None) -> tuple[np.ndarray, np.ndarray]:
    if origin is None:
        return np.eye(3), np.zeros(3)
    xyz = np.array([float(x) for x in origin.get("xyz", "0 0 0").split()])
    rpy = np.array([float(x) for x in origin.get("rpy", "0 0 0").split()])
    return pin.rpy.rpyToMatrix(rpy), xyz


def link_inertials(urdf: str) -> dict[str, np.ndarray]:
    """pi (10,) of every URDF link that has an ``<inertial>``, in the link's own frame."""
    out = {}
    for link in ET.fromstring(urdf).iter("link"):
        el = link.find("inertial")
        if el is None:
            continue
        R, xyz = _rpy_xyz(el.find("origin"))
        mass = float(el.find("mass").get("value"))
        ie = el.find("inertia")
        six = np.array([float(ie.get(k)) for k in ("ixx", "ixy", "iyy", "ixz", "iyz", "izz")])
        out[link.get("name")] = inr.parameters(mass, xyz, R @ inr.tensor(six) @ R.T)
    return out


def child_links(urdf: str) -> dict[str, str]:
    """URDF joint name -> its child link name."""
    return {j.get("name"): j.find("child").get("link")
            for j in ET.fromstring(urdf).iter("joint") if j.find("child") is not None}


def build_layout(robot: RobotModel, urdf: str, tools: list[Tool] | None = None,
                 relative_spread: float = 0.5) -> Layout:
    """The bodies of ``robot`` (built from ``urdf``) and the given tools. Raises ModelError for
    a tool on a link the URDF does not have, or a URDF whose bodies this module cannot split
    (a defect: the sum of its links must be Pinocchio's body)."""
    model = robot.model
    inertials = link_inertials(urdf)
    children = child_links(urdf)
    frames = {f.name: f for f in model.frames if f.type == pin.FrameType.BODY}
    bodies: list[Body] = []
    for j in range(1, model.njoints):
        name = model.names[j]
        link = children.get(name)
        if link is None or link not in frames:
            raise ModelError(f"joint {name!r}: its child link is not in the URDF")
        # every link of this body, placed in the joint frame
        total = np.zeros(10)
        own = np.zeros(10)
        placement = inr.transform_matrix(frames[link].placement.rotation,
                                         frames[link].placement.translation)
        for f in model.frames:
            if f.type != pin.FrameType.BODY or f.parentJoint != j or f.name not in inertials:
                continue
            part = inr.transform_matrix(f.placement.rotation, f.placement.translation) \
                @ inertials[f.name]
            total += part
            if f.name == link:
                own = part
        body_pi = model.inertias[j].toDynamicParameters()
        if not np.allclose(total, body_pi, rtol=1e-9, atol=1e-12):
            raise ModelError(f"joint {name!r}: the URDF's links do not add up to Pinocchio's body"
                             f" ({total} vs {body_pi}); expected a URDF Pinocchio reads as written")
        bodies.append(Body(name, link, own, body_pi - own, link in inertials,
                           placement=placement))
    data = model.createData()
    pin.forwardKinematics(model, data, pin.neutral(model))
    reach = max([float(np.linalg.norm(data.oMi[j].translation)) for j in range(1, model.njoints)]
                + [0.1])
    moving = float(sum(b.urdf[0] for b in bodies))
    layout = Layout(robot, bodies, [], reach, moving)
    for b in bodies:
        b.scale = prior_scales(b.link_urdf, layout, relative_spread)
    for tool in tools or []:
        if tool.name in inertials or tool.name in frames:
            raise ModelError(f"tool name {tool.name!r} is already a link of the URDF (written by "
                             "an earlier identification?); expected a new name, or the URDF "
                             "without it")
        frame = frames.get(tool.link)
        if frame is None:
            raise ModelError(f"tool link {tool.link!r} is not a link of the URDF; expected one "
                             f"of {sorted(frames)}")
        if frame.parentJoint == 0:
            raise ModelError(f"tool link {tool.link!r} is fixed to the robot's root: a tool there "
                             "does not move and cannot be identified; expected a link moved by "
                             "the joints")
        tool.body = frame.parentJoint - 1
        tool.transform = inr.transform_matrix(frame.placement.rotation,
                                              frame.placement.translation)
        layout.tools.append(tool)
    return layout


def prior_scales(pi: np.ndarray, layout: Layout, relative_spread: float) -> np.ndarray:
    """Prior standard deviations (10,) of a link's pi: ``relative_spread`` x (m0, m0 L (x3),
    m0 L^2 (x6)), m0 the link's URDF mass (at least :data:`MASS_FLOOR_FRACTION` of the moving
    mass), L its size: the larger of its centre-of-mass distance and its radius of gyration, at
    least :data:`LENGTH_FLOOR_FRACTION` of the robot's reach. Our choice (no source): the URDF
    is believed to within about this fraction of a link's own size."""
    m0 = max(float(pi[0]), MASS_FLOOR_FRACTION * layout.moving_mass, 1e-6)
    m, c, i_c = inr.summary(pi)
    size = 0.0
    if m > 0:
        size = max(float(np.linalg.norm(c)), math.sqrt(max(np.trace(i_c), 0.0) / m))
    length = max(size, LENGTH_FLOOR_FRACTION * layout.reach)
    return relative_spread * np.array([m0] + [m0 * length] * 3 + [m0 * length ** 2] * 6)


def tool_prior(tool: Tool, layout: Layout) -> tuple[np.ndarray, np.ndarray]:
    """Prior mean and standard deviations (10,) of a tool's pi in its link frame: centred on
    the mass guess (0 if none) at the link origin with no rotational inertia; spread: mass
    max(guess, 1/4 of the moving mass), size 1/10 of the reach (our choice, no source: a tool
    is small against the arm, its mass unknown)."""
    m_scale = max(tool.mass_guess, 0.25 * layout.moving_mass, 1e-3)
    length = 0.1 * layout.reach
    mean = np.zeros(10)
    mean[0] = tool.mass_guess
    scale = np.array([m_scale] + [m_scale * length] * 3 + [m_scale * length ** 2] * 6)
    return mean, scale
