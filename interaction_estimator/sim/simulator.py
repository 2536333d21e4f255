"""Built-in invented scenarios and their simulator: Marten handles doors, drawers, carts, toolboxes,
and moves freely for commissioning.

Everything here is our own invention: the robot (Marten, see :mod:`.marten`), the objects, their
numbers and the motions. :func:`simulate` returns arrays (a :class:`SimulatedRun`); the bag writer
and the command line turn them into a bag with the ground truth.

Physics
-------
The mobile Marten (10 joints, world frame ``odom``) and the object are simulated together, exactly.
Rigid-body terms come from Pinocchio (``computeAllTerms``: ``M(q)``, ``h(q, v) = C v + g``; the
contact-frame Jacobian ``J`` (3 x 10, world axes) and the frame's acceleration drift
``gamma = J' v``). With ``F`` the force the robot applies to the object (world frame, N), the
robot obeys ``M v' + h = tau - J^T F`` and the object obeys its own law along the manipulation
direction ``u``. Both are solved together each internal step as one linear (KKT) system in the
joint accelerations and the contact-force components:

* drawer, cart, toolbox (one row, ``F = f u``; the directions across ``u`` are not constrained by
  the object and are held by the robot's controller)::

      [ M          J^T u ] [ v' ]   [ tau - h                              ]
      [ m u^T J    -1    ] [ f  ] = [ -(m u.gamma + d x' + k x + f0)       ]

  with ``x = u . (p - p_contact)``, ``x' = u^T J v``, ``x'' = u^T (J v' + gamma)``, so that
  ``f = m x'' + d x' + k x + f0`` holds exactly at every step.
* door (two rows, ``F = f_t t + f_r n``): the handle is held on its circle of radius ``R``
  about the vertical hinge axis (radial row, with a light Baumgarte term against drift; ``f_r``
  is the hinge's reaction), and the door's rotation obeys
  ``R f_t = I theta'' + c theta' + k theta + tau0`` (tangential row). ``t`` is the horizontal
  unit tangent in the opening sense, ``n`` the outward radial unit vector. Along the arc
  (``x = R theta``) this is the package's model with ``mass = I/R^2``, ``damping = c/R^2``,
  ``stiffness = k/R^2`` and ``static_force = tau0/R`` (see :func:`door_along_arc`).

When contact begins (at ``free_time``, on a control tick) the object is placed where the tool
is, at rest, and the tool's velocity is projected by the matching inelastic-impact equations
(the same matrix, zero right-hand side), so the run needs no impulse afterwards.

A scenario without an object (``direction_kind="none"``: ``commissioning``) has no KKT rows at
all: ``M v' + h = tau`` throughout, ``F = 0``, and no contact ever begins.

Integration: semi-implicit (symplectic) Euler, ``v += dt v'`` then ``q = integrate(q, dt v)``
(``pin.integrate``), internal step ``dt <= 0.5 ms``.

Controller (what drives the robot; it is not part of the estimator)
-------------------------------------------------------------------
Every control tick (at the sample rate when it is at least 1 kHz, otherwise a multiple of it)
the controller computes, from the true state, and holds (zero-order hold) until the next tick::

    tau = h + J^T F_task + N^T tau_posture
    F_task = Lambda (a_d - gamma) + K_x (p_d - p) + D_x (v_d - J v) + F_ff u_d
    tau_posture = K_q (q_ref - q) + D_q (v_ref - v)          (gains scaled by diag M)

``Lambda = (J M^-1 J^T)^-1`` is the task-space inertia and ``N^T = I - J^T (M^-1 J^T Lambda)^T``
the dynamically consistent null-space projector (Khatib, IEEE J. Robotics and Automation 1987).
``F_ff`` is the controller's constant pre-load from the task description, switched on at contact
(so that the door leaves its stop, the drawer breaks away, the box lifts); it is a controller
number, not a truth value, and is deliberately not equal to the object's static force. The
desired tool path ``p_d`` moves freely for ``free_time`` seconds (a smooth transfer with
sinusoidal wiggles, touching nothing), then follows the object: a slow opening/pulling/pushing/
lifting motion plus sums of sinusoids, so that acceleration, velocity and displacement are all
excited; some scenarios end by holding still. The posture reference ``q_ref`` is a spline through
inverse-kinematics key postures (Pinocchio Jacobians, damped least squares).

Without an object the controller is joint-space computed torque,
``tau = h + M (q_ref'' + K_q (q_ref - q) + D_q (q_ref' - q'))`` (posture gains as above), on a
reference in which every joint, base included, follows its own sum of sinusoids
(:class:`JointSweep`) with its velocity scaled by a plateau envelope (quintic ramps of
``ramp`` s at the start and before the final ``hold``).

Measurements
------------
With ``noise=True``: efforts get a constant per-joint bias (uniform in +-2 N·m or N, seeded) and
white noise (0.1 N·m or N); velocities white noise (0.003 rad/s or m/s); positions are quantized
by 18-bit encoders (2 pi / 2^18 rad; for the base's prismatic joints 2 pi r / 2^18 m with an
invented odometry wheel of radius r = 0.1 m). With ``effort_side="motor"`` the efforts are motor
side and include joint friction ``f_v v + f_c tanh(v / 0.01)`` (invented coefficients,
:data:`FRICTION_VISCOUS`, :data:`FRICTION_COULOMB`); the rigid-body dynamics are the same (the
motor supplies the friction on top of the joint torque). With ``noise=False`` there is no
noise, bias or quantization; friction stays in motor-side efforts because it is a physical
effect of where the effort is measured, not a sensor error.

The objects keep their constant static force at all times, as the model says, also in the brief
moments when they creep backwards (a few mm/s at contact onset, and in the cart's last 0.3 s when
it settles); Coulomb's sign switch is not simulated.

Sample ``k`` holds the state at ``time[k]``, the truth at that instant, and (at rates of at least
1 kHz) the effort held from ``time[k]`` to ``time[k+1]``.
"""
from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pinocchio as pin
from scipy.interpolate import CubicSpline

from .marten import CONTACT_FRAME, MOBILE_URDF, mobile_urdf

STANDARD_GRAVITY = 9.80665  # m/s^2, CGPM 1901 (3rd General Conference on Weights and Measures)

INTERNAL_STEP = 0.0005       # s, largest internal integration step
MIN_CONTROL_RATE = 1000.0    # Hz, the controller never runs slower than this
RATE_RANGE = (50.0, 10000.0)  # Hz, allowed sample rates
MAX_DURATION = 120.0         # s
EFFORT_SIDES = ("link", "motor")

EFFORT_NOISE = 0.1           # N·m (N for prismatic joints), standard deviation
VELOCITY_NOISE = 0.003       # rad/s (m/s for prismatic joints), standard deviation
ENCODER_BITS = 18
ODOMETRY_WHEEL_RADIUS = 0.1  # m, invented; sets the quantum of the base's prismatic joints
BIAS_LIMIT = 2.0             # N·m (N), bias drawn uniformly in [-BIAS_LIMIT, BIAS_LIMIT]
FRICTION_SMOOTHING_VELOCITY = 0.01  # rad/s (m/s), eps in tanh(v / eps)

JOINT_NAMES: tuple[str, ...] = (
    "marten_base_x", "marten_base_y", "marten_base_yaw",
    "marten_shoulder_yaw", "marten_shoulder_pitch", "marten_upper_arm_roll", "marten_elbow_pitch",
    "marten_forearm_roll", "marten_wrist_pitch", "marten_wrist_roll",
)
# Invented motor-side friction, per joint in JOINT_NAMES order (N·s/m or N·m·s/rad; N or N·m).
FRICTION_VISCOUS: tuple[float, ...] = (6.0, 6.0, 3.0, 1.2, 1.4, 0.6, 0.7, 0.25, 0.2, 0.1)
FRICTION_COULOMB: tuple[float, ...] = (4.0, 4.0, 2.5, 1.5, 1.8, 0.8, 0.9, 0.35, 0.3, 0.15)

# Controller gains (task space, per axis; posture as natural frequency and damping ratio).
TASK_STIFFNESS = 2500.0      # N/m
TASK_DAMPING = 200.0         # N·s/m
POSTURE_FREQUENCY = 8.0      # rad/s
POSTURE_DAMPING_RATIO = 1.0
DOOR_RADIAL_BAUMGARTE = 40.0  # rad/s, drift correction of the door's radial constraint

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
    the door) or ``"none"`` (no object at all: free motion only, see ``joint_motion``).
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

    def __post_init__(self) -> None:
        # developer checks of the built-in catalogue (not user input)
        if self.direction_kind not in ("world", "arc", "none"):
            raise ValueError(f"scenario {self.name!r}: direction_kind {self.direction_kind!r};"
                             " expected 'world', 'arc' or 'none'")
        if self.has_object:
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
        """``{"mass": kg, "damping": N·s/m, "stiffness": N/m, "static_force": N}``; None when
        the scenario has no object (there are no object parameters to be true)."""
        if not self.has_object:
            return None
        return {"mass": self.mass, "damping": self.damping, "stiffness": self.stiffness,
                "static_force": self.static_force}


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
        duration=16.0, direction_kind="arc", direction=(-1.0, 0.0, 0.0),
        settings={"direction.mode": "estimated", "direction.vector": [-1.0, 0.0, 0.0]},
        free_time=2.0, contact_point=(0.90, -0.10, 0.95), start_offset=(-0.22, -0.12, 0.18),
        travel=phys["handle_radius_m"] * phys["open_angle_rad"],
        wiggles=(Wiggle(0.030, 0.45), Wiggle(0.008, 1.6)),
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


SCENARIOS: dict[str, ScenarioSpec] = {s.name: s for s in (_door(), _drawer(), _cart(),
                                                          _toolbox(), _commissioning())}


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


# ------------------------------------------------------------------------------------------
# smooth profiles


def _smoothstep(s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Quintic 0 -> 1 on s in [0, 1] (clipped) and its first two derivatives in s."""
    s = np.clip(s, 0.0, 1.0)
    return (s**3 * (10 - 15 * s + 6 * s**2), 30 * s**2 * (1 - s) ** 2,
            60 * s * (1 - s) * (1 - 2 * s))


def _bump(s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """64 (s (1 - s))^3 on [0, 1], zero with zero slope and curvature at both ends, peak 1."""
    s = np.clip(s, 0.0, 1.0)
    w = s * (1 - s)
    dw, ddw = 1 - 2 * s, -2.0
    return 64 * w**3, 192 * w**2 * dw, 64 * (6 * w * dw**2 + 3 * w**2 * ddw)


def _envelope(s: np.ndarray, length: float, ramp: float
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Plateau 0 -> 1 -> 0 over [0, length] with quintic ramps of ``ramp`` s; zero outside."""
    up = _smoothstep(s / ramp)
    down = _smoothstep((length - s) / ramp)
    e = up[0] * down[0]
    de = up[1] / ramp * down[0] - up[0] * down[1] / ramp
    dde = (up[2] / ramp**2 * down[0] - 2 * up[1] * down[1] / ramp**2
           + up[0] * down[2] / ramp**2)
    inside = (s >= 0) & (s <= length)
    return e * inside, de * inside, dde * inside


def _contact_path(spec: ScenarioSpec, s: np.ndarray, contact_length: float
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Desired motion along u after contact, at contact times s (M,) s.

    Returns (x, x', x'', x_slow) in m, m/s, m/s^2, m:
    ``x = V int(e_s) + c e_w sum(a (cos(phi) - cos(w s + phi)))``. ``e_s`` is a plateau envelope
    over the moving time (the slow motion covers ``travel``), ``e_w`` a narrower one for the
    wiggles (with phi = 0 every wiggle is >= 0, so the object never goes behind its start);
    ``c`` = 1, or less for ``monotone`` scenarios if needed to keep ``x' >= 0``. x_slow is the
    slow part alone (for the posture keyframes).
    """
    move = contact_length - spec.hold
    ramp = min(1.5, move / 3.0)
    inset = 0.5 * ramp

    def envelopes(s_: np.ndarray):
        return _envelope(s_, move, ramp), _envelope(s_ - inset, move - 2 * inset, ramp)

    def wiggle(s_: np.ndarray):
        w_, dw_, ddw_ = np.zeros_like(s_), np.zeros_like(s_), np.zeros_like(s_)
        for wig in spec.wiggles:
            om = 2 * math.pi * wig.frequency
            w_ += wig.amplitude * (math.cos(wig.phase) - np.cos(om * s_ + wig.phase))
            dw_ += wig.amplitude * om * np.sin(om * s_ + wig.phase)
            ddw_ += wig.amplitude * om**2 * np.cos(om * s_ + wig.phase)
        return w_, dw_, ddw_

    grid = np.linspace(0.0, move, 8001)
    (eg, _, _), (ewg, dewg, _) = envelopes(grid)
    integral_e = np.concatenate(([0.0], np.cumsum(np.diff(grid) * 0.5 * (eg[1:] + eg[:-1]))))
    speed = spec.travel / integral_e[-1]
    scale = 1.0
    if spec.monotone:  # shrink the wiggles if they would make the desired motion go backwards
        wg, dwg, _ = wiggle(grid)
        back = dewg * wg + ewg * dwg
        neg = back < 0
        if np.any(neg):
            scale = min(1.0, 0.9 * float(np.min(speed * eg[neg] / -back[neg])))
    (e, de, dde), (ew, dew, ddew) = envelopes(s)
    w, dw, ddw = (scale * c for c in wiggle(s))
    slow = speed * np.interp(np.clip(s, 0.0, move), grid, integral_e)
    x = slow + ew * w
    xd = speed * e + dew * w + ew * dw
    xdd = speed * de + ddew * w + 2 * dew * dw + ew * ddw
    return x, xd, xdd, slow


# ------------------------------------------------------------------------------------------
# robot helpers


class _Robot:
    """Pinocchio model and data of the mobile Marten, and configuration <-> angle conversions."""

    def __init__(self, urdf: str):
        self.model = pin.buildModelFromXML(urdf)
        self.model.gravity.linear = np.array([0.0, 0.0, -STANDARD_GRAVITY])
        self.data = self.model.createData()
        self.fid = self.model.getFrameId(CONTACT_FRAME)
        names = tuple(self.model.names[1:])
        if names != JOINT_NAMES:
            raise RuntimeError(f"unexpected joint order in the Marten URDF: {names}")
        self.nv = self.model.nv
        self.idx_q = [self.model.joints[j].idx_q for j in range(1, self.model.njoints)]
        self.nq_j = [self.model.joints[j].nq for j in range(1, self.model.njoints)]
        self.prismatic = np.array([n in ("marten_base_x", "marten_base_y") for n in names])
        self.arm_v = np.arange(3, 10)
        self.lower = self.model.lowerPositionLimit.copy()
        self.upper = self.model.upperPositionLimit.copy()
        self.lower_tri = np.tril_indices(self.nv, -1)

    def angles(self, q: np.ndarray) -> np.ndarray:
        """Configuration (nq,) -> one coordinate per joint (nv,): continuous joints as angles."""
        out = np.empty(self.nv)
        for j, (iq, nq) in enumerate(zip(self.idx_q, self.nq_j)):
            out[j] = q[iq] if nq == 1 else math.atan2(q[iq + 1], q[iq])
        return out

    def config(self, a: np.ndarray) -> np.ndarray:
        """One coordinate per joint (nv,) -> Pinocchio configuration (nq,)."""
        q = np.empty(self.model.nq)
        for j, (iq, nq) in enumerate(zip(self.idx_q, self.nq_j)):
            if nq == 1:
                q[iq] = a[j]
            else:
                q[iq], q[iq + 1] = math.cos(a[j]), math.sin(a[j])
        return q

    def tool_position(self, q: np.ndarray) -> np.ndarray:
        pin.forwardKinematics(self.model, self.data, q)
        return pin.updateFramePlacement(self.model, self.data, self.fid).translation.copy()

    def ik(self, target: np.ndarray, a_seed: np.ndarray, iterations: int = 300) -> np.ndarray:
        """Arm joints (base fixed at the seed's values) placing the tool at ``target`` (3,) m.

        Damped least squares on Pinocchio's frame Jacobian, with a null-space pull towards the
        preferred posture; returns the joint coordinates (nv,).
        """
        a = a_seed.copy()
        for it in range(iterations):
            q = self.config(a)
            err = target - self.tool_position(q)
            jac = pin.computeFrameJacobian(self.model, self.data, q, self.fid,
                                           pin.LOCAL_WORLD_ALIGNED)[:3, self.arm_v]
            jjt = jac @ jac.T + 1e-4 * np.eye(3)
            step = jac.T @ np.linalg.solve(jjt, err)
            pinv = jac.T @ np.linalg.inv(jjt)
            if it < iterations // 2:  # posture pull first, then converge on the target alone
                step += (np.eye(7) - pinv @ jac) @ (0.2 * (_ARM_PREFERRED - a[3:]))
            a[3:] = np.clip(a[3:] + step, self.lower[4:] + 0.05, self.upper[4:] - 0.05)
            if it >= iterations // 2 and np.linalg.norm(err) < 1e-10:
                break
        if np.linalg.norm(target - self.tool_position(self.config(a))) > 1e-5:
            raise RuntimeError(f"Marten cannot reach {target} (scenario geometry defect)")
        return a


@dataclass
class _Terms:
    """Pinocchio terms at one state: M (nv, nv), h (nv,), J (3, nv), gamma (3,), p (3,) m."""

    M: np.ndarray
    h: np.ndarray
    J: np.ndarray
    gamma: np.ndarray
    p: np.ndarray


def _terms(robot: _Robot, q: np.ndarray, v: np.ndarray) -> _Terms:
    model, data = robot.model, robot.data
    pin.computeAllTerms(model, data, q, v)
    M = data.M.copy()
    M[robot.lower_tri] = M.T[robot.lower_tri]  # crba fills the upper triangle: symmetrize
    p = pin.updateFramePlacement(model, data, robot.fid).translation.copy()
    J = pin.getFrameJacobian(model, data, robot.fid, pin.LOCAL_WORLD_ALIGNED)[:3].copy()
    gamma = pin.getFrameClassicalAcceleration(model, data, robot.fid,
                                              pin.LOCAL_WORLD_ALIGNED).linear.copy()
    return _Terms(M, data.nle.copy(), J, gamma, p)


# ------------------------------------------------------------------------------------------
# objects


class _LinearObject:
    """Mass, damper, spring and constant force along a fixed world direction u (drawer, cart,
    toolbox); the robot's force on it is f u."""

    n_rows = 1

    def __init__(self, spec: ScenarioSpec, p0: np.ndarray):
        self.m, self.d, self.k, self.f0 = spec.mass, spec.damping, spec.stiffness, \
            spec.static_force
        self.u = np.asarray(spec.direction, float)
        self.p0 = p0.copy()

    def rows(self, t: _Terms, v: np.ndarray):
        """(E (3, nc) force directions, A (nc, nv), B (nc, nc), rhs (nc,)) of the KKT rows."""
        ju = self.u @ t.J
        x = float(self.u @ (t.p - self.p0))
        xd = float(ju @ v)
        rhs = np.array([-(self.m * float(self.u @ t.gamma) + self.d * xd + self.k * x
                          + self.f0)])
        return self.u[:, None], (self.m * ju)[None, :], np.array([[-1.0]]), rhs

    def impact_rows(self, t: _Terms):
        ju = self.u @ t.J
        return self.u[:, None], (self.m * ju)[None, :], np.array([[-1.0]])

    def state(self, t: _Terms, v: np.ndarray, a: np.ndarray, lam: np.ndarray):
        """(x m, x' m/s, x'' m/s^2, f along N, F (3,) N, u (3,)) at this state."""
        ju = self.u @ t.J
        x = float(self.u @ (t.p - self.p0))
        return (x, float(ju @ v), float(ju @ a + self.u @ t.gamma), float(lam[0]),
                self.u * lam[0], self.u)


class _Door:
    """Door on a vertical hinge; the handle (the tool) is held on its circle of radius R.

    theta = atan2(d . t0, d . n0), d = horizontal offset of the handle from the hinge; n0 points
    from the hinge to the closed handle, t0 is the opening direction when closed.
    """

    n_rows = 2

    def __init__(self, spec: ScenarioSpec, p0: np.ndarray):
        ph = spec.physical
        self.I, self.c, self.k, self.tau0 = (ph["inertia_kg_m2"], ph["damping_N_m_s_per_rad"],
                                             ph["stiffness_N_m_per_rad"], ph["preload_N_m"])
        self.R = ph["handle_radius_m"]
        self.t0 = np.asarray(spec.direction, float)
        self.n0 = np.cross(self.t0, [0.0, 0.0, 1.0])  # so that z x n0 = t0
        self.hinge = p0 - self.R * self.n0
        self.hinge[2] = 0.0

    def _geometry(self, p: np.ndarray):
        d = p - self.hinge
        d[2] = 0.0
        r = float(np.hypot(d[0], d[1]))
        theta = math.atan2(float(d @ self.t0), float(d @ self.n0))
        n = d / r
        t = np.array([-n[1], n[0], 0.0])  # z x n = cos(theta) t0 - sin(theta) n0, opening
        return r, theta, n, t

    def rows(self, tm: _Terms, v: np.ndarray):
        r, theta, n, t = self._geometry(tm.p)
        vp = tm.J @ v
        vh = vp.copy()
        vh[2] = 0.0
        vn, vt = float(n @ vh), float(t @ vh)
        thd = vt / r
        A = np.vstack([(self.I / r) * (t @ tm.J), n @ tm.J])
        B = np.array([[-r, 0.0], [0.0, 0.0]])
        rhs_t = -(self.I * (float(t @ tm.gamma) / r - 2 * thd * vn / r) + self.c * thd
                  + self.k * theta + self.tau0)
        w = DOOR_RADIAL_BAUMGARTE
        rhs_n = (-(float(vh @ vh) - vn**2) / r - float(n @ tm.gamma) - 2 * w * vn
                 - w**2 * (r - self.R))
        return np.column_stack([t, n]), A, B, np.array([rhs_t, rhs_n])

    def impact_rows(self, tm: _Terms):
        r, _, n, t = self._geometry(tm.p)
        A = np.vstack([(self.I / r) * (t @ tm.J), n @ tm.J])
        return np.column_stack([t, n]), A, np.array([[-r, 0.0], [0.0, 0.0]])

    def state(self, tm: _Terms, v: np.ndarray, a: np.ndarray, lam: np.ndarray):
        r, theta, n, t = self._geometry(tm.p)
        vp = tm.J @ v
        vh = vp.copy()
        vh[2] = 0.0
        ap = tm.J @ a + tm.gamma
        thd = float(t @ vh) / r
        thdd = float(t @ ap) / r - 2 * thd * float(n @ vh) / r
        return (self.R * theta, self.R * thd, self.R * thdd, float(lam[0]),
                t * lam[0] + n * lam[1], t)


# ------------------------------------------------------------------------------------------
# the simulation


def _kkt(t: _Terms, E: np.ndarray, A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """The matrix [[M, J^T E], [A, B]] ((nv + nc) x (nv + nc))."""
    nv, nc = t.M.shape[0], B.shape[0]
    K = np.empty((nv + nc, nv + nc))
    K[:nv, :nv] = t.M
    K[:nv, nv:] = t.J.T @ E
    K[nv:, :nv] = A
    K[nv:, nv:] = B
    return K


def _solve(t: _Terms, tau: np.ndarray, obj, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Joint accelerations (nv,) and contact-force components (nc,) at one state."""
    if obj is None:
        return np.linalg.solve(t.M, tau - t.h), np.zeros(0)
    E, A, B, rhs = obj.rows(t, v)
    nv = t.M.shape[0]
    sol = np.linalg.solve(_kkt(t, E, A, B), np.concatenate([tau - t.h, rhs]))
    return sol[:nv], sol[nv:]


def _impact(t: _Terms, obj, v: np.ndarray) -> np.ndarray:
    """Velocity after the inelastic grasp of the object at rest (same rows, zero right side)."""
    E, A, B = obj.impact_rows(t)
    nv = t.M.shape[0]
    sol = np.linalg.solve(_kkt(t, E, A, B), np.concatenate([t.M @ v, np.zeros(B.shape[0])]))
    return sol[:nv]


class _Plan:
    """Desired tool path and posture reference on the control grid."""

    def __init__(self, spec: ScenarioSpec, robot: _Robot, t_ctrl: np.ndarray, t_contact: float,
                 duration: float):
        self.spec = spec
        u = np.asarray(spec.direction, float)
        pc = np.asarray(spec.contact_point, float)
        a_base = np.zeros(robot.nv)
        a_base[3:] = _ARM_PREFERRED
        a_contact = robot.ik(pc, a_base)
        a_start = robot.ik(pc + np.asarray(spec.start_offset), a_contact)
        self.a_initial = a_start
        nt = len(t_ctrl)
        self.p = np.zeros((nt, 3))
        self.v = np.zeros((nt, 3))
        self.acc = np.zeros((nt, 3))
        self.tangent = np.tile(u, (nt, 1))
        self.q_ref = np.zeros((nt, robot.nv))
        self.v_ref = np.zeros((nt, robot.nv))
        free = t_ctrl < t_contact
        # free phase: smooth transfer start -> contact point, with wiggles touching nothing
        tf = t_ctrl[free]
        S, dS, ddS = _smoothstep(tf / t_contact)
        off = np.asarray(spec.start_offset)
        b, db, ddb = _bump(tf / t_contact)
        wig = np.array([[0.05, 0.7], [0.04, 1.1], [0.035, 0.9]])  # m, Hz per world axis
        for ax in range(3):
            amp, om = wig[ax, 0], 2 * math.pi * wig[ax, 1]
            s_, c_ = np.sin(om * tf), np.cos(om * tf)
            w, dw, ddw = amp * s_, amp * om * c_, -amp * om**2 * s_
            T = t_contact
            self.p[free, ax] = pc[ax] + off[ax] * (1 - S) + b * w
            self.v[free, ax] = -off[ax] * dS / T + db / T * w + b * dw
            self.acc[free, ax] = (-off[ax] * ddS / T**2 + ddb / T**2 * w + 2 * db / T * dw
                                  + b * ddw)
        self.q_ref[free] = a_start + S[:, None] * (a_contact - a_start)
        self.v_ref[free] = dS[:, None] / t_contact * (a_contact - a_start)
        # contact phase
        sc = t_ctrl[~free] - t_contact
        x, xd, xdd, slow = _contact_path(spec, sc, duration - t_contact)
        if spec.direction_kind == "arc":
            R = spec.physical["handle_radius_m"]
            n0 = np.cross(u, [0.0, 0.0, 1.0])
            hinge = pc - R * n0
            th, thd, thdd = x / R, xd / R, xdd / R
            nvec = np.cos(th)[:, None] * n0 + np.sin(th)[:, None] * u
            tvec = -np.sin(th)[:, None] * n0 + np.cos(th)[:, None] * u
            self.p[~free] = hinge + R * nvec
            self.v[~free] = R * thd[:, None] * tvec
            self.acc[~free] = R * thdd[:, None] * tvec - R * (thd**2)[:, None] * nvec
            self.tangent[~free] = tvec

            def slow_point(xs: float) -> np.ndarray:
                return hinge + R * (math.cos(xs / R) * n0 + math.sin(xs / R) * u)
        else:
            self.p[~free] = pc + x[:, None] * u
            self.v[~free] = xd[:, None] * u
            self.acc[~free] = xdd[:, None] * u

            def slow_point(xs: float) -> np.ndarray:
                return pc + xs * u
        # posture keyframes along the slow path (IK), cubic spline with zero end slopes
        move = duration - t_contact - spec.hold
        s_key = np.linspace(0.0, move, 7)
        _, _, _, slow_key = _contact_path(spec, s_key, duration - t_contact)
        keys = []
        seed = a_contact.copy()
        for xs in slow_key:
            if spec.base_follows:
                seed[:3] = a_contact[:3] + xs * u * np.array([1.0, 1.0, 0.0])
            seed = robot.ik(slow_point(xs), seed)
            keys.append(seed.copy())
        spline = CubicSpline(s_key, np.array(keys), bc_type="clamped")
        sc_c = np.clip(sc, 0.0, move)
        self.q_ref[~free] = spline(sc_c)
        self.v_ref[~free] = spline(sc_c, 1) * (sc <= move)[:, None]

    def torque(self, k: int, robot: _Robot, tm: _Terms, q: np.ndarray, v: np.ndarray,
               in_contact: bool) -> np.ndarray:
        """Joint torque (nv,) N·m/N at control tick k: task-space tracking of the tool path
        plus the null-space posture (see the module text), the pre-load once in contact."""
        Minv = np.linalg.inv(tm.M)
        JMi = tm.J @ Minv
        Lam = np.linalg.inv(JMi @ tm.J.T)
        vp = tm.J @ v
        F = (Lam @ (self.acc[k] - tm.gamma) + TASK_STIFFNESS * (self.p[k] - tm.p)
             + TASK_DAMPING * (self.v[k] - vp))
        if in_contact:
            F = F + self.spec.feedforward * self.tangent[k]
        kq = POSTURE_FREQUENCY**2
        dq = 2 * POSTURE_DAMPING_RATIO * POSTURE_FREQUENCY
        diag = np.diag(tm.M)
        err = pin.difference(robot.model, q, robot.config(self.q_ref[k]))
        tau_post = diag * (kq * err + dq * (self.v_ref[k] - v))
        tau_null = tau_post - tm.J.T @ (Lam @ (JMi @ tau_post))
        return tm.h + tm.J.T @ F + tau_null


class _JointPlan:
    """Desired joint trajectory on the control grid for a scenario without an object, and its
    computed-torque controller (free motion only)."""

    def __init__(self, spec: ScenarioSpec, robot: _Robot, t_ctrl: np.ndarray,
                 duration: float):
        nt, nv = len(t_ctrl), robot.nv
        e, de, dde = _envelope(t_ctrl, duration - spec.hold, spec.ramp)
        self.q_ref = np.zeros((nt, nv))
        self.v_ref = np.zeros((nt, nv))
        self.a_ref = np.zeros((nt, nv))
        by_joint = {s.joint: s for s in spec.joint_motion}
        for j, name in enumerate(JOINT_NAMES):
            sweep = by_joint[name]
            w, dw, ddw = np.zeros(nt), np.zeros(nt), np.zeros(nt)
            for term in sweep.terms:
                om = 2 * math.pi * term.frequency
                sn, cs = np.sin(om * t_ctrl + term.phase), np.cos(om * t_ctrl + term.phase)
                w += term.amplitude * sn
                dw += term.amplitude * om * cs
                ddw -= term.amplitude * om**2 * sn
            # the envelope scales the velocity, not the displacement: while it ramps, speeds
            # and accelerations stay those of the sinusoids (no fast transient of the whole
            # amplitude); the position is the integral (trapezoid rule on the control grid)
            self.v_ref[:, j] = e * dw
            self.a_ref[:, j] = de * dw + e * ddw
            self.q_ref[:, j] = sweep.centre + np.concatenate((
                [0.0], np.cumsum(0.5 * np.diff(t_ctrl) * (self.v_ref[1:, j]
                                                          + self.v_ref[:-1, j]))))
        self.a_initial = self.q_ref[0].copy()   # the centres, at rest

    def torque(self, k: int, robot: _Robot, tm: _Terms, q: np.ndarray, v: np.ndarray,
               in_contact: bool) -> np.ndarray:
        """Computed torque (Siciliano, Sciavicco, Villani and Oriolo, Robotics: Modelling,
        Planning and Control, 2009, sec. 8.5.2): ``tau = h + M (a_ref + K_q e + D_q e')``,
        ``e = q_ref - q``; joint torque (nv,) N·m/N."""
        kq = POSTURE_FREQUENCY**2
        dq = 2 * POSTURE_DAMPING_RATIO * POSTURE_FREQUENCY
        err = pin.difference(robot.model, q, robot.config(self.q_ref[k]))
        return tm.h + tm.M @ (self.a_ref[k] + kq * err + dq * (self.v_ref[k] - v))


def simulate(scenario: str, duration: float | None = None, seed: int = 0, rate: float = 1000.0,
             effort_side: str = "link", noise: bool = True) -> SimulatedRun:
    """Simulate a built-in scenario (see :data:`SCENARIOS`); deterministic for a given seed.

    scenario: a name in SCENARIOS. duration: s (None: the scenario's own). seed: >= 0, draws the
    bias and the noise. rate: sample rate, Hz. effort_side: ``"link"`` or ``"motor"`` (motor:
    friction in the efforts). noise: corrupt the measurements (noise, bias, quantization).
    Raises ValueError naming a bad argument and what is expected.
    """
    spec = get_scenario(scenario)
    duration, seed, rate = _check_args(spec, duration, seed, rate, effort_side, noise)
    urdf = MOBILE_URDF.read_text(encoding="utf-8") if MOBILE_URDF.exists() else mobile_urdf()
    robot = _Robot(urdf)
    nv = robot.nv

    n_ctrl = max(1, math.ceil(MIN_CONTROL_RATE / rate - 1e-9))   # control ticks per sample
    t_tick = 1.0 / (rate * n_ctrl)
    n_sub = max(1, math.ceil(t_tick / INTERNAL_STEP - 1e-9))     # physics steps per tick
    dt = t_tick / n_sub
    n_samples = int(math.floor(duration * rate + 1e-9)) + 1
    n_ticks = (n_samples - 1) * n_ctrl + 1
    t_ctrl = np.arange(n_ticks) * t_tick
    plan: _Plan | _JointPlan
    if spec.has_object:
        k_contact = int(round(spec.free_time / t_tick))
        t_contact = k_contact * t_tick
        plan = _Plan(spec, robot, t_ctrl, t_contact, duration)
    else:                       # free motion only: contact never begins
        k_contact, t_contact = -1, math.inf
        plan = _JointPlan(spec, robot, t_ctrl, duration)
    q = robot.config(plan.a_initial)
    v = np.zeros(nv)
    obj = None

    rec_q = np.zeros((n_samples, nv))
    rec_v = np.zeros((n_samples, nv))
    rec_a = np.zeros((n_samples, nv))
    rec_tau = np.zeros((n_samples, nv))
    rec_F = np.zeros((n_samples, 3))
    rec_x = np.zeros(n_samples)
    rec_xd = np.zeros(n_samples)
    rec_xdd = np.zeros(n_samples)
    rec_f = np.zeros(n_samples)
    rec_u = np.tile(np.asarray(spec.direction if spec.has_object else (0.0, 0.0, 0.0), float),
                    (n_samples, 1))
    contact_point = np.full(3, np.nan)

    for k in range(n_ticks):
        tm = _terms(robot, q, v)
        if k == k_contact:
            obj = _Door(spec, tm.p) if spec.direction_kind == "arc" else _LinearObject(spec,
                                                                                       tm.p)
            contact_point = tm.p.copy()
            v = _impact(tm, obj, v)
            tm = _terms(robot, q, v)
        # controller (true state, zero-order hold until the next tick)
        tau = plan.torque(k, robot, tm, q, v, obj is not None)
        for i in range(n_sub):
            if i > 0:
                tm = _terms(robot, q, v)
            a, lam = _solve(tm, tau, obj, v)
            if i == 0 and k % n_ctrl == 0:
                j = k // n_ctrl
                rec_q[j] = robot.angles(q)
                rec_v[j] = v
                rec_a[j] = a
                rec_tau[j] = tau
                if obj is not None:
                    x, xd, xdd, f, Fv, uu = obj.state(tm, v, a, lam)
                    rec_x[j], rec_xd[j], rec_xdd[j], rec_f[j] = x, xd, xdd, f
                    rec_F[j] = Fv
                    rec_u[j] = uu
            if k == n_ticks - 1:
                break
            v = v + dt * a
            q = pin.integrate(robot.model, q, dt * v)
        if not np.all(np.isfinite(v)):
            raise RuntimeError(f"simulation of {spec.name!r} diverged at t = {k * t_tick:.4f} s")

    # continuous yaw: unwrap the angle over time
    rec_q[:, 2] = np.unwrap(rec_q[:, 2])
    time = np.arange(n_samples) / rate
    in_contact = time >= t_contact - 1e-12

    # measurements
    rng = np.random.default_rng(seed)
    quantum = np.where(robot.prismatic, 2 * math.pi * ODOMETRY_WHEEL_RADIUS, 2 * math.pi) \
        / 2**ENCODER_BITS
    fv = np.asarray(FRICTION_VISCOUS) if effort_side == "motor" else np.zeros(nv)
    fc = np.asarray(FRICTION_COULOMB) if effort_side == "motor" else np.zeros(nv)
    friction = fv * rec_v + fc * np.tanh(rec_v / FRICTION_SMOOTHING_VELOCITY)
    if noise:
        bias = rng.uniform(-BIAS_LIMIT, BIAS_LIMIT, nv)
        effort = rec_tau + friction + bias + rng.normal(0.0, EFFORT_NOISE, rec_tau.shape)
        velocity = rec_v + rng.normal(0.0, VELOCITY_NOISE, rec_v.shape)
        position = np.round(rec_q / quantum) * quantum
    else:
        bias = np.zeros(nv)
        effort = rec_tau + friction
        velocity = rec_v.copy()
        position = rec_q.copy()

    parameters = spec.truth_parameters()
    truth: dict[str, Any] = {
        **(parameters or {}), "has_object": parameters is not None,
        "bias": bias, "friction_viscous": fv, "friction_coulomb": fc,
        "friction_smoothing_velocity": FRICTION_SMOOTHING_VELOCITY,
        "effort_noise": EFFORT_NOISE if noise else 0.0,
        "velocity_noise": VELOCITY_NOISE if noise else 0.0,
        "encoder_bits": ENCODER_BITS if noise else 0,
        "position_quantum": quantum if noise else np.zeros(nv),
        "direction": (None if not spec.has_object else rec_u if spec.direction_kind == "arc"
                      else np.asarray(spec.direction, float)),
        "physical": copy.deepcopy(spec.physical),
        "contact_time": t_contact if spec.has_object else None,
        "contact_point": contact_point if spec.has_object else None,
        "effort_side": effort_side, "noise": bool(noise), "seed": seed,
    }
    if spec.direction_kind == "arc":
        truth["hinge"] = obj.hinge.copy()
    settings = {**copy.deepcopy(spec.settings), "effort_side": effort_side,
                "contact_frame": CONTACT_FRAME}
    return SimulatedRun(
        scenario=spec.name, time=time, joint_names=JOINT_NAMES, position=position,
        velocity=velocity, effort=effort, true_force=rec_F, true_position_along=rec_x,
        in_contact=in_contact, truth=truth, urdf=urdf, contact_frame=CONTACT_FRAME,
        settings=settings, true_force_along=rec_f, true_velocity_along=rec_xd,
        true_acceleration_along=rec_xdd, true_effort=rec_tau, true_position=rec_q,
        true_velocity=rec_v, true_acceleration=rec_a)
