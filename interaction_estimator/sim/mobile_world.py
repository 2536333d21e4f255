"""Mobile manipulators of our own in MuJoCo: a wheeled base and a ball-balancing base, publishing
their base's motion as real mobile robots do (odometry and an IMU), with ground truth.

The independent ground truth of the moving-base checks (``base.source: odometry``). MuJoCo is
the physics engine; from ``interaction_estimator`` only the URDF generators of our robots
(:mod:`.marten`) and the sibling package :mod:`.mujoco_world` (URDF preparation, the object's
motions and parameters) are used; the estimator is not. MuJoCo is a test and validation
dependency, not a runtime one.

The worlds (sim dt 1 ms for the rover, 0.5 ms for the orb):

* **marten_rover**: the URDF's root link on a MuJoCo free joint, two driven wheels (cylinders,
  friction 1) and two frictionless caster balls on a floor plane (contacts on, MuJoCo's soft
  contact model: the base bounces and pitches a little under the wheels' torques and the arm's
  push). The wheels track a reference forward speed and yaw rate (a PD on each wheel's angle and
  speed with the base's acceleration as feed-forward).
* **marten_orb**: the URDF's root link (the body) on a free joint, resting on a ball (a MuJoCo
  ball joint at the body's origin, 3 kg, 0.12 m radius, friction 1 on the floor), driven by
  equal and opposite torques on body and ball (an inverse-mouse-ball drive, as in Lauwers,
  Kantor and Hollis, ICRA 2006). It balances by a linear-quadratic regulator per horizontal axis
  of the planar ball-and-body model (ball position, body tilt, their rates and the integral of
  the position error), designed with scipy's continuous algebraic Riccati solver on the model's
  masses; it leans into a push (a few degrees).

In both, an object (a point mass on a slide along u fixed in the world, MuJoCo's own spring and
damper, a constant resisting force, its weight when lifted) is attached to the contact frame by
a near-rigid ``connect`` equality, as in :class:`.mujoco_world.object_world.ObjectWorld`; the
arm follows the object's motion along u by resolved-acceleration control with the whole
floating-base Jacobian (the base's acceleration of the previous step as feed-forward), and the
base moves meanwhile.
Ground truth: the force the robot applies (the equality's own constraint force), the object's
state and parameters, and the base's true pose and twist.

Sensors (:class:`Sensors`; values recalled from data sheets of common parts, marked where so):
joint states at 500 Hz (rover) or 1000 Hz (orb) with link-side torque noise; odometry at 50 or
100 Hz (rover: from the wheel encoders, a planar twist [v_x, 0, 0, 0, 0, w_z] and a planar pose
that drifts; orb: the ball's centre from its encoders and the body's tilt); IMU at 200 or 400 Hz
(orientation relative to gravity with a heading of its own that drifts, gyro with bias and noise,
accelerometer), covariances filled with the noise variances.
"""
from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import mujoco
import numpy as np
import scipy.linalg

from . import marten
from .mujoco_world.common import (
    _COMPILER_TAG,
    _EQUALITY,
    _OBJECT_BODY,
    _OBJECT_JOINT,
    SOLIMP,
    STANDARD_GRAVITY,
    physics_urdf,
)
from .mujoco_world.schedule import Motion, ObjectParams

# s: the base's acceleration of the last steps, low-passed, is the arm controller's feed-forward
# (unfiltered, the contacts' step-to-step jitter fed back through the arm made it unstable)
ACC_FILTER_S = 0.02
WORLD_FRAME = "odom"   # the odometry's frame_id: the MuJoCo world at the start
_SITE = "harness_contact_site"
_IMU_SITE = "harness_imu_site"
_TIP_BODY = "harness_object_handle"
TIP_MASS = 0.2    # kg, the handle's (part of the truth's mass along u)

# arm controller gains (as in mujoco_world)
JOINT_OMEGA, TASK_OMEGA, NULL_OMEGA = 2 * np.pi * 8.0, 2 * np.pi * 10.0, 2 * np.pi * 2.0
DEFAULT_ARM = {"marten_shoulder_yaw": 0.0, "marten_shoulder_pitch": 0.6,
               "marten_upper_arm_roll": 0.0, "marten_elbow_pitch": 1.3,
               "marten_forearm_roll": 0.0, "marten_wrist_pitch": 0.9, "marten_wrist_roll": 0.0}


@dataclass(frozen=True)
class Sensors:
    """Rates (Hz) and noise (standard deviations) of one robot's sensors."""

    joint_rate: float = 500.0
    odometry_rate: float = 50.0
    imu_rate: float = 200.0
    effort_noise: float = 0.1         # N·m, link-side torque sensors
    velocity_noise: float = 0.002     # rad/s, joint velocity
    encoder_bits: int = 20            # joint position resolution, per turn
    twist_noise: float = 0.002        # m/s, odometry linear velocity
    yaw_rate_noise: float = 0.005     # rad/s, odometry angular velocity
    pose_drift: float = 0.002         # m and rad, stationary std of the odometry pose's drift
    gyro_noise: float = 0.002         # rad/s (recalled: MEMS gyro, ~0.01 deg/s/sqrt(Hz))
    gyro_bias: float = 0.001          # rad/s, constant per run
    tilt_noise: float = 0.002         # rad, white, roll and pitch of the IMU's orientation
    tilt_drift: float = 0.002         # rad, stationary std of a slow (5 s) tilt error
    heading_offset: float = 0.6       # rad, the IMU's own heading reference
    heading_drift: float = 0.003      # rad/s, its drift
    accel_noise: float = 0.03         # m/s^2 (recalled: MEMS accelerometer)
    odometry_latency: float = 0.003   # s, log time after stamp
    imu_latency: float = 0.001        # s
    joint_latency: float = 0.0005     # s


ROVER_SENSORS = Sensors()
ORB_SENSORS = Sensors(joint_rate=1000.0, odometry_rate=100.0, imu_rate=400.0, twist_noise=0.004)


@dataclass(frozen=True)
class Free:
    """Free motion for ``duration`` s: the arm on a cosine path (amplitude ``arm`` rad), the
    base on its own reference (see :class:`MobileScenario`)."""

    duration: float
    arm: float = 0.08


@dataclass(frozen=True)
class Contact:
    """Contact for ``duration`` s: attached to the object (where the contact frame is at the
    phase's start), the contact point follows ``motion`` along u in the world."""

    duration: float
    motion: Motion
    obj: ObjectParams


@dataclass
class MobileScenario:
    """One run: robot ('rover' or 'orb'), direction u (world; horizontal ones are turned to the
    base's heading at the start), lifted object (gravity on it), phases, and the base's extra
    motion: for the rover forward speed (m/s) and yaw rate (rad/s) against time; for the orb the
    ball centre's displacement (m, world x and y) against time. During contact with a
    horizontal u the base also follows the object (``follow``)."""

    name: str
    robot: str
    direction: tuple[float, float, float]
    phases: tuple
    gravity_on_object: bool = False
    base_motion: Callable[[float], tuple[float, float]] = lambda t: (0.0, 0.0)
    follow: float = 1.0
    seed: int = 0


@dataclass
class MobileRun:
    """A simulated run: joint states (time (N,), names, position/velocity/effort (N, n)), the
    base's messages as numbers (odometry rows: time, position 3, orientation 4 xyzw, linear 3,
    angular 3 (twist in the child frame); IMU rows: time, orientation 4, angular velocity 3,
    linear acceleration 3), their noise (for the covariances), the truth (force (N, 3) the
    robot applies, world; attached (N,); object state and parameters (N, 4); the base's true
    pose (N, 7) xyz + xyzw and its tilt (N,) rad), the URDF and frames."""

    name: str
    robot: str
    urdf: str
    time: np.ndarray
    joint_names: tuple
    position: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray
    force: np.ndarray
    attached: np.ndarray
    object_position: np.ndarray
    object_velocity: np.ndarray
    object_acceleration: np.ndarray
    object_parameters: np.ndarray
    base_pose: np.ndarray
    base_tilt: np.ndarray
    odometry: np.ndarray
    imu: np.ndarray
    direction: np.ndarray
    sensors: Sensors
    base_frame: str
    imu_frame: str
    world_frame: str = WORLD_FRAME
    contact_frame: str = marten.CONTACT_FRAME
    extra: dict = field(default_factory=dict)

    @property
    def force_along(self) -> np.ndarray:
        return self.force @ self.direction


# --------------------------------------------------------------------------------------------
# the worlds


def _spec(robot: str, dt: float) -> tuple[mujoco.MjSpec, str]:
    urdf = marten.rover_urdf() if robot == "rover" else marten.orb_urdf()
    text = physics_urdf(urdf)[0]
    idx = text.rfind("</robot>")
    spec = mujoco.MjSpec.from_string(text[:idx] + _COMPILER_TAG + text[idx:])
    spec.option.timestep = dt
    spec.option.gravity = [0.0, 0.0, -STANDARD_GRAVITY]
    spec.option.integrator = mujoco.mjtIntegrator.mjINT_IMPLICITFAST
    spec.option.tolerance = 1e-10
    floor = spec.worldbody.add_geom(name="floor", type=mujoco.mjtGeom.mjGEOM_PLANE,
                                    size=[0.0, 0.0, 0.1])
    floor.friction = [1.0, 0.005, 0.0001]
    if robot == "rover":
        base = spec.body(marten.ROVER_BASE)
        base.add_freejoint(name="base_free")
        for name in marten.ROVER_WHEELS:
            link = spec.body(name.replace("wheel", "wheel_link"))
            g = link.add_geom(type=mujoco.mjtGeom.mjGEOM_CYLINDER,
                              size=[marten.ROVER_WHEEL_RADIUS, 0.02, 0.0],
                              quat=[math.cos(math.pi / 4), math.sin(math.pi / 4), 0.0, 0.0])
            g.friction = [1.0, 0.005, 0.0001]
            g.mass = 0.0
        for x, y in marten.ROVER_CASTERS:
            g = base.add_geom(type=mujoco.mjtGeom.mjGEOM_SPHERE,
                              size=[marten.ROVER_CASTER_RADIUS, 0.0, 0.0],
                              pos=[x, y, marten.ROVER_CASTER_RADIUS])
            g.condim = 1   # frictionless caster (its priority makes its condim win)
            g.priority = 1
            g.mass = 0.0
        imu = spec.body(marten.ROVER_IMU)
    else:
        body = spec.body(marten.ORB_BODY)
        body.add_freejoint(name="base_free")
        ball = body.add_body(name="orb_ball", pos=[0.0, 0.0, 0.0])
        ball.explicitinertial = True
        r = marten.ORB_BALL_RADIUS
        ball.mass = 3.0
        ball.inertia = [0.4 * 3.0 * r * r] * 3
        ball.add_joint(name="orb_ball_joint", type=mujoco.mjtJoint.mjJNT_BALL)
        g = ball.add_geom(type=mujoco.mjtGeom.mjGEOM_SPHERE, size=[r, 0.0, 0.0])
        g.friction = [1.0, 0.005, 0.0001]
        g.condim = 4   # torsional friction: the ball does not spin up about the vertical
        g.priority = 1
        g.mass = 0.0
        imu = spec.body(marten.ORB_IMU)
    imu.add_site(name=_IMU_SITE, pos=[0.0, 0.0, 0.0])
    spec.add_sensor(name="gyro", type=mujoco.mjtSensor.mjSENS_GYRO,
                    objtype=mujoco.mjtObj.mjOBJ_SITE, objname=_IMU_SITE)
    spec.add_sensor(name="accel", type=mujoco.mjtSensor.mjSENS_ACCELEROMETER,
                    objtype=mujoco.mjtObj.mjOBJ_SITE, objname=_IMU_SITE)
    spec.body(marten.CONTACT_FRAME).add_site(name=_SITE, pos=[0.0, 0.0, 0.0])
    return spec, urdf


class MobileWorld:
    """One robot ('rover' or 'orb') with an object on a slide along ``direction`` (world unit
    vector), in MuJoCo. :meth:`simulate` runs a :class:`MobileScenario`."""

    def __init__(self, robot: str, direction: Sequence[float], gravity_on_object: bool = False):
        if robot not in ("rover", "orb"):
            raise ValueError(f"robot {robot!r}: expected 'rover' or 'orb'")
        self.robot = robot
        self.dt = 1e-3 if robot == "rover" else 5e-4
        u = np.asarray(direction, float)
        self.u = u / np.linalg.norm(u)
        self.gravity_on_object = gravity_on_object
        spec, self.urdf = _spec(robot, self.dt)
        obj = spec.worldbody.add_body(name=_OBJECT_BODY, pos=[0.0, 0.0, 0.0])
        obj.explicitinertial = True
        obj.mass = 1.0
        obj.inertia = [1e-4, 1e-4, 1e-4]
        obj.gravcomp = 0.0 if gravity_on_object else 1.0
        jnt = obj.add_joint(name=_OBJECT_JOINT, type=mujoco.mjtJoint.mjJNT_SLIDE,
                            axis=self.u.tolist())
        jnt.springref = 0.0
        jnt.limited = mujoco.mjtLimited.mjLIMITED_FALSE
        # the contact point's handle on the object: free across u with a negligible mass (a
        # cart on casters, a crate in the hand: the force across u is what the handle's mass
        # needs, not a guide's reaction to the arm's tracking errors on a base that moves);
        # along u it carries the object
        tip = obj.add_body(name=_TIP_BODY, pos=[0.0, 0.0, 0.0])
        tip.explicitinertial = True
        tip.mass = TIP_MASS
        tip.inertia = [1e-3, 1e-3, 1e-3]
        tip.gravcomp = 1.0
        across = np.linalg.svd(self.u.reshape(1, 3))[2][1:]
        for i, axis in enumerate(across):
            side = tip.add_joint(name=f"{_OBJECT_JOINT}_across{i}",
                                 type=mujoco.mjtJoint.mjJNT_SLIDE, axis=axis.tolist())
            side.limited = mujoco.mjtLimited.mjLIMITED_FALSE
        spec.add_equality(name=_EQUALITY, type=mujoco.mjtEq.mjEQ_CONNECT,
                          objtype=mujoco.mjtObj.mjOBJ_BODY, name1=_TIP_BODY,
                          name2=marten.CONTACT_FRAME, active=False,
                          solref=[2 * self.dt, 1.0], solimp=SOLIMP)
        self.model = m = spec.compile()
        self.data = mujoco.MjData(m)
        j = lambda name: mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, name)  # noqa: E731
        b = lambda name: mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_BODY, name)  # noqa: E731
        self.arm = [j(n) for n in marten.ARM_JOINTS]
        self.arm_q = np.array([m.jnt_qposadr[i] for i in self.arm])
        self.arm_v = np.array([m.jnt_dofadr[i] for i in self.arm])
        self.base_body = b(marten.ROVER_BASE if robot == "rover" else marten.ORB_BODY)
        self.free_q, self.free_v = m.jnt_qposadr[j("base_free")], m.jnt_dofadr[j("base_free")]
        self.eq = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_EQUALITY, _EQUALITY)
        m.eq_data[self.eq, :6] = 0.0
        self.oj = j(_OBJECT_JOINT)
        self.obj_id = b(_OBJECT_BODY)
        self.oq, self.ov = m.jnt_qposadr[self.oj], m.jnt_dofadr[self.oj]
        across = [j(f"{_OBJECT_JOINT}_across{i}") for i in range(2)]
        self.obj_q = np.array([self.oq] + [m.jnt_qposadr[i] for i in across])
        self.obj_v = np.array([self.ov] + [m.jnt_dofadr[i] for i in across])
        self.site = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_SITE, _SITE)
        self.imu_site = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_SITE, _IMU_SITE)
        self.imu_body = b(marten.ROVER_IMU if robot == "rover" else marten.ORB_IMU)
        if robot == "rover":
            self.wheels = [j(n) for n in marten.ROVER_WHEELS]
            self.wheel_q = np.array([m.jnt_qposadr[i] for i in self.wheels])
            self.wheel_v = np.array([m.jnt_dofadr[i] for i in self.wheels])
            self.joint_names = marten.ARM_JOINTS + marten.ROVER_WHEELS
        else:
            self.ball_body = b("orb_ball")
            self.ball_v = m.jnt_dofadr[j("orb_ball_joint")]
            self.joint_names = marten.ARM_JOINTS
        self.q0 = np.array([DEFAULT_ARM[n] for n in marten.ARM_JOINTS])
        self.M = np.zeros((m.nv, m.nv))
        self.jacp, self.jacr = np.zeros((3, m.nv)), np.zeros((3, m.nv))
        self.jdp, self.jdr = np.zeros((3, m.nv)), np.zeros((3, m.nv))
        self.gyro = m.sensor_adr[mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_SENSOR, "gyro")]
        self.accel = m.sensor_adr[mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_SENSOR, "accel")]

    # --- helpers -----------------------------------------------------------------------------
    def _reset(self) -> None:
        m, d = self.model, self.data
        mujoco.mj_resetData(m, d)
        z = 0.0 if self.robot == "rover" else marten.ORB_BALL_RADIUS
        d.qpos[self.free_q:self.free_q + 7] = [0.0, 0.0, z, 1.0, 0.0, 0.0, 0.0]
        d.qpos[self.arm_q] = self.q0
        d.eq_active[self.eq] = 0
        mujoco.mj_forward(m, d)

    def _jacobian(self) -> np.ndarray:
        mujoco.mj_jacSite(self.model, self.data, self.jacp, self.jacr, self.site)
        return np.vstack([self.jacp, self.jacr])

    def _jdot_v(self) -> np.ndarray:
        d = self.data
        mujoco.mj_jacDot(self.model, d, self.jdp, self.jdr, d.site_xpos[self.site],
                         self.model.site_bodyid[self.site])
        return np.concatenate([self.jdp @ d.qvel, self.jdr @ d.qvel])

    def _base_velocity(self) -> np.ndarray:
        """[v (3) of the root link's origin, w (3)] in the root link's frame."""
        out = np.zeros(6)
        # XBODY: at the body's frame (BODY would be its centre of mass)
        mujoco.mj_objectVelocity(self.model, self.data, mujoco.mjtObj.mjOBJ_XBODY,
                                 self.base_body, out, 1)
        return np.concatenate([out[3:], out[:3]])

    def _orb_gains(self) -> np.ndarray:
        """LQR gains of the planar ball-and-body model, state [s, theta, s', theta', integral
        of s - s_ref], input the drive torque N·m (on the ball; minus on the body)."""
        m, d = self.model, self.data
        r = marten.ORB_BALL_RADIUS
        mujoco.mj_forward(m, d)
        body = self.base_body
        total = float(m.body_subtreemass[body]) - float(m.body_mass[self.ball_body])
        com = (d.subtree_com[body] * m.body_subtreemass[body]
               - d.xipos[self.ball_body] * m.body_mass[self.ball_body]) / total
        ell = float(com[2] - d.xpos[body][2])
        inertia = 0.35 * total * ell * ell   # about the body's COM, rough (a design model)
        mb, ib = float(m.body_mass[self.ball_body]), 0.4 * 3.0 * r * r
        Mm = np.array([[mb + ib / r**2 + total, total * ell],
                       [total * ell, total * ell * ell + inertia]])
        K = np.array([[0.0, 0.0], [0.0, -total * STANDARD_GRAVITY * ell]])
        Bq = np.array([1.0 / r, -1.0])
        Minv = np.linalg.inv(Mm)
        A = np.zeros((5, 5))
        A[0:2, 2:4] = np.eye(2)
        A[2:4, 0:2] = -Minv @ K
        A[4, 0] = 1.0
        B = np.zeros((5, 1))
        B[2:4, 0] = Minv @ Bq
        Q = np.diag([2000.0, 500.0, 100.0, 20.0, 2000.0])
        R = np.array([[0.002]])
        P = scipy.linalg.solve_continuous_are(A, B, Q, R)
        return (np.linalg.solve(R, B.T @ P)).ravel()

    # --- the run -------------------------------------------------------------------------------
    def simulate(self, sc: MobileScenario, sensors: Sensors | None = None) -> MobileRun:
        sensors = sensors or (ROVER_SENSORS if self.robot == "rover" else ORB_SENSORS)
        m, d, dt, u = self.model, self.data, self.dt, self.u
        self._reset()
        rng = np.random.default_rng(sc.seed)
        steps = sum(int(round(ph.duration / dt)) for ph in sc.phases)
        every = {name: int(round(1.0 / (rate * dt))) for name, rate in (
            ("joint", sensors.joint_rate), ("odometry", sensors.odometry_rate),
            ("imu", sensors.imu_rate))}
        for name, k in every.items():
            if abs(k * dt * getattr(sensors, f"{name}_rate") - 1.0) > 1e-9:
                raise ValueError(f"{name} rate must divide the simulation rate {1 / dt:g} Hz")
        nj = steps // every["joint"] + 1
        n_arm = len(self.arm)
        names = self.joint_names
        rec = {key: np.zeros(shape) for key, shape in (
            ("time", nj), ("position", (nj, len(names))), ("velocity", (nj, len(names))),
            ("effort", (nj, len(names))), ("force", (nj, 3)), ("attached", nj),
            ("xo", nj), ("vo", nj), ("ao", nj), ("params", (nj, 4)), ("pose", (nj, 7)),
            ("tilt", nj))}
        odometry, imu = [], []
        gains = self._orb_gains() if self.robot == "orb" else None
        orb_int = np.zeros(2)
        kpj, kdj = JOINT_OMEGA**2, 2 * JOINT_OMEGA
        kpt, kdt = TASK_OMEGA**2, 2 * TASK_OMEGA
        kpn, kdn = NULL_OMEGA**2, 2 * NULL_OMEGA
        # the base's own heading at the start: horizontal directions turned to it (here: x)
        qacc_prev = np.zeros(m.nv)
        acc_filtered = np.zeros(m.nv)
        wheel_ref = np.zeros(2)
        base_ref = np.zeros(2)          # orb: the ball centre's reference (world x, y)
        base_start = d.xpos[self.base_body][:2].copy()
        drift = {"odo": np.zeros(3), "tilt": np.zeros(2)}
        heading = sensors.heading_offset
        gyro_bias = rng.normal(0.0, sensors.gyro_bias, 3)
        follow_prev = 0.0
        k = 0
        t = 0.0
        jrow = 0
        episode_obj = None
        for ph in sc.phases:
            n_steps = int(round(ph.duration / dt))
            contact = isinstance(ph, Contact)
            if contact:
                mujoco.mj_forward(m, d)
                p_attach = d.site_xpos[self.site].copy()
                R_hold = d.site_xmat[self.site].reshape(3, 3).copy()
                m.body_pos[self.obj_id] = p_attach
                d.qpos[self.obj_q] = 0.0
                # the object starts with the contact point's velocity (no impact at attaching)
                tool = self._jacobian()[:3] @ d.qvel
                axes = np.vstack([u, np.linalg.svd(u.reshape(1, 3))[2][1:]])
                d.qvel[self.obj_v] = axes @ tool
                obj = ph.obj
                m.body_mass[self.obj_id] = obj.mass
                m.dof_damping[self.ov] = obj.damping
                m.jnt_stiffness[self.oj] = obj.stiffness
                # (the object body has a child, the handle: so MuJoCo 4.0 builds its inertia
                # from body_mass at every step; a childless slide body is a "simple" body whose
                # mass-matrix entry is fixed when the model is compiled, dof_M0)
                f0 = obj.static_force + (obj.mass * STANDARD_GRAVITY * u[2]
                                         if self.gravity_on_object else 0.0)
                d.eq_active[self.eq] = 1
                episode_obj = obj
            else:
                d.eq_active[self.eq] = 0
                q_rest = d.qpos[self.arm_q].copy()
                amp = rng.uniform(0.5, 1.0, n_arm) * rng.choice([-1.0, 1.0], n_arm) * ph.arm
                cycles = np.maximum(1, np.round(rng.uniform(0.6, 1.6, n_arm) * ph.duration))
                omega = 2 * np.pi * cycles / ph.duration
                amp = amp / cycles
            for i in range(n_steps):
                tau_s = i * dt
                if not contact:
                    d.qpos[self.obj_q] = 0.0
                    d.qvel[self.obj_v] = 0.0
                    d.qfrc_applied[self.ov] = 0.0
                else:
                    d.qfrc_applied[self.ov] = -obj.static_force
                mujoco.mj_forward(m, d)
                mujoco.mj_fullM(m, d, self.M)
                bias = d.qfrc_bias
                qa, va = d.qpos[self.arm_q], d.qvel[self.arm_v]
                J = self._jacobian()
                if contact:
                    x, xd, xdd = ph.motion(tau_s)
                    p_ref = p_attach + u * x
                    p = d.site_xpos[self.site]
                    vel = J @ d.qvel
                    R = d.site_xmat[self.site].reshape(3, 3)
                    S = R_hold @ R.T
                    e_rot = 0.5 * np.array([S[2, 1] - S[1, 2], S[0, 2] - S[2, 0],
                                            S[1, 0] - S[0, 1]])
                    a = np.concatenate([u * xdd + kdt * (u * xd - vel[:3]) + kpt * (p_ref - p),
                                        -kdt * vel[3:] + kpt * e_rot])
                    Ja = J[:, self.arm_v]
                    other = np.ones(m.nv, bool)
                    other[self.arm_v] = False
                    rhs = a - self._jdot_v() - J[:, other] @ acc_filtered[other]
                    Jpinv = np.linalg.solve(Ja @ Ja.T + 1e-8 * np.eye(6), Ja).T
                    qdd0 = kpn * (self.q0 - qa) - kdn * va
                    qdd = Jpinv @ rhs + (np.eye(n_arm) - Jpinv @ Ja) @ qdd0
                    f_ref = obj.mass * xdd + obj.damping * xd + obj.stiffness * (
                        x + 0.0) + f0
                    ff = Ja[:3].T @ (u * f_ref)
                else:
                    c, s = np.cos(omega * tau_s), np.sin(omega * tau_s)
                    q_ref = q_rest + amp * (1 - c)
                    qd_ref, qdd_ref = amp * omega * s, amp * omega**2 * c
                    qdd = qdd_ref + kdj * (qd_ref - va) + kpj * (q_ref - qa)
                    ff = np.zeros(n_arm)
                full = acc_filtered.copy()
                full[self.arm_v] = qdd
                tau = self.M[self.arm_v] @ full + bias[self.arm_v] + ff
                d.qfrc_applied[:] = 0.0
                d.qfrc_applied[self.ov] = -obj.static_force if contact else 0.0
                d.qfrc_applied[self.arm_v] = tau
                d.xfrc_applied[:] = 0.0
                # the base
                extra = sc.base_motion(t)
                follow = 0.0
                if contact and abs(u[2]) < 0.9:
                    follow = sc.follow * ph.motion(tau_s)[0]
                if self.robot == "rover":
                    v_ref = extra[0] + (follow - follow_prev) / dt * (u[0] if contact else 0.0)
                    w_ref = extra[1]
                    rr, bb = marten.ROVER_WHEEL_RADIUS, marten.ROVER_HALF_TRACK
                    wv = np.array([(v_ref - w_ref * bb) / rr, (v_ref + w_ref * bb) / rr])
                    wheel_ref += wv * dt
                    wq, wd = d.qpos[self.wheel_q], d.qvel[self.wheel_v]
                    wheel_tau = 60.0 * (wheel_ref - wq) + 6.0 * (wv - wd)
                    d.qfrc_applied[self.wheel_v] = wheel_tau
                else:
                    ref = base_start + np.array(extra) + follow * u[:2] / max(
                        np.linalg.norm(u[:2]), 1e-9) * (np.linalg.norm(u[:2]) > 1e-6)
                    base_ref[:] = ref
                    zb = d.xmat[self.base_body].reshape(3, 3)[:, 2]
                    w_world = d.xmat[self.base_body].reshape(3, 3) @ self._base_velocity()[3:]
                    ball = d.xpos[self.ball_body]
                    vball = d.qvel[self.free_v:self.free_v + 3]   # the body's origin = centre
                    torque = np.zeros(3)
                    for axis, e in enumerate((np.array([1.0, 0, 0]), np.array([0, 1.0, 0]))):
                        a_rot = np.cross([0.0, 0.0, 1.0], e)
                        s_err = float(ball[axis] - ref[axis])
                        orb_int[axis] += s_err * dt
                        state = np.array([s_err, float(zb @ e), float(vball[axis]),
                                          float(w_world @ a_rot), orb_int[axis]])
                        torque += -float(gains @ state) * a_rot
                    # heading held by the drive's third axis (against the floor's torsional
                    # friction on the ball)
                    Rb = d.xmat[self.base_body].reshape(3, 3)
                    yaw = math.atan2(Rb[1, 0], Rb[0, 0])
                    torque[2] += 300.0 * yaw + 60.0 * float(w_world[2])
                    d.xfrc_applied[self.ball_body, 3:] = torque
                    d.xfrc_applied[self.base_body, 3:] = -torque
                follow_prev = follow
                # record the joint state (at the state of this step, the effort applied from it)
                if k % every["joint"] == 0 and jrow < nj:
                    rec["time"][jrow] = t
                    rec["position"][jrow, :n_arm] = qa
                    rec["velocity"][jrow, :n_arm] = va
                    rec["effort"][jrow, :n_arm] = tau
                    if self.robot == "rover":
                        rec["position"][jrow, n_arm:] = d.qpos[self.wheel_q]
                        rec["velocity"][jrow, n_arm:] = d.qvel[self.wheel_v]
                        rec["effort"][jrow, n_arm:] = d.qfrc_applied[self.wheel_v]
                    rec["pose"][jrow, :3] = d.xpos[self.base_body]
                    wq = d.xquat[self.base_body]
                    rec["pose"][jrow, 3:] = [wq[1], wq[2], wq[3], wq[0]]
                    zb = d.xmat[self.base_body].reshape(3, 3)[:, 2]
                    rec["tilt"][jrow] = math.acos(max(-1.0, min(1.0, zb[2])))
                    xo_now, vo_now = float(d.qpos[self.oq]), float(d.qvel[self.ov])
                    row_now = jrow
                    jrow += 1
                else:
                    row_now = -1
                imu_now = -1
                if k % every["odometry"] == 0:
                    odometry.append(self._odometry(t, sensors, rng, drift))
                if k % every["imu"] == 0:
                    imu.append(self._imu(t, sensors, rng, drift, heading, gyro_bias))
                    imu_now = len(imu) - 1
                heading += sensors.heading_drift * dt
                mujoco.mj_step(m, d)
                # after the step: what the forces of this step made (state t): the constraint
                # force, the accelerations (the next step's feed-forward), the accelerometer
                qacc_prev = d.qacc.copy()
                acc_filtered += (dt / (ACC_FILTER_S + dt)) * (qacc_prev - acc_filtered)
                if imu_now >= 0:
                    imu[imu_now][8:11] = d.sensordata[self.accel:self.accel + 3] + rng.normal(
                        0.0, sensors.accel_noise, 3)
                if row_now >= 0:
                    if contact:
                        rows = np.flatnonzero(
                            (d.efc_type[:d.nefc] == int(mujoco.mjtConstraint.mjCNSTR_EQUALITY))
                            & (d.efc_id[:d.nefc] == self.eq))
                        rec["force"][row_now] = d.efc_force[rows]
                        rec["attached"][row_now] = 1.0
                        rec["xo"][row_now] = xo_now
                        rec["vo"][row_now] = vo_now
                        rec["ao"][row_now] = d.qacc[self.ov]
                        rec["params"][row_now] = (obj.mass + TIP_MASS, obj.damping,
                                                  obj.stiffness, f0)
                    else:
                        rec["params"][row_now] = np.nan
                k += 1
                t = k * dt
            if contact:
                d.eq_active[self.eq] = 0
        keep = slice(0, jrow)
        rec = {key: val[keep] for key, val in rec.items()}
        # sensor noise on the joint states
        n_all = len(names)
        position = rec["position"].copy()
        step = 2 * np.pi / 2**sensors.encoder_bits
        position = np.round(position / step) * step
        velocity = rec["velocity"] + rng.normal(0.0, sensors.velocity_noise, (jrow, n_all))
        effort = rec["effort"] + rng.normal(0.0, sensors.effort_noise, (jrow, n_all))
        if self.robot == "rover":   # wheel joint states: continuous, wrapped
            position[:, n_arm:] = (position[:, n_arm:] + np.pi) % (2 * np.pi) - np.pi
        return MobileRun(
            name=sc.name, robot=self.robot, urdf=self.urdf, time=rec["time"],
            joint_names=tuple(names), position=position, velocity=velocity, effort=effort,
            force=rec["force"], attached=rec["attached"].astype(bool),
            object_position=rec["xo"], object_velocity=rec["vo"],
            object_acceleration=rec["ao"], object_parameters=rec["params"],
            base_pose=rec["pose"], base_tilt=rec["tilt"], odometry=np.array(odometry),
            imu=np.array(imu), direction=u.copy(), sensors=sensors,
            base_frame=marten.ROVER_BASE if self.robot == "rover" else marten.ORB_BODY,
            imu_frame=marten.ROVER_IMU if self.robot == "rover" else marten.ORB_IMU,
            extra={"episode_object": None if episode_obj is None else episode_obj.__dict__,
                   "gravity_on_object": self.gravity_on_object, "seed": sc.seed})

    def _odometry(self, t: float, sensors: Sensors, rng: np.random.Generator,
                  drift: dict) -> np.ndarray:
        """One odometry message as numbers: t, position 3, orientation 4 (xyzw, planar: yaw
        only), linear 3, angular 3 (child frame = the root link)."""
        d = self.data
        # the pose drifts slowly (a first-order process, 20 s, stationary std pose_drift)
        a = math.exp(-1.0 / (sensors.odometry_rate * 20.0))
        drift["odo"] = a * drift["odo"] + math.sqrt(1 - a * a) * rng.normal(
            0.0, sensors.pose_drift, 3)
        R = d.xmat[self.base_body].reshape(3, 3)
        yaw = math.atan2(R[1, 0], R[0, 0]) + drift["odo"][2]
        pos = d.xpos[self.base_body].copy()
        pos[:2] += drift["odo"][:2]
        twist = self._base_velocity()
        if self.robot == "rover":   # from the wheel encoders: a planar twist
            r, b = marten.ROVER_WHEEL_RADIUS, marten.ROVER_HALF_TRACK
            wl, wr = d.qvel[self.wheel_v]
            linear = np.array([(wl + wr) * r / 2.0, 0.0, 0.0])
            angular = np.array([0.0, 0.0, (wr - wl) * r / (2.0 * b)])
            pos[2] = 0.0
        else:   # the ball's centre from its encoders and the body's tilt, in the body frame
            linear = twist[:3].copy()
            angular = twist[3:].copy()
        linear += rng.normal(0.0, sensors.twist_noise, 3) * (
            np.array([1.0, 0.0, 0.0]) if self.robot == "rover" else 1.0)
        angular += rng.normal(0.0, sensors.yaw_rate_noise, 3) * (
            np.array([0.0, 0.0, 1.0]) if self.robot == "rover" else 1.0)
        q = np.array([0.0, 0.0, math.sin(yaw / 2), math.cos(yaw / 2)])
        return np.concatenate([[t], pos, q, linear, angular])

    def _imu(self, t: float, sensors: Sensors, rng: np.random.Generator, drift: dict,
             heading: float, gyro_bias: np.ndarray) -> np.ndarray:
        """One IMU message as numbers: t, orientation 4 (xyzw, its own heading), angular
        velocity 3, linear acceleration 3, in the IMU's frame."""
        d = self.data
        a = math.exp(-1.0 / (sensors.imu_rate * 5.0))
        drift["tilt"] = a * drift["tilt"] + math.sqrt(1 - a * a) * rng.normal(
            0.0, sensors.tilt_drift, 2)
        R = d.xmat[self.imu_body].reshape(3, 3)
        err = drift["tilt"] + rng.normal(0.0, sensors.tilt_noise, 2)
        Rerr = _rot([1.0, 0.0, 0.0], err[0]) @ _rot([0.0, 1.0, 0.0], err[1])
        Rimu = _rot([0.0, 0.0, 1.0], heading) @ Rerr @ R
        q = _quaternion(Rimu)
        gyro = d.sensordata[self.gyro:self.gyro + 3] + gyro_bias + rng.normal(
            0.0, sensors.gyro_noise, 3)
        return np.concatenate([[t], q, gyro, np.zeros(3)])   # accelerometer: after the step


def _rot(axis: Sequence[float], angle: float) -> np.ndarray:
    x, y, z = axis
    c, s = math.cos(angle), math.sin(angle)
    K = np.array([[0, -z, y], [z, 0, -x], [-y, x, 0.0]])
    return np.eye(3) + s * K + (1 - c) * K @ K


def _quaternion(R: np.ndarray) -> np.ndarray:
    """[x, y, z, w] of a rotation matrix."""
    q = np.zeros(4)
    mujoco.mju_mat2Quat(q, R.ravel())
    return np.array([q[1], q[2], q[3], q[0]])
