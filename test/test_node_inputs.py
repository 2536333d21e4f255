"""The node's input and output helpers without a ROS graph: stamp matching, throttled
warnings, and the CDR bytes the node reads and publishes.

References: the matching rule as documented in EffortMatcher (a state pairs with the effort
closest in stamp within the tolerance; states that can no longer pair come out with None), applied
by hand to short sequences; a fake clock for the throttle; numpy.isfinite; rclpy's own serializer
and deserializer (rclpy.serialization, the middleware's type support) for the CDR bytes, compared
with the message objects of node_messages (wrench_message, environment_message, status_message:
what the node published before it wrote bytes, and what the replay still writes).
"""
from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from builtin_interfaces.msg import Time as TimeMsg
from diagnostic_msgs.msg import DiagnosticStatus
from geometry_msgs.msg import WrenchStamped
from rclpy.serialization import deserialize_message, serialize_message
from ros_harness import contact_scenario
from sensor_msgs.msg import JointState
from std_msgs.msg import Float64MultiArray

from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.settings import Settings
from interaction_estimator.io import cdr
from interaction_estimator.io.effort_matching import EffortMatcher, efforts_in_order
from interaction_estimator.ros import messages as nm
from interaction_estimator.ros.inputs import LatencyMeter, WarningThrottle
from interaction_estimator.ros.messages import outputs_finite
from interaction_estimator.sim import marten


def pairs(out):
    return [(p.time, p.state, p.effort) for p in out]


def test_pairs_whichever_arrives_first():
    m = EffortMatcher(tolerance_s=0.0005)
    assert m.add_state(1.000, "s1") == []
    assert pairs(m.add_effort(1.0003, "e1")) == [(1.000, "s1", "e1")]
    assert m.add_effort(1.002, "e2") == []
    assert pairs(m.add_state(1.002, "s2")) == [(1.002, "s2", "e2")]
    assert m.pending() == 0 and m.unused_efforts == 0


def test_state_without_effort_is_given_up_when_a_newer_effort_arrives():
    m = EffortMatcher(tolerance_s=0.0005)
    m.add_state(1.000, "s1")
    m.add_state(1.002, "s2")
    # the effort of s2 arrives: s1 can no longer get one (efforts come in stamp order)
    assert pairs(m.add_effort(1.002, "e2")) == [(1.000, "s1", None), (1.002, "s2", "e2")]
    m.add_state(1.004, "s3")
    assert pairs(m.add_effort(1.010, "e5")) == [(1.004, "s3", None)]  # 6 ms later: too far


def test_unusable_efforts_are_counted_and_buffers_are_bounded():
    m = EffortMatcher(tolerance_s=0.0005, capacity=3)
    for k in range(5):
        m.add_effort(1.0 + 0.002 * k, f"e{k}")
    assert m.unused_efforts == 2                        # capacity 3: the two oldest dropped
    assert pairs(m.add_state(1.008, "s4")) == [(1.008, "s4", "e4")]
    assert m.unused_efforts == 4                        # e2, e3 older than the matched e4
    out = [p for k in range(5) for p in m.add_state(2.0 + 0.002 * k, f"t{k}")]
    assert pairs(out) == [(2.0, "t0", None), (2.002, "t1", None)]
    assert m.pending() == 3
    # the end of a recording: the states still waiting are given up, efforts left unused
    assert pairs(m.flush()) == [(2.004, "t2", None), (2.006, "t3", None), (2.008, "t4", None)]
    assert m.add_effort(3.0, "e9") == [] and m.flush() == []
    assert m.pending() == 0 and m.unused_efforts == 5


def test_efforts_are_arranged_in_the_joint_order_of_the_state():
    """Reference: the rule documented in efforts_in_order, applied by hand."""
    assert efforts_in_order(("a", "b", "c"), ("c", "a", "b"), (3.0, 1.0, 2.0)) == (
        [1.0, 2.0, 3.0], "")
    assert efforts_in_order(("a", "b"), (), (1.0, 2.0)) == ([1.0, 2.0], "")   # state order
    values, why = efforts_in_order(("a", "b"), (), (1.0,))
    assert values is None and "no names and 1 efforts; expected 2" in why
    values, why = efforts_in_order(("a", "b"), ("a", "b"), (1.0,))
    assert values is None and "2 names but 1 efforts" in why
    # a joint the model does not have needs no effort (0.0, unused); one it has does
    assert efforts_in_order(("a", "gripper"), ("a",), (1.5,), model_joints=("a",)) == (
        [1.5, 0.0], "")
    values, why = efforts_in_order(("a", "gripper"), ("gripper",), (1.5,), model_joints=("a",))
    assert values is None and "lacks model joints ['a']" in why
    values, why = efforts_in_order(("a", "b"), ("a",), (1.5,))   # every joint of the state
    assert values is None and "lacks joints ['b']" in why


def test_throttle_reports_once_per_period_with_the_count_in_between():
    now = [0.0]
    lines: list[str] = []
    t = WarningThrottle(lines.append, period_s=2.0, clock=lambda: now[0])
    assert t.emit("non_finite", "first")
    for _ in range(5):
        now[0] += 0.1
        assert not t.emit("non_finite", "again")
    assert t.emit("other", "independent key")
    now[0] = 2.5
    assert t.emit("non_finite", "later")
    assert lines == ["first", "independent key", "later (and 5 more like it in the last 2.5 s)"]


def test_latency_meter_mean_and_max():
    m = LatencyMeter(memory=1)
    for x in (0.001, 0.003, 0.002):
        m.add(x)
    assert m.mean_s == 0.002 and m.take_max() == 0.003 and m.take_max() == 0.0


def test_outputs_finite_agrees_with_numpy_isfinite():
    """Reference: numpy.isfinite over every number the wrench and environment messages carry."""
    rng = np.random.default_rng(7)
    for case in range(400):
        arrays = [rng.normal(scale=10.0 ** rng.integers(-3, 6), size=n) for n in (3, 3, 4, 4)]
        if case % 2:  # one bad value somewhere
            a = arrays[rng.integers(4)]
            a[rng.integers(len(a))] = (np.nan, np.inf, -np.inf)[case % 3]
        est = SimpleNamespace(force=arrays[0], torque=arrays[1], parameters=arrays[2],
                              parameter_std=arrays[3])
        assert outputs_finite(est) == bool(np.isfinite(np.concatenate(arrays)).all()), case
    # a finite sum that overflows counts as non-finite (documented: errs on the safe side)
    est = SimpleNamespace(force=np.full(3, 1e308), torque=np.zeros(3), parameters=np.zeros(4),
                          parameter_std=np.zeros(4))
    assert not outputs_finite(est)


# --- CDR bytes ----------------------------------------------------------------------------------
def joint_state(sec, nanosec, frame_id, names, position, velocity, effort) -> JointState:
    msg = JointState()
    msg.header.stamp.sec, msg.header.stamp.nanosec = sec, nanosec
    msg.header.frame_id = frame_id
    msg.name, msg.position, msg.velocity, msg.effort = names, position, velocity, effort
    return msg


def test_joint_state_reader_agrees_with_rclpy():
    """Reference: rclpy's serializer writes the bytes; the reader must give back what the
    message held (and the Sample sample_from_joint_state makes of the message object)."""
    rng = np.random.default_rng(3)
    reader = nm.JointStateReader()
    names = ["j1", "joint_two", "the_third_joint", "ä_non_ascii", "x" * 7]
    cases = []
    for k in range(300):
        n = len(names)
        frame = "f" * int(rng.integers(0, 11))           # every padding after the frame_id
        these = names if k % 50 else [f"{m}_{k}" for m in names]   # the name list changes
        lengths = [n, n, n]
        if k % 7 == 3:  # unequal or empty arrays are read as sent (the pipeline rejects them)
            lengths = [n, int(rng.integers(0, n + 1)), 0]
        pos, vel, eff = (rng.normal(size=m).tolist() for m in lengths)
        if k % 11 == 5 and vel:
            vel[0] = math.nan
        sec, nsec = (0, 0) if k % 13 == 0 else (int(rng.integers(0, 2**31)),
                                                int(rng.integers(0, 10**9)))
        cases.append(joint_state(sec, nsec, frame, these, pos, vel, eff))
    cases.append(joint_state(5, 6, "", [], [], [], []))
    for msg in cases:
        parts = reader.read(serialize_message(msg))
        assert parts is not None
        sec, nsec, names_read, pos, vel, eff = parts
        assert (sec, nsec) == (msg.header.stamp.sec, msg.header.stamp.nanosec)
        assert names_read == tuple(msg.name)
        for got, sent in ((pos, msg.position), (vel, msg.velocity), (eff, msg.effort)):
            assert got.dtype == np.float64 and got.shape == (len(sent),)
            np.testing.assert_array_equal(got, np.asarray(sent))  # NaN == NaN here
        a = nm.sample_from_parts(parts, 42.5)
        b = nm.sample_from_joint_state(msg, 42.5)
        assert (a.time, a.names, a.stamp_from_receive) == (b.time, b.names, b.stamp_from_receive)
        for x, y in ((a.position, b.position), (a.velocity, b.velocity), (a.effort, b.effort)):
            np.testing.assert_array_equal(x, y)
    assert reader.fallbacks == 0


def test_joint_state_reader_leaves_what_it_does_not_read_to_rclpy():
    reader = nm.JointStateReader()
    raw = serialize_message(joint_state(1, 2, "f", ["a"], [1.0], [2.0], [3.0]))
    assert reader.read(b"\x00\x00" + raw[2:]) is None       # big-endian CDR header
    assert reader.read(raw[:-4]) is None                      # truncated effort array
    assert reader.read(raw[:10]) is None                      # truncated header
    assert reader.fallbacks == 3
    assert reader.read(raw) is not None and reader.fallbacks == 3


def random_estimate(rng) -> SimpleNamespace:
    return SimpleNamespace(
        force=rng.normal(scale=50.0, size=3), torque=rng.normal(size=3),
        parameters=rng.normal(scale=10.0, size=4), parameter_std=rng.random(4))


@pytest.mark.parametrize("frame_id", ["", "o", "odom", "world_frame", "ø_frame"])
def test_wrench_and_environment_bytes_read_back_as_the_messages(frame_id):
    """Reference: rclpy's deserializer reads the bytes as messages equal to those
    wrench_message and environment_message fill."""
    rng = np.random.default_rng(11)
    wrench, env = nm.WrenchEncoder(frame_id), nm.EnvironmentEncoder()
    assert wrench.raw and env.raw   # the encoders checked themselves and write bytes
    for _ in range(100):
        est = random_estimate(rng)
        sec, nsec = int(rng.integers(0, 2**31)), int(rng.integers(0, 10**9))
        force, torque, values, stds = nm.output_numbers(nm.estimate_outputs(est))
        raw = wrench.encode(sec, nsec, force, torque)
        assert isinstance(raw, bytes)
        assert raw == cdr.WrenchEncoder(frame_id).encode(sec, nsec, force, torque)
        expected = nm.wrench_message(est, frame_id, TimeMsg(sec=sec, nanosec=nsec))
        assert deserialize_message(raw, WrenchStamped) == expected
        raw = env.encode(values, stds)
        assert raw == cdr.Float64MultiArrayEncoder(
            [(d.label, d.size, d.stride) for d in nm.environment_message_template().layout.dim],
            8).encode(*values, *stds)
        assert deserialize_message(raw, Float64MultiArray) == nm.environment_message(est)


def test_encoders_that_disagree_with_rclpy_hand_out_messages():
    """Should a check fail, the encoders give message objects (publish takes them too) with the
    same content. Reference: the message objects of node_messages."""
    rng = np.random.default_rng(5)
    est = random_estimate(rng)
    force, torque, values, stds = nm.output_numbers(nm.estimate_outputs(est))
    wrench, env = nm.WrenchEncoder("odom"), nm.EnvironmentEncoder()
    wrench.raw = env.raw = False
    assert wrench.encode(3, 4, force, torque) == nm.wrench_message(est, "odom",
                                                                   TimeMsg(sec=3, nanosec=4))
    assert env.encode(values, stds) == nm.environment_message(est)
    status = nm.StatusEncoder()
    status.raw = False
    fig = nm.NodeFigures(node_name="n")
    assert status.encode(nm.idle_fields("waiting_for_input", 1, "m", fig, "hw")) == (
        nm.idle_status("waiting_for_input", 1, "m", fig, "hw"))


def test_status_bytes_read_back_as_the_status_message():
    """Reference: rclpy's deserializer, against status_message / idle_status, for the estimates
    of a pipeline run through learning, free motion and contact (every status key, numbers,
    n/a, flags) and for idle statuses."""
    urdf = marten.mobile_urdf()
    pipeline = Pipeline(Settings(), urdf)
    estimates = [pipeline.process(s.sample()) for s in contact_scenario(urdf, 3.0, contact_at=1.2)]
    estimates = [e for e in estimates if e is not None]
    assert {"learning_bias", "free_motion", "in_contact"} <= {e.state for e in estimates}
    encoder = nm.StatusEncoder()
    assert encoder.raw
    figs = [nm.NodeFigures(node_name="interaction_estimator"),
            nm.NodeFigures(node_name="arm/interaction_estimator",
                           rejects={"non_finite": 2, "no_model": 1},
                           last_reject="non_finite: effort of joint ä is NaN", errors=1,
                           latency_s=0.000123, latency_max_s=0.5, input_age_s=0.002,
                           frame_id="odom", model_name="marten_mobile", joints=10,
                           contact_frame="tool_tip",
                           findings=[(1, "input rate 90 Hz far from 100 Hz"), (2, "errors")])]
    for i, est in enumerate(estimates[::37]):
        fig = figs[i % 2]
        raw = encoder.encode(nm.status_fields(est, fig, "marten_mobile"))
        assert isinstance(raw, bytes)
        assert raw == cdr.StatusEncoder().encode(nm.status_fields(est, fig, "marten_mobile"))
        assert deserialize_message(raw, DiagnosticStatus) == nm.status_message(
            est, fig, "marten_mobile")
    for fig in figs:
        raw = encoder.encode(nm.idle_fields("model_error", 2, "bad URDF: ·", fig, ""))
        assert deserialize_message(raw, DiagnosticStatus) == nm.idle_status(
            "model_error", 2, "bad URDF: ·", fig, "")
