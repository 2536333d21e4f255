"""The catalogue of built-in invented scenarios: what Marten handles (doors, drawers, carts,
toolboxes) or how it moves freely (commissioning), the objects' true parameters, the
motions' numbers, and the record of a simulated run. Everything here is our own
invention; :mod:`.simulator` runs them."""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

STANDARD_GRAVITY = 9.80665  # m/s^2, CGPM 1901 (3rd General Conference on Weights and Measures)

RATE_RANGE = (50.0, 10000.0)  # Hz, allowed sample rates
MAX_DURATION = 120.0         # s
EFFORT_SIDES = ("link", "motor")

JOINT_NAMES: tuple[str, ...] = (
    "marten_base_x", "marten_base_y", "marten_base_yaw",
    "marten_shoulder_yaw", "marten_shoulder_pitch", "marten_upper_arm_roll", "marten_elbow_pitch",
    "marten_forearm_roll", "marten_wrist_pitch", "marten_wrist_roll",
)
# Invented motor-side friction, per joint in JOINT_NAMES order (N·s/m or N·m·s/rad; N or N·m).
FRICTION_VISCOUS: tuple[float, ...] = (6.0, 6.0, 3.0, 1.2, 1.4, 0.6, 0.7, 0.25, 0.2, 0.1)
FRICTION_COULOMB: tuple[float, ...] = (4.0, 4.0, 2.5, 1.5, 1.8, 0.8, 0.9, 0.35, 0.3, 0.15)

# Preferred arm posture for inverse kinematics (rad), arm joints only.
_ARM_PREFERRED = np.array([0.0, 0.45, 0.0, 1.35, 0.0, 0.9, 0.0])


@dataclass(frozen=True)
class Wiggle:
    """One sinusoid of a path: amplitude (m, or rad for a joint angle), frequency (Hz), phase
    (rad)."""

    amplitude: float
    frequency: float
    phase: float = 0.0


@dataclass(frozen=True)
class JointSweep:
    """Desired motion of one joint in a scenario without an object.

    ``q_ref'(t) = e(t) sum(2 pi f a cos(2 pi f t + phase))`` over ``terms`` (amplitude ``a``
    rad, or m for the base's prismatic joints; frequency ``f`` Hz; phase rad), ``e`` the run's
    plateau envelope (see :attr:`ScenarioSpec.ramp`), and ``q_ref(0) = centre`` rad or m: on
    the plateau the joint follows ``sum(a sin(2 pi f t + phase))`` about a point near the
    centre (the ramps shift it by at most ``2 sum(a)``).
    """

    joint: str
    centre: float
    terms: tuple[Wiggle, ...]

    @property
    def peak_speed(self) -> float:
        """Upper bound of |q_ref'| on the plateau, rad/s or m/s: sum of 2 pi f a."""
        return sum(2 * math.pi * w.frequency * abs(w.amplitude) for w in self.terms)


@dataclass(frozen=True)
class ScenarioSpec:
    """An invented scenario: the object, its truth values along ``u`` and the robot's task.

    ``direction_kind``: ``"world"`` (an object along a fixed unit vector ``direction``, world
    frame), ``"arc"`` (the door: ``direction`` is the opening tangent when closed; it turns with
    the door), ``"cartesian"`` (an object with 3x3 mass, damping and stiffness matrices and a
    static force vector, ``physical`` keys ``mass_matrix_kg``, ``damping_matrix_N_s_per_m``,
    ``stiffness_matrix_N_per_m``, ``static_force_N``; the tool wiggles along every world axis,
    ``axis_wiggles``; ``direction`` only names the direction of the *_along truth) or
    ``"none"`` (no object at all: free motion only, see ``joint_motion``).
    ``settings``: recommended overrides of the estimator's settings (dotted names).
    ``duration`` s, default run length; ``hold`` s of holding still at the end.

    With an object, truth along the manipulation direction: ``mass`` kg, ``damping`` N·s/m,
    ``stiffness`` N/m, ``static_force`` N, in ``f = mass x'' + damping x' + stiffness x +
    static_force`` where ``f`` is the force the robot applies to the object along ``u``;
    ``free_time`` s of free motion before contact;
    ``contact_point`` m (world) nominal point where the tool meets the object; ``start_offset``
    m, where the tool starts relative to it; ``travel`` m along ``u`` (arc length for the door);
    ``wiggles`` sinusoids along ``u`` during contact;
    ``monotone``: keep the desired motion along ``u`` going forward (friction objects);
    ``base_follows``: the base travels with the object; ``feedforward`` N, controller pre-load
    along ``u`` from contact on; ``physical``: the object's own parameters, units in the keys.

    Without an object (``"none"``) the object fields stay None/empty and there is no truth of
    object parameters; ``joint_motion`` holds one :class:`JointSweep` per joint of
    :data:`JOINT_NAMES` and ``ramp`` s is the length of the envelope's quintic ramps at the
    start and before the final hold.
    """

    name: str
    description: str
    duration: float
    settings: dict[str, Any] = field(hash=False)
    direction_kind: str
    mass: float | None = None
    damping: float | None = None
    stiffness: float | None = None
    static_force: float | None = None
    direction: tuple[float, float, float] | None = None
    free_time: float = 0.0
    contact_point: tuple[float, float, float] | None = None
    start_offset: tuple[float, float, float] | None = None
    travel: float = 0.0
    wiggles: tuple[Wiggle, ...] = ()
    hold: float = 0.0
    monotone: bool = False
    base_follows: bool = False
    feedforward: float = 0.0
    physical: dict[str, float] = field(default_factory=dict, hash=False)
    joint_motion: tuple[JointSweep, ...] = ()
    ramp: float = 0.0
    axis_wiggles: tuple[tuple[Wiggle, ...], ...] = ()

    def __post_init__(self) -> None:
        # developer checks of the built-in catalogue (not user input)
        if self.direction_kind not in ("world", "arc", "cartesian", "none"):
            raise ValueError(f"scenario {self.name!r}: direction_kind {self.direction_kind!r};"
                             " expected 'world', 'arc', 'cartesian' or 'none'")
        if self.direction_kind == "cartesian":
            missing = [n for n in ("direction", "contact_point", "start_offset")
                       if getattr(self, n) is None]
            missing += [k for k in CARTESIAN_KEYS if k not in self.physical]
            if missing or len(self.axis_wiggles) != 3 or self.joint_motion:
                raise ValueError(f"scenario {self.name!r} (cartesian): it needs {missing}, "
                                 "three axis_wiggles and no joint_motion")
        elif self.has_object:
            missing = [n for n in ("mass", "damping", "stiffness", "static_force", "direction",
                                   "contact_point", "start_offset")
                       if getattr(self, n) is None]
            if missing or self.joint_motion:
                raise ValueError(f"scenario {self.name!r} has an object: it needs {missing}"
                                 " and no joint_motion")
        else:
            names = tuple(s.joint for s in self.joint_motion)
            if sorted(names) != sorted(JOINT_NAMES) or self.ramp <= 0:
                raise ValueError(f"scenario {self.name!r} has no object: expected one joint "
                                 f"sweep for each of {JOINT_NAMES} (got {names}) and a ramp "
                                 f"> 0 s (got {self.ramp!r})")

    @property
    def has_object(self) -> bool:
        """Whether the robot meets an object (False: free motion only, no contact)."""
        return self.direction_kind != "none"

    @property
    def min_duration(self) -> float:
        """Shortest allowed run, s. With an object: free motion, 1.5 s of motion in contact, the
        final hold. Without: both envelope ramps, 2 s of full motion, the final hold."""
        if not self.has_object:
            return 2 * self.ramp + self.hold + 2.0
        return self.free_time + self.hold + 1.5

    def truth_parameters(self) -> dict[str, float] | None:
        """``{"mass": kg, "damping": N·s/m, "stiffness": N/m, "static_force": N}``; for a
        cartesian object the 21 entries of the cartesian model (``mass_xx`` ... ``mass_zz``,
        ``damping_*``, ``stiffness_*`` and ``static_force_x/y/z``); None when the scenario has
        no object (there are no object parameters to be true)."""
        if not self.has_object:
            return None
        if self.direction_kind == "cartesian":
            out: dict[str, float] = {}
            for prefix, key in zip(("mass", "damping", "stiffness"), CARTESIAN_KEYS[:3],
                                   strict=True):
                matrix = np.asarray(self.physical[key], float)
                for a, b in ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)):
                    out[f"{prefix}_{'xyz'[a]}{'xyz'[b]}"] = float(matrix[a, b])
            for a in range(3):
                out[f"static_force_{'xyz'[a]}"] = float(self.physical[CARTESIAN_KEYS[3]][a])
            return out
        return {"mass": self.mass, "damping": self.damping, "stiffness": self.stiffness,
                "static_force": self.static_force}

    def truth_mechanism(self) -> dict[str, Any] | None:
        """The true geometry the estimator's ``revolute`` or ``prismatic`` model should find:
        ``axis`` (unit, world; the opening motion positive), for a hinge ``axis_point`` m,
        ``radius`` m and its own parameters (``inertia`` kg·m², ``rotary_damping`` N·m·s/rad,
        ``rotary_stiffness`` N·m/rad, ``torque`` N·m); for a cartesian object its matrices.
        None when the scenario has none of these."""
        if self.direction_kind == "arc":
            ph = self.physical
            u = np.asarray(self.direction, float)
            n0 = np.cross(u, [0.0, 0.0, 1.0])
            hinge = np.asarray(self.contact_point, float) - ph["handle_radius_m"] * n0
            return {"kind": "revolute", "axis": [0.0, 0.0, 1.0],
                    "axis_point": [float(hinge[0]), float(hinge[1]), 0.0],
                    "radius": ph["handle_radius_m"], "inertia": ph["inertia_kg_m2"],
                    "rotary_damping": ph["damping_N_m_s_per_rad"],
                    "rotary_stiffness": ph["stiffness_N_m_per_rad"],
                    "torque": ph["preload_N_m"]}
        if self.direction_kind == "world":
            return {"kind": "prismatic", "axis": [float(x) for x in self.direction]}
        return None


def door_along_arc(inertia: float, damping: float, stiffness: float, preload: float,
                   radius: float) -> dict[str, float]:
    """Door about its hinge -> equivalent parameters along the handle's arc ``x = R theta``.

    inertia kg·m^2, damping N·m·s/rad, stiffness N·m/rad, preload N·m (closer), radius m.
    From ``R f = I theta'' + c theta' + k theta + tau0`` with ``theta = x / R``:
    mass ``I/R^2`` kg, damping ``c/R^2`` N·s/m, stiffness ``k/R^2`` N/m, static force
    ``tau0/R`` N.
    """
    return {"mass": inertia / radius**2, "damping": damping / radius**2,
            "stiffness": stiffness / radius**2, "static_force": preload / radius}


def _door() -> ScenarioSpec:
    phys = {"inertia_kg_m2": 2.25, "damping_N_m_s_per_rad": 2.25,
            "stiffness_N_m_per_rad": 9.0, "preload_N_m": 4.5, "handle_radius_m": 0.75,
            "open_angle_rad": 0.45}
    arc = door_along_arc(phys["inertia_kg_m2"], phys["damping_N_m_s_per_rad"],
                         phys["stiffness_N_m_per_rad"], phys["preload_N_m"],
                         phys["handle_radius_m"])
    return ScenarioSpec(
        name="door",
        description="Marten pulls a spring-closed storeroom door open by its handle and works it"
                    " back and forth along the arc.",
        duration=20.0, direction_kind="arc", direction=(-1.0, 0.0, 0.0),
        settings={"direction.mode": "estimated", "direction.vector": [-1.0, 0.0, 0.0]},
        free_time=2.0, contact_point=(0.90, -0.10, 0.95), start_offset=(-0.22, -0.12, 0.18),
        # the wiggles ride on the opening: the door's widest swing stays its open angle
        travel=phys["handle_radius_m"] * phys["open_angle_rad"] - 0.06 - 0.010,
        # the handle is worked at up to 0.3 m/s: slower working (0.085 m/s) leaves the door's
        # damping force (0.3 N) under the force estimate's noise, and the demo would show a
        # damping that never converges - the motion, not a threshold, decides what is learned
        wiggles=(Wiggle(0.06, 0.8), Wiggle(0.010, 1.8)),
        hold=1.0, monotone=False, base_follows=False, feedforward=7.0, physical=phys, **arc)


def _drawer() -> ScenarioSpec:
    return ScenarioSpec(
        name="drawer",
        description="Marten slides a loaded parts drawer out of a workbench towards itself.",
        duration=10.0, mass=5.5, damping=7.0, stiffness=0.0, static_force=4.5,
        direction_kind="world", direction=(-1.0, 0.0, 0.0),
        settings={"direction.mode": "world", "direction.vector": [-1.0, 0.0, 0.0]},
        free_time=2.0, contact_point=(0.88, -0.05, 0.72), start_offset=(-0.20, 0.15, 0.20),
        travel=0.38, wiggles=(Wiggle(0.004, 0.4), Wiggle(0.0022, 2.2)),
        hold=0.0, monotone=True, base_follows=False, feedforward=5.5,
        physical={"rail_friction_N": 4.5})


def _cart() -> ScenarioSpec:
    return ScenarioSpec(
        name="cart",
        description="Marten pushes a loaded four-wheel parts cart across the floor, driving its"
                    " base along behind it.",
        duration=14.0, mass=42.0, damping=18.0, stiffness=0.0, static_force=10.5,
        direction_kind="world", direction=(1.0, 0.0, 0.0),
        settings={"direction.mode": "world", "direction.vector": [1.0, 0.0, 0.0]},
        free_time=2.0, contact_point=(0.72, 0.0, 0.92), start_offset=(-0.18, 0.18, 0.15),
        travel=1.2, wiggles=(Wiggle(0.012, 0.6), Wiggle(0.003, 1.7)),
        hold=0.0, monotone=True, base_follows=True, feedforward=12.0,
        physical={"rolling_resistance_coefficient": 10.5 / (42.0 * STANDARD_GRAVITY)})


def _toolbox() -> ScenarioSpec:
    mass = 3.5
    return ScenarioSpec(
        name="toolbox",
        description="Marten lifts a 3.5 kg toolbox off a wall hook by its handle, raises and"
                    " lowers it, then holds it still.",
        duration=12.0, mass=mass, damping=0.0, stiffness=0.0,
        static_force=mass * STANDARD_GRAVITY,
        direction_kind="world", direction=(0.0, 0.0, 1.0),
        settings={"direction.mode": "world", "direction.vector": [0.0, 0.0, 1.0]},
        free_time=2.0, contact_point=(0.70, 0.15, 0.72), start_offset=(-0.15, -0.20, 0.18),
        travel=0.20, wiggles=(Wiggle(0.025, 0.5), Wiggle(0.004, 1.7)),
        hold=2.0, monotone=False, base_follows=False, feedforward=36.0,
        physical={"gravity_m_s2": STANDARD_GRAVITY})


def _commissioning() -> ScenarioSpec:
    """Every joint back and forth at several speeds, touching nothing (our own numbers).

    Three sinusoids per joint, at frequencies that differ from joint to joint, so that every
    joint sweeps through slow and fast speeds in both directions. The heavy joints (the base's
    x, y and yaw, the shoulder, the upper arm and the elbow) move in long, slow strokes (main
    terms below 0.2 Hz, none above 1 Hz): their speed then changes slowly, which is what
    separates viscous from Coulomb friction, and their accelerations stay small. The efforts
    are held over each sample interval while the observer integrates them by the trapezoid
    rule; from fast motion of a heavy joint this biases the identified viscous friction low,
    by an amount proportional to the sample interval that grows with the joint's inertia and
    with how fast its speed changes (seen on the base at 1 kHz without noise: -7 to -12 % with
    the whole amplitude ramped in over 1 s, about -2 % with this motion; half at 2 kHz).
    Peak speeds stay below 60 % of the URDF's velocity limits (1.5 m/s base, 2 rad/s yaw and
    arm; :attr:`JointSweep.peak_speed`); the base stays within 1.2 m and the arm stays near
    its preferred posture, well inside its joint limits, with the tool above the floor and
    clear of the base.
    """
    def sweep(joint: str, centre: float, *terms: tuple[float, float, float]) -> JointSweep:
        return JointSweep(joint, centre, tuple(Wiggle(a, f, ph) for a, f, ph in terms))

    a = _ARM_PREFERRED
    motion = (  # amplitude rad (m), frequency Hz, phase rad
        sweep("marten_base_x", 0.0, (0.45, 0.10, 0.0), (0.18, 0.17, 1.1), (0.03, 0.31, 2.3)),
        sweep("marten_base_y", 0.0, (0.40, 0.09, 0.7), (0.18, 0.15, 2.0), (0.03, 0.29, 0.4)),
        sweep("marten_base_yaw", 0.0, (0.45, 0.08, 0.3), (0.20, 0.19, 1.6), (0.04, 0.43, 2.9)),
        sweep("marten_shoulder_yaw", a[0], (0.35, 0.13, 1.9), (0.15, 0.31, 0.2),
              (0.03, 0.67, 1.3)),
        sweep("marten_shoulder_pitch", a[1], (0.22, 0.15, 0.9), (0.10, 0.34, 2.6),
              (0.02, 0.71, 0.5)),
        sweep("marten_upper_arm_roll", a[2], (0.32, 0.17, 2.4), (0.12, 0.41, 0.8),
              (0.03, 0.93, 1.7)),
        sweep("marten_elbow_pitch", a[3], (0.28, 0.19, 0.1), (0.10, 0.43, 1.4),
              (0.025, 0.97, 2.7)),
        sweep("marten_forearm_roll", a[4], (0.29, 0.33, 1.2), (0.07, 0.89, 2.2),
              (0.015, 2.03, 0.6)),
        sweep("marten_wrist_pitch", a[5], (0.28, 0.37, 2.8), (0.06, 0.97, 0.3),
              (0.013, 2.11, 1.5)),
        sweep("marten_wrist_roll", a[6], (0.24, 0.41, 0.5), (0.06, 1.07, 1.8),
              (0.012, 2.31, 2.5)),
    )
    return ScenarioSpec(
        name="commissioning",
        description="Marten touches nothing and moves every joint, the base's x, y and yaw"
                    " included, back and forth at several speeds: data for identifying bias,"
                    " friction and noise (no object, no contact, no object parameters).",
        duration=20.0, settings={}, direction_kind="none", hold=0.5, ramp=1.0,
        joint_motion=motion)


CARTESIAN_KEYS = ("mass_matrix_kg", "damping_matrix_N_s_per_m", "stiffness_matrix_N_per_m",
                  "static_force_N")


def _cabinet_door() -> ScenarioSpec:
    """A tall tool-cabinet door on a vertical hinge with a soft closer, swung through about 40
    degrees by its bar handle (numbers invented)."""
    phys = {"inertia_kg_m2": 0.95, "damping_N_m_s_per_rad": 0.6,
            "stiffness_N_m_per_rad": 2.6, "preload_N_m": 1.4, "handle_radius_m": 0.46,
            "open_angle_rad": 0.55}
    arc = door_along_arc(phys["inertia_kg_m2"], phys["damping_N_m_s_per_rad"],
                         phys["stiffness_N_m_per_rad"], phys["preload_N_m"],
                         phys["handle_radius_m"])
    u = np.array([-0.94, 0.34, 0.0])
    return ScenarioSpec(
        name="cabinet_door",
        description="Marten swings a tool-cabinet door open by its bar handle against a soft"
                    " closer and works it back and forth (hinge estimated from the path).",
        duration=18.0, direction_kind="arc", direction=tuple(u / np.linalg.norm(u)),
        settings={"environment.model": "revolute", "direction.mode": "estimated",
                  "direction.vector": [float(x) for x in u / np.linalg.norm(u)]},
        free_time=2.0, contact_point=(0.86, 0.05, 0.88), start_offset=(-0.20, 0.12, 0.16),
        travel=phys["handle_radius_m"] * phys["open_angle_rad"],
        wiggles=(Wiggle(0.035, 0.5), Wiggle(0.010, 1.5)),
        hold=1.0, monotone=False, base_follows=False, feedforward=4.0, physical=phys, **arc)


def _tool_cart_drawer() -> ScenarioSpec:
    """A drawer of a rolling tool cart, on rails at an angle to the robot (numbers
    invented)."""
    u = np.array([-0.8, -0.6, 0.0])
    return ScenarioSpec(
        name="tool_cart_drawer",
        description="Marten pulls a loaded drawer out of a tool cart standing at an angle to"
                    " it and works it in and out (slider axis estimated from the path).",
        duration=10.0, mass=3.2, damping=9.0, stiffness=0.0, static_force=3.0,
        direction_kind="world", direction=tuple(u),
        settings={"environment.model": "prismatic", "direction.mode": "estimated",
                  "direction.vector": [float(x) for x in u]},
        free_time=2.0, contact_point=(0.84, 0.10, 0.74), start_offset=(-0.18, 0.16, 0.18),
        travel=0.26, wiggles=(Wiggle(0.03, 0.5), Wiggle(0.006, 1.8)),
        hold=0.0, monotone=False, base_follows=False, feedforward=3.0,
        physical={"rail_friction_N": 3.0})


def _rotation(axis: tuple[float, float, float], angle: float) -> np.ndarray:
    """Rotation matrix about a unit axis by an angle in rad (Rodrigues)."""
    k = np.asarray(axis, float) / np.linalg.norm(axis)
    K = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return np.eye(3) + math.sin(angle) * K + (1 - math.cos(angle)) * K @ K


def _soft_fixture() -> ScenarioSpec:
    """A part held in a compliant fixture (rubber mounts), stiffer in one direction than the
    others, its principal axes turned away from the world's (numbers invented)."""
    R = _rotation((1.0, 1.0, 1.0), math.radians(35.0))
    mass = R @ np.diag([1.6, 2.1, 2.6]) @ R.T
    damping = R @ np.diag([18.0, 30.0, 45.0]) @ R.T
    stiffness = R @ np.diag([300.0, 650.0, 1100.0]) @ R.T
    phys = {"mass_matrix_kg": mass.tolist(), "damping_matrix_N_s_per_m": damping.tolist(),
            "stiffness_matrix_N_per_m": stiffness.tolist(),
            "static_force_N": [2.0, -1.5, 4.0],
            "principal_mass_kg": [1.6, 2.1, 2.6], "principal_damping_N_s_per_m": [18, 30, 45],
            "principal_stiffness_N_per_m": [300, 650, 1100],
            "rotation_axis": [1.0, 1.0, 1.0], "rotation_deg": 35.0}
    return ScenarioSpec(
        name="soft_fixture",
        description="Marten presses and wiggles a part held in a compliant three-axis fixture"
                    " (3-D mass, damping and stiffness, world frame).",
        duration=12.0, direction_kind="cartesian", direction=(1.0, 0.0, 0.0),
        settings={"environment.model": "cartesian", "direction.mode": "world",
                  "direction.vector": [1.0, 0.0, 0.0]},
        free_time=2.0, contact_point=(0.80, 0.0, 0.80), start_offset=(-0.18, 0.15, 0.16),
        hold=0.5, feedforward=0.0, physical=phys,
        axis_wiggles=((Wiggle(0.020, 0.55), Wiggle(0.006, 1.9, 0.4)),
                      (Wiggle(0.018, 0.75), Wiggle(0.005, 2.3, 1.1)),
                      (Wiggle(0.015, 0.95), Wiggle(0.004, 1.45, 2.0))))


SCENARIOS: dict[str, ScenarioSpec] = {s.name: s for s in (
    _door(), _drawer(), _cart(), _toolbox(), _commissioning(), _cabinet_door(),
    _tool_cart_drawer(), _soft_fixture())}


@dataclass
class SimulatedRun:
    """One simulated run, sampled at ``rate``; N samples, n = 10 joints.

    time (N,) s from 0. joint_names (n,). position (N, n) rad or m, JointState convention (the
    base yaw as an unwrapped angle), measured (quantized). velocity (N, n) rad/s or m/s, measured.
    effort (N, n) N·m or N, measured (bias, noise, and friction when motor side).
    true_force (N, 3) N: force the robot applies to the object, world frame (zero out of contact).
    true_position_along (N,) m: object displacement along ``u`` from contact onset (arc length
    for the door; 0 before contact). in_contact (N,) bool.
    truth: ``has_object``; the object parameters (``mass`` kg, ``damping`` N·s/m,
    ``stiffness`` N/m, ``static_force`` N), absent when ``has_object`` is False (free motion
    only: there is no object whose parameters could be true), ``bias`` (n,) N·m/N,
    ``friction_viscous`` (n,) N·m·s/rad or N·s/m, ``friction_coulomb`` (n,) N·m/N,
    ``friction_smoothing_velocity`` rad/s, ``effort_noise`` N·m, ``velocity_noise``
    rad/s, ``encoder_bits``, ``position_quantum`` (n,) rad/m (noise off: 0 and zeros),
    ``direction`` (N, 3) for the door (the opening tangent; before contact, the closed door's) or
    (3,), ``physical`` (the object's own parameters), ``contact_time`` s, ``contact_point`` (3,) m
    (where contact began), ``hinge`` (3,) m (door only), ``effort_side``, ``noise``, ``seed``;
    without an object ``direction``, ``contact_time`` and ``contact_point`` are None.
    urdf: the mobile Marten's URDF text. contact_frame: ``tool_tip``. settings: recommended
    estimator settings (dotted names), including ``effort_side``.
    Extras (exact, uncorrupted): true_force_along (N,) N; true_velocity_along (N,) m/s;
    true_acceleration_along (N,) m/s^2; true_effort (N, n) joint-side torque N·m/N; true_position
    (N, n) and true_velocity (N, n) unquantized, noise-free; true_acceleration (N, n) rad/s^2 or
    m/s^2 (the acceleration at the sample's state).
    """

    scenario: str
    time: np.ndarray
    joint_names: tuple[str, ...]
    position: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray
    true_force: np.ndarray
    true_position_along: np.ndarray
    in_contact: np.ndarray
    truth: dict[str, Any]
    urdf: str
    contact_frame: str
    settings: dict[str, Any]
    true_force_along: np.ndarray | None = None
    true_velocity_along: np.ndarray | None = None
    true_acceleration_along: np.ndarray | None = None
    true_effort: np.ndarray | None = None
    true_position: np.ndarray | None = None
    true_velocity: np.ndarray | None = None
    true_acceleration: np.ndarray | None = None


# ------------------------------------------------------------------------------------------
# argument checks


def get_scenario(name: Any) -> ScenarioSpec:
    """The spec of a built-in scenario; ValueError naming the bad name and the valid ones."""
    if not isinstance(name, str) or name not in SCENARIOS:
        raise ValueError(f"unknown scenario {name!r}; expected one of: "
                         + ", ".join(sorted(SCENARIOS)))
    return SCENARIOS[name]


def _is_real(x: Any) -> bool:
    return isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool)


def _check_args(spec: ScenarioSpec, duration: Any, seed: Any, rate: Any, effort_side: Any,
                noise: Any) -> tuple[float, int, float]:
    if duration is None:
        duration = spec.duration
    if not _is_real(duration) or not math.isfinite(duration) \
            or not spec.min_duration <= duration <= MAX_DURATION:
        raise ValueError(f"duration {duration!r} s is not allowed for scenario {spec.name!r};"
                         f" expected a number of seconds in [{spec.min_duration:g},"
                         f" {MAX_DURATION:g}] (default {spec.duration:g})")
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise ValueError(f"seed {seed!r} is not allowed; expected a whole number >= 0")
    if not _is_real(rate) or not math.isfinite(rate) or not RATE_RANGE[0] <= rate <= RATE_RANGE[1]:
        raise ValueError(f"rate {rate!r} Hz is not allowed; expected a number of Hz in"
                         f" [{RATE_RANGE[0]:g}, {RATE_RANGE[1]:g}]")
    if effort_side not in EFFORT_SIDES:
        raise ValueError(f"effort_side {effort_side!r} is not allowed; expected one of: "
                         + ", ".join(repr(s) for s in EFFORT_SIDES))
    if not isinstance(noise, (bool, np.bool_)):
        raise ValueError(f"noise {noise!r} is not allowed; expected True or False")
    return float(duration), int(seed), float(rate)


