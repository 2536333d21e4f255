"""A moving base from odometry and an IMU (base.source odometry, issue 20), against outside
references: MuJoCo's floating-base dynamics (a free joint root), the rosbags and rclpy
(de)serializers of nav_msgs/Odometry and sensor_msgs/Imu, Pinocchio's own forward dynamics
(an exact trajectory), and bad input counted by reason."""
from __future__ import annotations

import math

import mujoco
import numpy as np
import pinocchio as pin
import pytest
from rosbags.typesys import Stores, get_typestore

from interaction_estimator.core.base import ImuMessage, OdometryMessage, matrix_quaternion
from interaction_estimator.core.health import FINDING_ODOMETRY
from interaction_estimator.core.model import RobotModel
from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.samples import Sample, SampleBlock
from interaction_estimator.core.settings import Settings
from interaction_estimator.io.bag import base_records
from interaction_estimator.io.cdr import (
    IMU,
    ODOMETRY,
    decode_imu_many,
    decode_odometry_many,
    encode_imu,
    encode_odometry,
    imu_fields,
    odometry_fields,
)
from interaction_estimator.sim import marten
from interaction_estimator.sim.mobile_world import _spec

TS = get_typestore(Stores.ROS2_JAZZY)
ODOMETRY_SETTINGS = Settings({"base.source": "odometry"})


# --------------------------------------------------------------------------------------------
# floating-base dynamics of the measured rows against MuJoCo (a free joint root)


def _mujoco_rover():
    spec, urdf = _spec("rover", 1e-3)
    model = spec.compile()
    return model, mujoco.MjData(model), urdf


@pytest.mark.parametrize("seed", range(5))
def test_measured_rows_equal_mujoco_free_joint_dynamics(seed):
    """Reference: MuJoCo's mass matrix and bias forces of the rover on a free joint (its wheels
    included, which our model locks). The quantities that do not depend on how the base's twist
    is written (MuJoCo: linear velocity in the world, Pinocchio: in the base frame) are compared
    on the arm's rows: the momentum p_j = (M v)_j, the gravity g_j, and (C^T v)_j = dT/dq_j
    (Lagrange), the last from MuJoCo's M by central differences."""
    m, d, urdf = _mujoco_rover()
    robot = RobotModel(urdf, marten.CONTACT_FRAME, 9.80665, floating_base=True)
    assert robot.locked_joints == marten.ROVER_WHEELS
    rng = np.random.default_rng(seed)
    # a random state: base pose and twist, arm and wheel positions and velocities
    R = pin.rpy.rpyToMatrix(*rng.uniform(-0.3, 0.3, 3))
    pos = rng.uniform(-1, 1, 3)
    v_local, w_local = rng.normal(0, 0.5, 3), rng.normal(0, 0.5, 3)
    qa, va = rng.uniform(-1, 1, 7), rng.normal(0, 0.8, 7)
    jid = lambda n: mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, n)  # noqa: E731
    qadr = [m.jnt_qposadr[jid(n)] for n in marten.ARM_JOINTS]
    vadr = [m.jnt_dofadr[jid(n)] for n in marten.ARM_JOINTS]
    free = jid("base_free")
    fq, fv = m.jnt_qposadr[free], m.jnt_dofadr[free]
    quat = pin.Quaternion(R)
    d.qpos[fq:fq + 7] = [*pos, quat.w, quat.x, quat.y, quat.z]
    d.qvel[fv:fv + 3] = R @ v_local      # MuJoCo: the free joint's linear velocity in the world
    d.qvel[fv + 3:fv + 6] = w_local      # and its angular velocity in the body frame
    d.qpos[qadr], d.qvel[vadr] = qa, va
    for n in marten.ROVER_WHEELS:        # wheels turning: no arm row depends on them
        d.qpos[m.jnt_qposadr[jid(n)]] = rng.uniform(-3, 3)
        d.qvel[m.jnt_dofadr[jid(n)]] = rng.normal(0, 5)
    mujoco.mj_forward(m, d)
    M = np.zeros((m.nv, m.nv))
    mujoco.mj_fullM(m, d, M)
    p_ref = (M @ d.qvel)[vadr]
    vel = d.qvel.copy()
    d.qvel[:] = 0.0
    mujoco.mj_forward(m, d)
    g_ref = d.qfrc_bias[vadr].copy()
    ctv_ref = np.zeros(7)
    h = 1e-6
    for i, a in enumerate(qadr):
        Ms = []
        for sign in (1.0, -1.0):
            d.qpos[a] += sign * h
            mujoco.mj_forward(m, d)
            Mi = np.zeros((m.nv, m.nv))
            mujoco.mj_fullM(m, d, Mi)
            Ms.append(Mi)
            d.qpos[a] -= sign * h
        ctv_ref[i] = 0.5 * vel @ ((Ms[0] - Ms[1]) / (2 * h)) @ vel
    # ours: Pinocchio with the free-flyer root, the wheels locked
    q = np.concatenate([pos, quat.coeffs(), robot.configuration_from_angles(qa)[7:]])
    v = np.concatenate([v_local, w_local, va])
    _, Mp, C, g, _ = robot.terms(q, v)
    assert np.allclose((Mp @ v)[6:], p_ref, rtol=1e-9, atol=1e-9)
    assert np.allclose(g[6:], g_ref, rtol=1e-9, atol=1e-9)
    assert np.allclose((v @ C)[6:], ctv_ref, rtol=1e-5, atol=1e-6)


# --------------------------------------------------------------------------------------------
# Odometry and Imu bytes against rosbags' and rclpy's (de)serializers


def _odometry_msg(rng):
    t = TS.types
    return t[ODOMETRY](
        header=t["std_msgs/msg/Header"](stamp=t["builtin_interfaces/msg/Time"](
            sec=int(rng.integers(1, 2**31 - 1)), nanosec=int(rng.integers(0, 10**9))),
            frame_id="o" * int(rng.integers(1, 9))),
        child_frame_id="b" * int(rng.integers(0, 12)),
        pose=t["geometry_msgs/msg/PoseWithCovariance"](
            pose=t["geometry_msgs/msg/Pose"](
                position=t["geometry_msgs/msg/Point"](*rng.normal(size=3)),
                orientation=t["geometry_msgs/msg/Quaternion"](*rng.normal(size=4))),
            covariance=rng.normal(size=36)),
        twist=t["geometry_msgs/msg/TwistWithCovariance"](
            twist=t["geometry_msgs/msg/Twist"](
                linear=t["geometry_msgs/msg/Vector3"](*rng.normal(size=3)),
                angular=t["geometry_msgs/msg/Vector3"](*rng.normal(size=3))),
            covariance=rng.normal(size=36)))


def _imu_msg(rng):
    t = TS.types
    v3 = t["geometry_msgs/msg/Vector3"]
    return t[IMU](
        header=t["std_msgs/msg/Header"](stamp=t["builtin_interfaces/msg/Time"](
            sec=int(rng.integers(1, 2**31 - 1)), nanosec=int(rng.integers(0, 10**9))),
            frame_id="i" * int(rng.integers(0, 9))),
        orientation=t["geometry_msgs/msg/Quaternion"](*rng.normal(size=4)),
        orientation_covariance=rng.normal(size=9), angular_velocity=v3(*rng.normal(size=3)),
        angular_velocity_covariance=rng.normal(size=9),
        linear_acceleration=v3(*rng.normal(size=3)),
        linear_acceleration_covariance=rng.normal(size=9))


def _odometry_row(msg):
    p, o = msg.pose.pose.position, msg.pose.pose.orientation
    w = msg.twist.twist
    return np.concatenate([[p.x, p.y, p.z, o.x, o.y, o.z, o.w], msg.pose.covariance,
                           [w.linear.x, w.linear.y, w.linear.z, w.angular.x, w.angular.y,
                            w.angular.z], msg.twist.covariance])


def _imu_row(msg):
    o, w, a = msg.orientation, msg.angular_velocity, msg.linear_acceleration
    return np.concatenate([[o.x, o.y, o.z, o.w], msg.orientation_covariance, [w.x, w.y, w.z],
                           msg.angular_velocity_covariance, [a.x, a.y, a.z],
                           msg.linear_acceleration_covariance])


def test_odometry_and_imu_decoders_equal_rosbags_deserializer():
    """Reference: rosbags' serializer and deserializer on the same messages, one at a time and
    as batches of one layout (the strided read) and of mixed layouts."""
    rng = np.random.default_rng(3)
    odo = [_odometry_msg(rng) for _ in range(20)]
    imu = [_imu_msg(rng) for _ in range(20)]
    same = [odo[0]] * 6
    for msgs, kind, decode, row in ((odo, ODOMETRY, decode_odometry_many, _odometry_row),
                                    (same, ODOMETRY, decode_odometry_many, _odometry_row),
                                    (imu, IMU, decode_imu_many, _imu_row)):
        raws = [bytes(TS.serialize_cdr(m, kind)) for m in msgs]
        batch = decode(raws)
        for k, raw in enumerate(raws):
            ref = TS.deserialize_cdr(raw, kind)
            assert np.array_equal(batch.values[k], row(ref))
            assert batch.frame_id[k] == ref.header.frame_id
            if kind == ODOMETRY:
                assert batch.child_frame_id[k] == ref.child_frame_id
            assert batch.time[k] == ref.header.stamp.sec + ref.header.stamp.nanosec * 1e-9
    # big-endian bytes: through rosbags' deserializer
    raw = bytes(TS.serialize_cdr(odo[1], ODOMETRY, little_endian=False))
    assert np.array_equal(decode_odometry_many([raw]).values[0], _odometry_row(odo[1]))


def test_encoders_equal_rosbags_serializer():
    """Reference: rosbags' serializer (our encoders write the simulated bags)."""
    rng = np.random.default_rng(4)
    for msg in (_odometry_msg(rng) for _ in range(5)):
        p, o, pc, lin, ang, tc = odometry_fields(_odometry_row(msg))
        mine = encode_odometry(msg.header.stamp.sec, msg.header.stamp.nanosec,
                               msg.header.frame_id, msg.child_frame_id, p, o, lin, ang, pc, tc)
        assert mine == bytes(TS.serialize_cdr(msg, ODOMETRY))
    for msg in (_imu_msg(rng) for _ in range(5)):
        o, oc, w, wc, a, ac = imu_fields(_imu_row(msg))
        mine = encode_imu(msg.header.stamp.sec, msg.header.stamp.nanosec, msg.header.frame_id,
                          o, w, a, oc, wc, ac)
        assert mine == bytes(TS.serialize_cdr(msg, IMU))


def test_decoders_read_rclpy_serialized_bytes():
    """Reference: ROS 2's own serializer (Fast CDR typesupport through rclpy)."""
    from nav_msgs.msg import Odometry
    from rclpy.serialization import serialize_message
    from sensor_msgs.msg import Imu
    odo = Odometry()
    odo.header.stamp.sec, odo.header.stamp.nanosec = 12, 345
    odo.header.frame_id, odo.child_frame_id = "odom", "rover_base"
    odo.pose.pose.position.x, odo.pose.pose.orientation.w = 1.5, 1.0
    odo.pose.covariance[0] = 0.01
    odo.twist.twist.linear.x, odo.twist.twist.angular.z = 0.3, -0.2
    odo.twist.covariance[35] = 0.04
    [rec] = list(base_records(True, [0], [serialize_message(odo)]))
    assert (rec.time, rec.frame_id, rec.child_frame_id) == (12 + 345e-9, "odom", "rover_base")
    assert rec.position[0] == 1.5 and rec.orientation[3] == 1.0 and rec.linear[0] == 0.3
    assert rec.angular[2] == -0.2 and rec.pose_covariance[0] == 0.01
    assert rec.twist_covariance[35] == 0.04
    imu = Imu()
    imu.header.frame_id = "rover_imu"   # stamp zero: the receive (log) time is used
    imu.orientation.z, imu.orientation.w = 0.6, 0.8
    imu.orientation_covariance[0] = -1.0
    imu.angular_velocity.y = 0.7
    imu.linear_acceleration.z = 9.8
    [rec] = list(base_records(False, [5_000_000_000], [serialize_message(imu)]))
    assert rec.time == 5.0 and rec.frame_id == "rover_imu"
    assert list(rec.orientation) == [0.0, 0.0, 0.6, 0.8] and rec.angular_velocity[1] == 0.7
    assert rec.orientation_covariance[0] == -1.0 and rec.linear_acceleration[2] == 9.8


# --------------------------------------------------------------------------------------------
# an exact trajectory (Pinocchio's own inverse dynamics) through the estimator


def _exact_run(n=3000, dt=1e-3, force=(10.0, -5.0, 8.0)):
    """The arm on a base that moves and tilts along analytic paths; efforts from Pinocchio's
    RNEA with a known force at the tool from 1.5 s on (robot on environment)."""
    urdf = marten.arm_urdf()
    m = pin.buildModelFromXML(urdf, pin.JointModelFreeFlyer())
    m.gravity.linear[:] = [0.0, 0.0, -9.80665]
    d = m.createData()
    q0 = np.array([0.1, 0.5, 0.2, 1.2, -0.3, 0.6, 0.1])

    def config(t):
        q = np.zeros(m.nq)
        q[:3] = [0.3 * math.sin(t), 0.2 * math.sin(1.3 * t), 0.1]
        R = pin.rpy.rpyToMatrix(0.05 * math.sin(2 * t), 0.04 * math.sin(1.7 * t),
                                0.5 * math.sin(0.7 * t))
        q[3:7] = pin.Quaternion(R).coeffs()
        q[7:] = q0 + 0.2 * np.sin(np.arange(1, 8) * 0.4 * t)
        return q

    h = 1e-5
    fid = m.getFrameId(marten.CONTACT_FRAME)
    T = np.arange(n) * dt
    Q, V, E, F = np.zeros((n, m.nq)), np.zeros((n, m.nv)), np.zeros((n, 7)), np.zeros((n, 3))
    for k, t in enumerate(T):
        q = config(t)
        v = pin.difference(m, config(t - h), config(t + h)) / (2 * h)
        a = (pin.difference(m, config(t), config(t + 2 * h))
             - pin.difference(m, config(t - 2 * h), config(t))) / (4 * h * h)
        tau = pin.rnea(m, d, q, v, a)
        f = np.array(force) * min(max(t - 1.5, 0.0) / 0.3, 1.0)
        pin.computeJointJacobians(m, d, q)
        pin.updateFramePlacements(m, d)
        J = pin.getFrameJacobian(m, d, fid, pin.LOCAL_WORLD_ALIGNED)
        Q[k], V[k], E[k], F[k] = q, v, (tau - J[:3].T @ (-f))[6:], f
    return urdf, T, Q, V, E, F


def _messages(T, Q, V, odometry_every=10, imu_every=4, imu_heading=0.7):
    out = []
    for k in range(len(T)):
        if k % odometry_every == 0:
            out.append((T[k], OdometryMessage(T[k], "odom", "marten_base", Q[k, :3], Q[k, 3:7],
                                              V[k, :3], V[k, 3:6])))
        if k % imu_every == 0:
            R = pin.Quaternion(Q[k, 3:7]).toRotationMatrix()
            own = pin.rpy.rpyToMatrix(0.0, 0.0, imu_heading) @ R   # the IMU's own heading
            out.append((T[k], ImuMessage(T[k], "marten_base", matrix_quaternion(own),
                                         V[k, 3:6])))
    return out


@pytest.fixture(scope="module")
def exact():
    return _exact_run()


def test_exact_trajectory_force_and_node_path_equal_replay_path(exact):
    """Reference: the force applied in Pinocchio's inverse dynamics (a base that moves and
    tilts; odometry at 100 Hz, IMU at 250 Hz with its own heading); the node's path (messages
    as they come, joint states held) gives the replay's numbers (preloaded, blocks) bit for
    bit."""
    urdf, T, Q, V, E, F = exact
    msgs = _messages(T, Q, V)
    replay = Pipeline(ODOMETRY_SETTINGS, urdf, whole_recording=True)
    for _, msg in msgs:
        (replay.add_odometry if isinstance(msg, OdometryMessage) else replay.add_imu)(msg)
    names = replay.model.joint_names
    block = replay.process_block(SampleBlock(T, names, Q[:, 7:], V[:, 6:], E,
                                             np.zeros(len(T), bool)))
    late = block.time > 2.0
    err = block.force[late] - F[np.searchsorted(T, block.time[late])]
    assert np.sqrt(np.mean(err**2)) < 0.01   # N, against 13.7 N applied
    assert replay.world_frame == "odom"
    # the node: messages in time order, joint states submitted as they come
    node = Pipeline(ODOMETRY_SETTINGS, urdf)
    got = {}
    done = lambda s: got.__setitem__(s.time, node.last_outputs()[:3])  # noqa: E731
    i = 0
    for k, t in enumerate(T):
        while i < len(msgs) and msgs[i][0] <= t:
            msg = msgs[i][1]
            (node.add_odometry if isinstance(msg, OdometryMessage) else node.add_imu)(msg, done)
            i += 1
        node.submit(Sample(t, names, Q[k, 7:], V[k, 6:], E[k]), done)
    node.flush(done)
    assert np.array_equal(np.array([got[t] for t in block.time]), block.force)
    assert node.rejects.counts == replay.rejects.counts


def test_ignoring_the_base_is_worse_on_the_same_data(exact):
    """The same data with the base's motion unknown (base.source joints: the root fixed): the
    base's accelerations leak into the force."""
    urdf, T, Q, V, E, F = exact
    pipe = Pipeline(Settings(), urdf)
    names = pipe.model.joint_names
    block = pipe.process_block(SampleBlock(T, names, Q[:, 7:], V[:, 6:], E,
                                           np.zeros(len(T), bool)))
    late = block.time > 2.0
    err = block.force[late] - F[np.searchsorted(T, block.time[late])]
    assert np.sqrt(np.mean(err**2)) > 1.0


def test_stale_inputs_are_rejected_by_reason(exact):
    """Odometry with a gap longer than base.max_age, an IMU that stops: the joint states there
    are rejected as stale_odometry and missing_imu, the others processed, and the status
    says which input."""
    urdf, T, Q, V, E, F = exact
    msgs = [(t, m) for t, m in _messages(T, Q, V)
            if not (isinstance(m, OdometryMessage) and 1.0 < t < 1.3)
            and not (isinstance(m, ImuMessage) and t > 2.5)]
    pipe = Pipeline(ODOMETRY_SETTINGS, urdf, whole_recording=True)
    for _, msg in msgs:
        (pipe.add_odometry if isinstance(msg, OdometryMessage) else pipe.add_imu)(msg)
    names = pipe.model.joint_names
    cut = 1400
    block = pipe.process_block(SampleBlock(T[:cut], names, Q[:cut, 7:], V[:cut, 6:], E[:cut],
                                           np.zeros(cut, bool)))
    assert not ((block.time > 1.1) & (block.time < 1.2)).any()
    # just after the gap, one at a time: processed, and the finding says which input
    est = pipe.process(Sample(T[cut], names, Q[cut, 7:], V[cut, 6:], E[cut]))
    assert est is not None and "odometry input problem: stale_odometry" in est.message
    assert est.level >= 1
    rest = pipe.process_block(SampleBlock(T[cut + 1:], names, Q[cut + 1:, 7:],
                                          V[cut + 1:, 6:], E[cut + 1:],
                                          np.zeros(len(T) - cut - 1, bool)))
    counts = pipe.rejects.counts
    assert counts["stale_odometry"] > 100 and counts["missing_imu"] > 300
    assert np.isfinite(block.force).all() and np.isfinite(rest.force).all()


def test_bad_messages_are_counted_and_never_used(exact):
    """Odometry in a frame that is a URDF link, a changed frame, a child frame not on the base,
    an IMU without orientation, out-of-order and repeated stamps, NaN covariances: refused,
    counted by reason, and the estimates equal those without them."""
    urdf, T, Q, V, E, F = exact
    msgs = _messages(T, Q, V)
    good = next(m for t, m in msgs if isinstance(m, OdometryMessage) and t == 0.05)
    imu = [m for t, m in msgs if isinstance(m, ImuMessage) and t <= 0.05][-1]
    nan36 = np.zeros(36)
    nan36[7] = math.nan
    bad_cov9 = np.zeros(9)
    bad_cov9[4] = math.nan
    no_orientation = np.zeros(9)
    no_orientation[0] = -1.0
    bad = [
        ("odometry_frame", OdometryMessage(0.0501, "marten_link2", "marten_base", *_parts(good))),
        ("odometry_frame", OdometryMessage(0.0502, "map", "marten_base", *_parts(good))),
        ("odometry_frame", OdometryMessage(0.0503, "odom", "marten_link4", *_parts(good))),
        ("odometry_covariance", OdometryMessage(0.0504, "odom", "marten_base", *_parts(good),
                                                twist_covariance=nan36)),
        ("odometry_time_backwards", OdometryMessage(0.0101, "odom", "marten_base",
                                                    *_parts(good))),
        ("odometry_duplicate_time", OdometryMessage(good.time, "odom", "marten_base",
                                                    *_parts(good))),
        ("odometry_invalid", OdometryMessage(0.0505, "odom", "marten_base", good.position,
                                             np.array([0, 0, 0, 2.0]), good.linear,
                                             good.angular)),
        ("imu_no_orientation", ImuMessage(0.0201, "marten_base", imu.orientation,
                                          imu.angular_velocity,
                                          orientation_covariance=no_orientation)),
        ("imu_covariance", ImuMessage(0.0202, "marten_base", imu.orientation,
                                      imu.angular_velocity,
                                      angular_velocity_covariance=bad_cov9)),
        ("imu_frame", ImuMessage(0.0203, "marten_link3", imu.orientation,
                                 imu.angular_velocity)),
        ("imu_duplicate_time", ImuMessage(imu.time, "marten_base", imu.orientation,
                                          imu.angular_velocity)),
        ("imu_time_backwards", ImuMessage(0.02, "marten_base", imu.orientation,
                                          imu.angular_velocity)),
    ]
    results = []
    for with_bad in (False, True):
        pipe = Pipeline(ODOMETRY_SETTINGS, urdf, whole_recording=True)
        for t, msg in msgs:
            (pipe.add_odometry if isinstance(msg, OdometryMessage) else pipe.add_imu)(msg)
            if with_bad and t == 0.05:   # after the odometry at 0.05 s and the IMU at 0.048 s
                for _, b in bad:
                    (pipe.add_odometry if isinstance(b, OdometryMessage) else pipe.add_imu)(b)
        names = pipe.model.joint_names
        block = pipe.process_block(SampleBlock(T, names, Q[:, 7:], V[:, 6:], E,
                                               np.zeros(len(T), bool)))
        results.append((block, pipe))
    (clean, _), (dirty, pipe) = results
    for reason in {r for r, _ in bad}:
        assert pipe.rejects.counts[reason] == sum(r == reason for r, _ in bad), reason
    assert np.array_equal(clean.force, dirty.force)   # the numbers: never used
    assert pipe.base.world_frame == "odom"


def _parts(msg):
    return msg.position, msg.orientation, msg.linear, msg.angular


def test_model_locks_base_branches_and_refuses_other_floating_joints():
    """The rover's wheels hang off the base: locked in the estimator's model; the orb's URDF has
    no ball; the IMU and odometry frames must be rigid on the base."""
    rover = RobotModel(marten.rover_urdf(), marten.CONTACT_FRAME, floating_base=True)
    assert rover.joint_names == marten.ARM_JOINTS and rover.nv == 13 and rover.nq == 14
    assert rover.base_placement(marten.ROVER_IMU) is not None
    assert rover.base_placement("marten_link1") is None
    R, p = rover.base_placement(marten.ROVER_IMU)
    assert np.allclose(p, [-0.1, 0.05, 0.3]) and np.allclose(R @ R.T, np.eye(3))
    fixed = RobotModel(marten.rover_urdf(), marten.CONTACT_FRAME)
    assert fixed.joint_names == marten.ARM_JOINTS + marten.ROVER_WHEELS


@pytest.mark.parametrize("rate, slow", [(10.0, True), (100.0, False)])
def test_odometry_too_slow_for_the_motion_is_reported(rate, slow):
    """A base whose velocity swings at 2 Hz (0.5 m/s): at 10 Hz linear interpolation misses
    about T^2/8 |v''| = 0.25 m/s, far above the odometry's stated noise (0.01 m/s); at 100 Hz
    it misses 0.0025 m/s. Reference: that closed form for a sine."""
    urdf = marten.arm_urdf()
    pipe = Pipeline(Settings({"base.source": "odometry", "base.imu": False,
                              "base.max_age": 0.2}), urdf, whole_recording=True)
    level = np.array([0.0, 0.0, 0.0, 1.0])
    cov = np.zeros(36)
    cov[0] = cov[7] = cov[14] = 0.01**2
    w = 2 * math.pi * 2.0
    for k in range(int(3 * rate)):
        t = k / rate
        pipe.add_odometry(OdometryMessage(t, "odom", "marten_base",
                                          np.array([0.5 / w * -math.cos(w * t), 0, 0]), level,
                                          np.array([0.5 * math.sin(w * t), 0, 0]), np.zeros(3),
                                          twist_covariance=cov))
    names = pipe.model.joint_names
    zeros = np.zeros(len(names))
    est = None
    for k in range(2000, 2500):
        est = pipe.process(Sample(k * 1e-3, names, zeros + 0.3, zeros, zeros + 1.0))
    assert est is not None
    assert ("odometry at 10 Hz too slow for the base's motion" in est.message) == slow
    assert bool(est.record[0]["findings"] & FINDING_ODOMETRY) == slow
