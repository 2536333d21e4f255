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
from typing import Any

import numpy as np
import pinocchio as pin

from .dynamics import _CartesianObject, _Door, _impact, _LinearObject, _Robot, _solve, _terms
from .marten import CONTACT_FRAME, MOBILE_URDF, mobile_urdf
from .motions import (
    POSTURE_DAMPING_RATIO,
    POSTURE_FREQUENCY,
    TASK_DAMPING,
    TASK_STIFFNESS,
    _JointPlan,
    _Plan,
)
from .scenarios import (
    EFFORT_SIDES,
    FRICTION_COULOMB,
    FRICTION_VISCOUS,
    JOINT_NAMES,
    MAX_DURATION,
    RATE_RANGE,
    SCENARIOS,
    STANDARD_GRAVITY,
    JointSweep,
    ScenarioSpec,
    SimulatedRun,
    Wiggle,
    _check_args,
    door_along_arc,
    get_scenario,
)

__all__ = ["SCENARIOS", "JOINT_NAMES", "FRICTION_VISCOUS", "FRICTION_COULOMB", "EFFORT_SIDES",
           "MAX_DURATION", "RATE_RANGE", "STANDARD_GRAVITY", "TASK_STIFFNESS", "TASK_DAMPING",
           "POSTURE_FREQUENCY", "POSTURE_DAMPING_RATIO", "JointSweep", "ScenarioSpec",
           "SimulatedRun", "Wiggle", "door_along_arc", "get_scenario", "simulate",
           "INTERNAL_STEP", "MIN_CONTROL_RATE", "EFFORT_NOISE", "VELOCITY_NOISE",
           "ENCODER_BITS", "ODOMETRY_WHEEL_RADIUS", "BIAS_LIMIT", "FRICTION_SMOOTHING_VELOCITY",
           "CONTACT_FRAME", "MOBILE_URDF"]

INTERNAL_STEP = 0.0005       # s, largest internal integration step
MIN_CONTROL_RATE = 1000.0    # Hz, the controller never runs slower than this
EFFORT_NOISE = 0.1           # N·m (N for prismatic joints), standard deviation
VELOCITY_NOISE = 0.003       # rad/s (m/s for prismatic joints), standard deviation
ENCODER_BITS = 18
ODOMETRY_WHEEL_RADIUS = 0.1  # m, invented; sets the quantum of the base's prismatic joints
BIAS_LIMIT = 2.0             # N·m (N), bias drawn uniformly in [-BIAS_LIMIT, BIAS_LIMIT]
FRICTION_SMOOTHING_VELOCITY = 0.01  # rad/s (m/s), eps in tanh(v / eps)


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
            obj = (_Door(spec, tm.p) if spec.direction_kind == "arc" else
                   _CartesianObject(spec, tm.p) if spec.direction_kind == "cartesian" else
                   _LinearObject(spec, tm.p))
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
    mechanism = spec.truth_mechanism()
    if mechanism is not None:
        if spec.direction_kind == "arc":   # the hinge where the simulation put it
            mechanism["axis_point"] = [float(x) for x in obj.hinge]
        truth["mechanism"] = mechanism
    if spec.direction_kind == "cartesian":
        for prefix, key in (("mass", "mass_matrix_kg"), ("damping", "damping_matrix_N_s_per_m"),
                            ("stiffness", "stiffness_matrix_N_per_m")):
            truth[f"{prefix}_matrix"] = np.asarray(spec.physical[key], float)
        truth["parameters"] = parameters
    settings = {**copy.deepcopy(spec.settings), "effort_side": effort_side,
                "contact_frame": CONTACT_FRAME}
    return SimulatedRun(
        scenario=spec.name, time=time, joint_names=JOINT_NAMES, position=position,
        velocity=velocity, effort=effort, true_force=rec_F, true_position_along=rec_x,
        in_contact=in_contact, truth=truth, urdf=urdf, contact_frame=CONTACT_FRAME,
        settings=settings, true_force_along=rec_f, true_velocity_along=rec_xd,
        true_acceleration_along=rec_xdd, true_effort=rec_tau, true_position=rec_q,
        true_velocity=rec_v, true_acceleration=rec_a)

