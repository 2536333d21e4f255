"""~/markers over real DDS: read back as bytes and decoded with rclpy's deserializer.

References: the wrench the node publishes for the same stamp (the arrow is that force times the
scale), Pinocchio's forward kinematics on the URDF loaded here (the arrow starts at the contact
frame's origin), rclpy's parameter service (a refused scale names the value and the range), and
the status of the same stamp (the text's state and colour).
"""
from __future__ import annotations

import math
import textwrap
import time

import numpy as np
import pinocchio as pin
import pytest
from rclpy.serialization import deserialize_message
from ros_harness import (
    RELIABLE,
    NodeProcess,
    Peer,
    Recorder,
    contact_scenario,
    level,
    next_domain,
    publish_paced,
    values,
)
from visualization_msgs.msg import Marker, MarkerArray

from interaction_estimator.ros.markers import LEVEL_COLOURS
from interaction_estimator.sim import marten

SCALE = 0.02   # m/N


@pytest.fixture
def node_and_peer(tmp_path):
    params = tmp_path / "p.yaml"
    params.write_text("/**/interaction_estimator:\n  ros__parameters:\n" + textwrap.indent(
        textwrap.dedent(f"""\
        robot_description_file: {marten.MOBILE_URDF}
        output: {{status_rate: 20.0, marker_force_scale: {SCALE}}}
        health: {{max_latency: 10.0, stale_after: 0.5}}
        input: {{reliability: reliable, queue_depth: 20000}}
        """), "    "))
    domain = next_domain()
    node = NodeProcess(["--params-file", str(params)], domain, tmp_path / "node.log")
    peer = Peer(domain)
    raw = Recorder()
    sub = peer.node.create_subscription(MarkerArray, f"{peer.prefix}/markers", raw, RELIABLE,
                                        raw=True)
    try:
        peer.wait_connected(node)
        Peer.wait_for(lambda: sub.get_publisher_count() >= 1, 10, "the markers publisher", node)
        yield node, peer, raw
    finally:
        peer.close()
        node.stop()


def contact_origin(urdf_path, step) -> np.ndarray:
    """The contact frame's origin (m, world) for a step's joint positions: Pinocchio, with q
    built here from the URDF's joints (continuous joints as cos/sin)."""
    model = pin.buildModelFromUrdf(str(urdf_path))
    model.gravity.linear = np.array([0.0, 0.0, -9.80665])
    data = model.createData()
    q = pin.neutral(model)
    by_name = dict(zip(step.names, step.position))
    for jid in range(1, model.njoints):
        j = model.joints[jid]
        a = by_name[model.names[jid]]
        if j.nq == 2:
            q[j.idx_q], q[j.idx_q + 1] = math.cos(a), math.sin(a)
        else:
            q[j.idx_q] = a
    pin.framesForwardKinematics(model, data, q)
    return data.oMf[model.getFrameId(marten.CONTACT_FRAME)].translation.copy()


def by_ns(array: MarkerArray) -> dict[str, Marker]:
    return {m.ns: m for m in array.markers}


def test_markers_show_force_direction_and_parameters_then_clear(node_and_peer):
    node, peer, raw = node_and_peer
    urdf = marten.MOBILE_URDF.read_text()
    # the node looks for subscribers a few times a second: let it see this one
    time.sleep(0.6)
    steps = contact_scenario(urdf, duration=3.0)
    publish_paced(peer.joint_states, [s.message() for s in steps], 500.0)
    peer.wait_for(lambda: len(peer.wrench) >= len(steps), 20, "every wrench", node)

    arrays = [deserialize_message(bytes(b), MarkerArray) for b in raw.messages()]
    drawn = [a for a in arrays if a.markers and a.markers[0].action == Marker.ADD]
    # common practice, no source: about the status rate (20 Hz) over ~3 s of input
    assert len(drawn) >= 20, len(drawn)
    wrench_at = {(w.header.stamp.sec, w.header.stamp.nanosec): w
                 for w in peer.wrench.messages()}
    status_at = {values(s)["time[s]"]: s for s in peer.status.messages()
                 if "time[s]" in values(s)}
    step_at = {(s.stamp().sec, s.stamp().nanosec): s for s in steps}
    checked_force = 0
    for a in drawn:
        m = by_ns(a)
        assert set(m) == {"force", "direction", "parameters"}
        arrow = m["force"]
        key = (arrow.header.stamp.sec, arrow.header.stamp.nanosec)
        w = wrench_at[key]            # reference: the wrench of the same sample
        assert arrow.header.frame_id == w.header.frame_id == "odom"
        assert arrow.type == Marker.ARROW and len(arrow.points) == 2
        p0 = np.array([arrow.points[0].x, arrow.points[0].y, arrow.points[0].z])
        p1 = np.array([arrow.points[1].x, arrow.points[1].y, arrow.points[1].z])
        force = np.array([w.wrench.force.x, w.wrench.force.y, w.wrench.force.z])
        # the arrow's length is the force times the scale, along the force
        assert abs(np.linalg.norm(p1 - p0) - np.linalg.norm(force) * SCALE) <= 1e-9
        np.testing.assert_allclose(p1 - p0, force * SCALE, rtol=0, atol=1e-9)
        # it starts at the contact frame's origin (reference: Pinocchio here)
        np.testing.assert_allclose(p0, contact_origin(marten.MOBILE_URDF, step_at[key]),
                                   rtol=0, atol=1e-9)
        checked_force += np.linalg.norm(force) > 1.0
        # the direction: a unit vector drawn 0.15 m long from the same point
        d = m["direction"]
        assert abs(math.dist((d.points[0].x, d.points[0].y, d.points[0].z),
                             (d.points[1].x, d.points[1].y, d.points[1].z)) - 0.15) <= 1e-9
        # the text: parameters +/- std with units and the state, coloured by the level of
        # the status of the same sample
        text = m["parameters"]
        assert text.type == Marker.TEXT_VIEW_FACING
        st = status_at[repr(step_at[key].time)]
        for name, unit in (("mass", "kg"), ("damping", "N·s/m"), ("stiffness", "N/m"),
                           ("static force", "N")):
            assert f"{name}: " in text.text and f" {unit}" in text.text
        assert "\u00b1" in text.text
        assert f"state: {values(st)['state'].replace('_', ' ')}" in text.text
        hexa = LEVEL_COLOURS[level(st)].lstrip("#")
        assert [round(c * 255) for c in (text.color.r, text.color.g, text.color.b)] == [
            int(hexa[i:i + 2], 16) for i in (0, 2, 4)]
        assert text.lifetime.sec == 0 and text.lifetime.nanosec == 500_000_000
    assert checked_force >= 5   # arrows of real length were among them (in contact)

    # input stops: after health.stale_after the markers are deleted, once
    before = len(raw)
    peer.wait_for(lambda: any(deserialize_message(bytes(b), MarkerArray).markers[0].action
                              == Marker.DELETEALL for b in raw.messages()[before:]), 5,
                  "a DELETEALL once the estimates are stale", node)
    time.sleep(1.0)
    clears = [b for b in raw.messages()[before:]
              if deserialize_message(bytes(b), MarkerArray).markers[0].action
              == Marker.DELETEALL]
    assert len(clears) == 1

    # the scale is a parameter with a range: out of range refused, in range applied
    result = peer.set_parameter("output.marker_force_scale", 5.0)
    assert not result.successful and "output.marker_force_scale" in result.reason
    assert "5.0" in result.reason
    result = peer.set_parameter("output.marker_force_scale", 0.05)
    assert result.successful, result.reason
    more = contact_scenario(urdf, duration=2.5, start_ns=200_000_000_000)
    start = len(raw)
    publish_paced(peer.joint_states, [s.message() for s in more], 500.0)
    peer.wait_for(lambda: len(peer.wrench) >= len(steps) + len(more), 20, "more wrenches",
                  node)
    wrench_at = {(w.header.stamp.sec, w.header.stamp.nanosec): w
                 for w in peer.wrench.messages()}
    later = [by_ns(deserialize_message(bytes(b), MarkerArray)) for b in raw.messages()[start:]]
    later = [m for m in later if "force" in m]
    assert later
    for m in later:
        arrow = m["force"]
        w = wrench_at[(arrow.header.stamp.sec, arrow.header.stamp.nanosec)]
        force = np.array([w.wrench.force.x, w.wrench.force.y, w.wrench.force.z])
        vec = np.array([arrow.points[1].x - arrow.points[0].x,
                        arrow.points[1].y - arrow.points[0].y,
                        arrow.points[1].z - arrow.points[0].z])
        np.testing.assert_allclose(vec, force * 0.05, rtol=0, atol=1e-9)
    assert node.alive()


def test_the_replay_and_tune_read_a_file_that_sets_the_marker_scale(tmp_path):
    # the scale is a setting of the registry: the file readers of replay and tune take it and
    # refuse a value out of its range with the name and the range (the node's own check above)
    from interaction_estimator.core.settings import SettingsError
    from interaction_estimator.io.parameter_file import load_parameter_file
    good = tmp_path / "good.yaml"
    good.write_text("/**/interaction_estimator:\n  ros__parameters:\n"
                    "    output: {marker_force_scale: 0.05}\n", encoding="utf-8")
    assert load_parameter_file(good)["output.marker_force_scale"] == 0.05
    bad = tmp_path / "bad.yaml"
    bad.write_text("/**/interaction_estimator:\n  ros__parameters:\n"
                   "    output: {marker_force_scale: 5.0}\n", encoding="utf-8")
    with pytest.raises(SettingsError, match="output.marker_force_scale"):
        load_parameter_file(bad)
