"""The estimator node over real DDS: a subprocess node, fed and read back by this process.

References: the Pipeline run directly in this process on the very same samples (node outputs
must equal it to 1e-9), RobotModel's own error text for bad URDFs, load_parameter_file for
parameter files, and the settings registry's messages for refused parameter changes.
"""
from __future__ import annotations

import math
import signal
import struct
import textwrap
import time

import numpy as np
import pytest
from rclpy.parameter import Parameter
from rclpy.serialization import deserialize_message, serialize_message
from ros_harness import (
    REPO,
    NodeProcess,
    Peer,
    contact_scenario,
    level,
    next_domain,
    publish_paced,
    sample_of,
    still_scenario,
    values,
)
from sensor_msgs.msg import JointState
from std_msgs.msg import String
from std_srvs.srv import Trigger

from interaction_estimator.core.environment import PARAMETER_NAMES, PARAMETER_UNITS
from interaction_estimator.core.model import ModelError, RobotModel
from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.io.parameter_file import load_parameter_file
from interaction_estimator.sim import marten

DEFAULT_YAML = REPO / "config" / "default.yaml"
RATE_HZ = 500.0          # wall-clock publishing rate of the tests
ATOL = 1e-9


@pytest.fixture
def ros(tmp_path):
    """start(ros_args) -> (node, peer); both are always stopped at the end of the test."""
    started: list[tuple[NodeProcess, Peer]] = []

    def start(ros_args: list[str], namespace: str = "/", efforts: bool = False,
              efforts_topic: str | None = None):
        domain = next_domain()
        node = NodeProcess(ros_args, domain, tmp_path / f"node{len(started)}.log")
        peer = Peer(domain, namespace, efforts_topic=efforts_topic)
        started.append((node, peer))
        peer.wait_connected(node, efforts=efforts)
        return node, peer

    yield start
    for node, peer in started:
        try:
            peer.close()
        finally:
            node.stop()


def write_yaml(path, body: str):
    path.write_text("/**/interaction_estimator:\n  ros__parameters:\n"
                    + textwrap.indent(textwrap.dedent(body), "    "))
    return path


def stamped(peer: Peer) -> list:
    """Statuses that describe a processed sample (they carry its stamp)."""
    return [m for m in peer.status.messages() if "time[s]" in values(m)]


def states_in_order(statuses) -> list[str]:
    out: list[str] = []
    for st in statuses:
        s = values(st)["state"]
        if not out or out[-1] != s:
            out.append(s)
    return out


def assert_matches_reference(peer: Peer, steps, estimates, frame_id: str, first: int = 0,
                             node_findings: bool = False):
    """Wrench, environment and status number i+first of the node equal estimates[i].

    node_findings: the node may add its own findings to the verdict (as '; ...' after it,
    raising OK to WARN); otherwise level and message must equal the pipeline's.
    """
    wrenches = peer.wrench.messages()[first:]
    envs = peer.environment.messages()[first:]
    statuses = stamped(peer)[first:]
    kept = [(s, e) for s, e in zip(steps, estimates) if e is not None]
    assert len(wrenches) == len(envs) == len(statuses) == len(kept)
    for (step, est), w, env, st in zip(kept, wrenches, envs, statuses):
        # reference: the stamp sent, and the Pipeline's Estimate for the same sample
        assert (w.header.stamp.sec, w.header.stamp.nanosec) == (step.stamp().sec,
                                                                step.stamp().nanosec)
        assert w.header.frame_id == frame_id
        f, t = w.wrench.force, w.wrench.torque
        np.testing.assert_allclose([f.x, f.y, f.z], est.force, rtol=0, atol=ATOL)
        np.testing.assert_allclose([t.x, t.y, t.z], est.torque, rtol=0, atol=ATOL)
        np.testing.assert_allclose(env.data[:4], est.parameters, rtol=0, atol=ATOL)
        np.testing.assert_allclose(env.data[4:8], est.parameter_std, rtol=0, atol=ATOL)
        assert_status_matches(st, step, est, node_findings)


def assert_status_matches(st, step, est, node_findings: bool = False):
    """A status describes ``step``'s sample as the Pipeline's Estimate ``est`` does."""
    kv = values(st)
    assert kv["state"] == est.state
    if node_findings and st.message != est.message:
        assert st.message.startswith(est.message + "; ")
        assert level(st) == (1 if est.level == 0 else est.level)
    else:
        assert (level(st), st.message) == (est.level, est.message)
    assert float(kv["time[s]"]) == step.time
    assert kv["converged"] == ("true" if est.converged else "false")
    for i, (name, unit) in enumerate(zip(PARAMETER_NAMES, PARAMETER_UNITS)):
        assert abs(float(kv[f"{name}[{unit}]"]) - est.parameters[i]) <= ATOL
        assert abs(float(kv[f"{name}_std[{unit}]"]) - est.parameter_std[i]) <= ATOL
        assert kv[f"{name}_excited"] == ("true" if est.excited[i] else "false")
        assert kv[f"{name}_converged"] == ("true" if est.parameter_converged[i] else "false")
    assert abs(float(kv["nis_average"]) - est.nis_average) <= ATOL
    assert int(kv["observer_restarts"]) == est.observer_restarts


def assert_all_finite(peer: Peer):
    """No non-finite number in any output (the node's rule; checked on every message)."""
    for w in peer.wrench.messages():
        f, t = w.wrench.force, w.wrench.torque
        assert all(math.isfinite(x) for x in (f.x, f.y, f.z, t.x, t.y, t.z))
    for env in peer.environment.messages():
        assert all(math.isfinite(x) for x in env.data)
    for st in peer.status.messages():
        for kv in st.values:
            assert kv.value.lower() not in ("nan", "inf", "-inf"), (kv.key, kv.value)


def test_outputs_equal_the_pipeline_and_states_progress(ros, tmp_path):
    urdf = marten.mobile_urdf()
    overrides = write_yaml(tmp_path / "test.yaml", """\
        output:
          status_rate: 0.0
          diagnostics_rate: 2.0
        health:
          max_latency: 10.0
        input:
          reliability: reliable
          queue_depth: 20000
        filter:
          # the synthetic efforts are noise-free: what the object model leaves unexplained is
          # small and steady, so a fixed small noise level fits it (and a bool and a float of
          # the filter's group are read from the file)
          learn_noise: false
          measurement_std: 0.1
        """)
    node, peer = ros(["--params-file", str(DEFAULT_YAML), "--params-file", str(overrides)])
    first = peer.wait_status(lambda kv, st: True, 10, "a first status", node)
    assert values(first)["state"] == "waiting_for_model" and level(first) == 1

    # joint states before any robot description: counted, nothing published
    early = still_scenario(urdf, 5, start_ns=50_000_000_000)
    for step in early:
        peer.joint_states.publish(step.message())
    peer.wait_status(lambda kv, st: kv.get("rejects.no_model") == "5", 10,
                     "5 joint states counted as no_model", node)
    assert len(peer.wrench) == 0

    peer.description.publish(String(data=urdf))
    peer.wait_status(lambda kv, st: kv["state"] == "waiting_for_input"
                     and kv["model"] == "marten_mobile", 10, "the model loaded", node)

    steps = contact_scenario(urdf, duration=4.0)
    publish_paced(peer.joint_states, [s.message() for s in steps], RATE_HZ)
    peer.wait_for(lambda: len(stamped(peer)) >= len(steps) and len(peer.environment) >= len(
        steps) and len(peer.wrench) >= len(steps), 30, "one output per sample", node)

    # reference: the same parameter files read by load_parameter_file, the Pipeline run here
    settings = load_parameter_file(overrides, base=load_parameter_file(DEFAULT_YAML))
    reference = Pipeline(settings, urdf)
    estimates = [reference.process(s.sample()) for s in steps]
    assert all(e is not None for e in estimates)
    assert_matches_reference(peer, steps, estimates, reference.model.root_frame)

    node_states = states_in_order(peer.status.messages())
    ref_states = states_in_order_of(estimates)
    assert node_states[0] == "waiting_for_model"
    assert [s for s in node_states if s in set(ref_states)] == ref_states
    for wanted in ("learning_bias", "free_motion", "in_contact", "converged"):
        assert wanted in ref_states  # the scenario is built to reach them (Pipeline reference)

    # the input age (receive time minus stamp) is read for every status published (status_rate
    # 0: one per sample), the ROS clock only then
    ages = [values(st)["input_age[s]"] for st in peer.status.messages()
            if values(st)["state"] in set(ref_states)]
    assert ages and all(a != "n/a" and math.isfinite(float(a)) for a in ages), ages[:5]

    # /diagnostics carries the same status (about 2 Hz here)
    peer.wait_for(lambda: len(peer.diagnostics) >= 2, 10, "two /diagnostics arrays", node)
    sent = {st.message for st in peer.status.messages()}
    arrays = peer.diagnostics.messages()
    assert all(a.status[0].name == "interaction_estimator" for a in arrays)
    assert any(a.status[0].message in sent for a in arrays)
    assert_all_finite(peer)
    assert node.alive()


def test_status_at_its_rate_describes_a_processed_sample(ros, tmp_path):
    """At output.status_rate > 0 (the default; the other tests publish one per sample) each
    status describes the sample it names (time[s]) exactly as the Pipeline's Estimate for that
    sample does (reference: the Pipeline run here on the same samples), statuses come at about
    the rate set (DESIGN.md section 4: ~/status at a configured rate), and a wrench and an
    environment message still answer every sample."""
    urdf = marten.mobile_urdf()
    overrides = write_yaml(tmp_path / "test.yaml", """\
        output:
          status_rate: 25.0
        health:
          max_latency: 10.0
        input:
          reliability: reliable
          queue_depth: 20000
        """)
    node, peer = ros(["--params-file", str(DEFAULT_YAML), "--params-file", str(overrides),
                      "-p", f"robot_description_file:={marten.MOBILE_URDF}"])
    peer.wait_status(lambda kv, st: kv["state"] == "waiting_for_input", 10, "the model", node)
    steps = contact_scenario(urdf, duration=3.0)
    start = time.monotonic()
    publish_paced(peer.joint_states, [s.message() for s in steps], RATE_HZ)
    wall = time.monotonic() - start
    peer.wait_for(lambda: len(peer.wrench) >= len(steps) and len(peer.environment)
                  >= len(steps), 30, "one wrench and environment per sample", node)
    time.sleep(0.5)
    settings = load_parameter_file(overrides, base=load_parameter_file(DEFAULT_YAML))
    reference = Pipeline(settings, urdf)
    by_time = {s.time: (s, reference.process(s.sample())) for s in steps}
    statuses = stamped(peer)
    # common practice, no source: a rate limiter gives about the rate set, never more
    assert 0.6 * 25.0 * wall <= len(statuses) <= 25.0 * wall + 2, (len(statuses), wall)
    for st in statuses:
        step, est = by_time[float(values(st)["time[s]"])]
        assert_status_matches(st, step, est, node_findings=True)
    assert_all_finite(peer)
    assert node.alive()


def states_in_order_of(estimates) -> list[str]:
    out: list[str] = []
    for e in estimates:
        if e is not None and (not out or out[-1] != e.state):
            out.append(e.state)
    return out


def test_bad_description_then_good_then_replaced(ros, tmp_path):
    mobile, arm = marten.mobile_urdf(), marten.arm_urdf()
    overrides = write_yaml(tmp_path / "t.yaml", """\
        output: {status_rate: 0.0}
        health: {max_latency: 10.0}
        input: {reliability: reliable, queue_depth: 20000}
        """)
    node, peer = ros(["--params-file", str(overrides)])
    broken = mobile[: len(mobile) // 2]
    with pytest.raises(ModelError) as parser:  # reference: the model's own parser message
        RobotModel(broken, "tool_tip")
    peer.description.publish(String(data=broken))
    st = peer.wait_status(lambda kv, st: kv["state"] == "model_error", 10, "model_error", node)
    assert level(st) == 2 and str(parser.value) in st.message
    assert node.alive()

    peer.description.publish(String(data=mobile))
    peer.wait_status(lambda kv, st: kv["state"] == "waiting_for_input"
                     and kv["model"] == "marten_mobile", 10, "recovery on a valid URDF", node)
    steps = still_scenario(mobile, 40)
    publish_paced(peer.joint_states, [s.message() for s in steps], RATE_HZ)
    peer.wait_for(lambda: len(peer.wrench) >= 40, 10, "40 wrenches", node)
    settings = load_parameter_file(overrides)
    ref = Pipeline(settings, mobile)
    assert_matches_reference(peer, steps, [ref.process(s.sample()) for s in steps],
                             ref.model.root_frame)

    # a later description replaces the model: a new Pipeline, nothing carried over
    peer.description.publish(String(data=arm))
    peer.wait_status(lambda kv, st: kv["model"] == "marten_arm" and kv["joints"] == "7", 10,
                     "the arm model", node)
    later = still_scenario(mobile, 40, start_ns=200_000_000_000)  # mobile names: a superset
    publish_paced(peer.joint_states, [s.message() for s in later], RATE_HZ)
    peer.wait_for(lambda: len(peer.wrench) >= 80, 10, "40 more wrenches", node)
    fresh = Pipeline(settings, arm)
    assert fresh.model.root_frame != ref.model.root_frame
    assert_matches_reference(peer, later, [fresh.process(s.sample()) for s in later],
                             fresh.model.root_frame, first=40)
    assert states_in_order(stamped(peer)[40:])[0] == "learning_bias"
    assert_all_finite(peer)


def test_parameter_file_changes_and_services(ros, tmp_path):
    urdf_path = marten.MOBILE_URDF
    urdf = urdf_path.read_text()
    params = write_yaml(tmp_path / "p.yaml", f"""\
        robot_description_file: {urdf_path}
        joint_names: []
        bias:
          initial: []
          startup: 0.2
        friction:
          viscous: [0, 0, 0, 0, 0, 0, 0, 0, 0, 0]
        observer:
          gain: [40, 40, 40, 40, 40, 40, 40, 40, 40, 45]
        filter:
          measurement_std: 2
        output:
          status_rate: 0.0
        health:
          max_latency: 10.0
        input:
          reliability: reliable
          queue_depth: 20000
        """)
    node, peer = ros(["--params-file", str(params)])
    # reference: the same file read by load_parameter_file
    settings = load_parameter_file(params)
    ref = Pipeline(settings, urdf)

    # empty lists and integers in the file arrive as typed values
    gain = peer.get_parameter("observer.gain")
    assert gain.type_ == Parameter.Type.DOUBLE_ARRAY and list(gain.value) == settings[
        "observer.gain"]
    initial = peer.get_parameter("bias.initial")
    assert initial.type_ == Parameter.Type.DOUBLE_ARRAY and list(initial.value) == []
    std = peer.get_parameter("filter.measurement_std")
    assert std.type_ == Parameter.Type.DOUBLE and std.value == settings["filter.measurement_std"]

    # services before any joint state: refused honestly (reference: Pipeline.calibrate_bias)
    reply = peer.call(peer.calibrate, Trigger.Request())
    assert (reply.success, reply.message) == ref.calibrate_bias()
    assert not reply.success

    sent = []

    def feed(steps):
        publish_paced(peer.joint_states, [s.message() for s in steps], RATE_HZ)
        sent.extend(steps)
        peer.wait_for(lambda: len(peer.wrench) >= len(sent), 10, f"{len(sent)} wrenches", node)

    estimates = []
    free = still_scenario(urdf, 400)
    feed(free[:200])
    estimates += [ref.process(s.sample()) for s in free[:200]]
    assert estimates[-1].state == "free_motion"

    # a valid change is applied without restart (reference: Pipeline.apply_settings)
    result = peer.set_parameter("health.min_rate", 1000.0)
    assert result.successful, result.reason
    assert peer.get_parameter("health.min_rate").value == 1000.0
    ref.apply_settings(settings := settings.replace({"health.min_rate": 1000.0}))
    feed(free[200:300])
    estimates += [ref.process(s.sample()) for s in free[200:300]]
    assert "below 1000 Hz" in estimates[-1].message

    # refused changes name the value and what is expected; the value stays
    # reference: the registry's own messages (and rclpy's for its range and read-only checks)
    refusals = [
        ("filter.change_threshold", 0.0,
         "filter.change_threshold: 0.0 is out of range; expected (0, 1e+09)"),
        ("filter.measurement_std", -1.0, "filter.measurement_std"),  # rclpy's range check
        ("direction.mode", "sideways", "expected one of 'world', 'contact', 'estimated'"),
        ("observer.gain", "fast", "observer.gain: 'fast' is not a list of numbers"),
        ("observer.gain", [1.0, 2.0, 3.0], "3 values given; expected 1 or 10"),
        ("contact.exit_level", 7.0, "contact.exit_level: 7.0 must be below"),
        ("contact_frame", "elsewhere", "read-only parameter: contact_frame"),
    ]
    for name, value, why in refusals:
        result = peer.set_parameter(name, value)
        assert not result.successful and why in result.reason, (name, result.reason)
        if name == "filter.measurement_std":
            assert "-1.0" in result.reason
        current = peer.get_parameter(name).value
        assert (list(current) if isinstance(settings[name], list) else current) == settings[name]

    # calibrate_bias in free motion is accepted; reset restarts the bias learning
    reply = peer.call(peer.calibrate, Trigger.Request())
    assert (reply.success, reply.message) == ref.calibrate_bias()
    assert reply.success
    feed(free[300:350])
    estimates += [ref.process(s.sample()) for s in free[300:350]]
    assert estimates[-1].state == "learning_bias"
    reply = peer.call(peer.reset, Trigger.Request())
    assert reply.success and "reset" in reply.message
    ref.reset()
    feed(free[350:400])
    estimates += [ref.process(s.sample()) for s in free[350:400]]
    assert_matches_reference(peer, sent, estimates, ref.model.root_frame)

    # in contact calibrate_bias is refused (the contact force would be learned as bias)
    pushing = contact_scenario(urdf, duration=1.0, contact_at=0.5,
                               start_ns=300_000_000_000)
    ref.reset()
    peer.call(peer.reset, Trigger.Request())
    feed(pushing)
    estimates = [ref.process(s.sample()) for s in pushing]
    assert estimates[-1].in_contact
    reply = peer.call(peer.calibrate, Trigger.Request())
    assert (reply.success, reply.message) == ref.calibrate_bias()
    assert not reply.success and "in contact" in reply.message
    assert_all_finite(peer)


def test_bad_input_is_counted_and_never_published(ros, tmp_path):
    urdf = marten.MOBILE_URDF.read_text()
    params = write_yaml(tmp_path / "p.yaml", f"""\
        robot_description_file: {marten.MOBILE_URDF}
        bias: {{startup: 0.1}}
        observer: {{max_gap: 0.05}}
        output: {{status_rate: 0.0}}
        health: {{max_latency: 10.0}}
        input: {{reliability: reliable, queue_depth: 20000, expected_rate: 100.0}}
        """)
    node, peer = ros(["--params-file", str(params), "-p", "contact_frame:=tool_tip"])
    good = still_scenario(urdf, 200)
    names = good[0].names
    msgs, samples = [], []

    def send(step, **changes):
        msg = step.message()
        for field, value in changes.items():
            setattr(msg, field, value)
        msgs.append(msg)
        samples.append(step)
        return msg

    for s in good[:60]:
        send(s)
    bad_effort = list(good[60].effort)
    bad_effort[3] = float("nan")
    send(good[60], effort=bad_effort)                                  # NaN effort
    bad_position = list(good[61].position)
    bad_position[0] = float("inf")
    send(good[61], position=bad_position)                              # infinite position
    send(good[62], position=list(good[62].position)[:-1])              # wrong length
    send(good[63], name=["not_a_joint"] + list(names[1:]))             # unknown joint
    send(good[64], name=list(names[:-2]), position=list(good[64].position[:-2]),
         velocity=list(good[64].velocity[:-2]), effort=list(good[64].effort[:-2]))  # missing
    send(good[65], effort=[])                                          # efforts missing
    send(good[66], velocity=[])                                        # velocities missing
    send(good[67])
    send(good[66])                                                     # stamp backwards
    send(good[67])                                                     # duplicate stamp
    for s in good[68:80]:
        send(s)
    gap = [s for s in still_scenario(urdf, 30, start_ns=good[79].stamp_ns + 200_000_000)]
    for s in gap:                                                      # 0.2 s gap > max_gap
        send(s)
    publish_paced(peer.joint_states, msgs, RATE_HZ)

    # reference: the Pipeline on the same samples, in the same order
    ref = Pipeline(load_parameter_file(params), urdf)
    estimates = [ref.process(sample_of(m)) for m in msgs]
    kept = sum(e is not None for e in estimates)
    peer.wait_for(lambda: len(peer.wrench) >= kept and len(stamped(peer)) >= kept, 15,
                  f"{kept} outputs", node)
    counts = ref.rejects.counts
    assert counts["non_finite"] == 2 and counts["length_mismatch"] == 1
    assert counts["unknown_joint"] == 2 and counts["missing_effort"] == 1
    assert counts["missing_velocity"] == 1 and counts["time_backwards"] == 1
    assert counts["duplicate_time"] == 1
    last = values(stamped(peer)[-1])
    for reason, n in counts.items():
        assert last[f"rejects.{reason}"] == str(n), reason
    assert last["rejects_total"] == str(ref.rejects.total)
    assert int(last["observer_restarts"]) == estimates[-1].observer_restarts >= 1
    # rate far from input.expected_rate (100 Hz) is a node finding added to the verdict
    assert stamped(peer)[-1].message.startswith(estimates[-1].message)
    assert "far from input.expected_rate = 100 Hz" in stamped(peer)[-1].message

    # a zero stamp: receive time used, flagged in the status and the message
    zero = good[100].message()
    zero.header.stamp.sec, zero.header.stamp.nanosec = 0, 0
    peer.joint_states.publish(zero)
    st = peer.wait_status(lambda kv, st: kv.get("stamp_from_receive") == "true", 10,
                          "stamp_from_receive", node)
    assert "stamps are zero: receive time used" in st.message
    assert peer.wrench.messages()[-1].header.stamp.sec > 0

    log = node.log()
    assert "sample rejected (non_finite): effort of joint" in log
    assert "sample rejected (time_backwards)" in log
    assert "momentum observer restarted" in log
    assert node.alive()
    assert_all_finite(peer)


def test_separate_efforts_are_matched_by_stamp(ros, tmp_path):
    urdf = marten.MOBILE_URDF.read_text()
    params = write_yaml(tmp_path / "p.yaml", f"""\
        robot_description_file: {marten.MOBILE_URDF}
        output: {{status_rate: 0.0}}
        health: {{max_latency: 10.0}}
        input: {{separate_efforts: true, stamp_tolerance: 0.0005, reliability: reliable,
                 queue_depth: 20000}}
        """)
    # in a namespace, with the efforts topic remapped (as on a robot whose driver names it)
    node, peer = ros(["--params-file", str(params), "-r", "__ns:=/marten", "-r",
                      "joint_efforts:=/marten/driver/efforts"], namespace="/marten",
                     efforts=True, efforts_topic="/marten/driver/efforts")
    steps = still_scenario(urdf, 120)
    used = []
    for i, step in enumerate(steps):
        state = step.message()
        state.effort = []
        effort = step.message()
        effort.position, effort.velocity = [], []
        effort.name, effort.effort = list(reversed(effort.name)), list(reversed(effort.effort))
        if i % 3 == 1:  # effort stamped 0.3 ms later: within the tolerance
            effort.header.stamp.nanosec += 300_000
        if i == 50:     # this state never gets efforts
            peer.joint_states.publish(state)
            continue
        if i == 70:     # efforts lacking a model joint
            effort.name, effort.effort = effort.name[1:], effort.effort[1:]
        first, second = ((peer.joint_states, state), (peer.joint_efforts, effort))[:: 1 if i % 2
                                                                                   else -1]
        first[0].publish(first[1])
        second[0].publish(second[1])
        if i != 70:
            used.append(step)
        time.sleep(0.004)
    peer.wait_for(lambda: len(peer.wrench) >= len(used), 15, f"{len(used)} wrenches", node)
    peer.wait_for(lambda: values(stamped(peer)[-1])["rejects.missing_effort"] == "2", 5,
                  "both unusable states counted as missing_effort", node)
    ref = Pipeline(load_parameter_file(params), urdf)  # reference: the combined samples
    assert_matches_reference(peer, used, [ref.process(s.sample()) for s in used],
                             ref.model.root_frame, node_findings=True)
    assert "sample rejected (missing_effort)" in node.log()
    assert node.alive()


def big_endian_cdr(msg) -> bytes:
    """A JointState as big-endian plain CDR, as a big-endian computer would send it (written
    here by hand; the test checks that rclpy's deserializer reads it back as ``msg``)."""
    out = bytearray(b"\x00\x00\x00\x00")   # encapsulation: plain CDR, big-endian

    def align(n):
        out.extend(bytes(-(len(out) - 4) % n))

    def u32(v):
        align(4)
        out.extend(struct.pack(">I", v))

    def string(text):
        data = text.encode() + b"\x00"
        u32(len(data))
        out.extend(data)

    out += struct.pack(">iI", msg.header.stamp.sec, msg.header.stamp.nanosec)
    string(msg.header.frame_id)
    u32(len(msg.name))
    for name in msg.name:
        string(name)
    for array_ in (msg.position, msg.velocity, msg.effort):
        u32(len(array_))
        if len(array_):
            align(8)
            out += struct.pack(f">{len(array_)}d", *array_)
    return bytes(out)


def test_joint_states_in_another_encoding_are_read_by_rclpy(ros, tmp_path):
    """The node reads little-endian CDR itself and leaves anything else to rclpy: big-endian
    joint states, published as bytes, give the same outputs (reference: the Pipeline)."""
    urdf = marten.MOBILE_URDF.read_text()
    params = write_yaml(tmp_path / "p.yaml", f"""\
        robot_description_file: {marten.MOBILE_URDF}
        output: {{status_rate: 0.0}}
        health: {{max_latency: 10.0}}
        input: {{reliability: reliable, queue_depth: 20000}}
        """)
    node, peer = ros(["--params-file", str(params)])
    steps = still_scenario(urdf, 60)
    raws = []
    for i, step in enumerate(steps):
        msg = step.message()
        msg.header.frame_id = "base" * (i % 3)
        raw = big_endian_cdr(msg) if i % 2 else serialize_message(msg)
        assert deserialize_message(raw, JointState) == msg  # reference: rclpy reads it
        raws.append(raw)
    publish_paced(peer.joint_states, raws, RATE_HZ)
    peer.wait_for(lambda: len(peer.wrench) >= len(steps), 10, f"{len(steps)} wrenches", node)
    ref = Pipeline(load_parameter_file(params), urdf)
    assert_matches_reference(peer, steps, [ref.process(s.sample()) for s in steps],
                             ref.model.root_frame)
    assert node.alive()


@pytest.mark.parametrize("body,expected", [
    ("filter:\n  change_threshold: -1.5\n", "filter.change_threshold"),
    ("filter:\n  fading_factor: 0.99\n",        # retired (issue 17): its replacement named
     "setting 'filter.fading_factor' is no longer used: the noise level is learned from the"
     " fit's residuals (filter.learn_noise)"),
    ("filter:\n  measurement_stdev: 1.5\n",
     "unknown setting 'filter.measurement_stdev'; did you mean filter.measurement_std"),
    ("contact_frame: 5\n", "parameter contact_frame"),
    ("direction:\n  vector: [0.0, 0.0, 0.0]\n",
     "direction.vector: [0.0, 0.0, 0.0] has zero length"),
])
def test_bad_parameter_file_stops_with_a_clear_message(tmp_path, body, expected):
    path = write_yaml(tmp_path / "bad.yaml", body)
    node = NodeProcess(["--params-file", str(path)], next_domain(), tmp_path / "node.log")
    try:
        node.proc.wait(30)
    finally:
        code = node.stop()
    assert code == 2, node.log()
    assert expected in node.log() and "invalid parameters" in node.log()
    if "change_threshold" in body:
        assert "-1.5" in node.log()


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_node_exits_cleanly_on_signals(tmp_path, sig):
    node = NodeProcess(["-p", f"robot_description_file:={marten.MOBILE_URDF}"], next_domain(),
                       tmp_path / "node.log")
    try:
        Peer.wait_for(lambda: "robot model 'marten_mobile'" in node.log(), 30,
                      "the node to start", node)
    finally:
        code = node.stop(sig)
    assert code == 0, node.log()  # reference: the exit status the operating system reports


def test_unreadable_parameter_file_stops_with_a_clear_message(tmp_path):
    missing = tmp_path / "missing.yaml"
    node = NodeProcess(["--params-file", str(missing)], next_domain(), tmp_path / "node.log")
    try:
        node.proc.wait(30)
    finally:
        code = node.stop()
    assert code == 2
    # reference: the operating system's error text for a missing file
    assert f"parameter file '{missing}' cannot be read: No such file or directory" in node.log()


def test_parameter_file_without_a_section_for_the_node_is_reported(tmp_path):
    # ROS 2 matches sections by fully qualified name: a bare name misses a namespaced node
    path = tmp_path / "bare.yaml"
    path.write_text("interaction_estimator:\n  ros__parameters:\n    gravity: 9.0\n")
    node = NodeProcess(["--params-file", str(path), "-r", "__ns:=/marten"], next_domain(),
                       tmp_path / "node.log")
    try:
        Peer.wait_for(lambda: "has no section for this node" in node.log(), 30,
                      "the warning", node)
        assert "'/marten/interaction_estimator'" in node.log()
        assert node.alive()
    finally:
        node.stop()
