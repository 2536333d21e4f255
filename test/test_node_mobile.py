"""The node with a moving base (base.source odometry) over real DDS: joint states, odometry and
IMU published by this process to a subprocess node. Reference: the Pipeline run in this process
on the same messages (the node's wrench must equal it to 1e-9), on an exact trajectory from
Pinocchio's inverse dynamics (test_mobile_base)."""
from __future__ import annotations

import time

import numpy as np
from nav_msgs.msg import Odometry
from ros_harness import RELIABLE, NodeProcess, Peer, next_domain, values
from sensor_msgs.msg import Imu, JointState
from test_mobile_base import _exact_run, _messages

from interaction_estimator.core.base import OdometryMessage
from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.samples import Sample
from interaction_estimator.core.settings import Settings
from interaction_estimator.io.cdr import seconds_to_stamp, stamp_seconds

T0 = 100.0   # s added to the stamps


def _time(t: float) -> float:
    """The stamp as the node reads it back."""
    return stamp_seconds(*seconds_to_stamp(T0 + t))


def _stamp(msg, t):
    msg.header.stamp.sec, msg.header.stamp.nanosec = seconds_to_stamp(T0 + t)


def test_node_with_odometry_and_imu_equals_the_pipeline(tmp_path):
    urdf, T, Q, V, E, F = _exact_run(n=1200)
    urdf_path = tmp_path / "arm.urdf"
    urdf_path.write_text(urdf)
    params = tmp_path / "p.yaml"
    params.write_text("/**/interaction_estimator:\n  ros__parameters:\n"
                      f"    robot_description_file: {urdf_path}\n"
                      "    base:\n      source: odometry\n"
                      "    output:\n      status_rate: 0.0\n"
                      "    health:\n      max_latency: 10.0\n"
                      "    input:\n      reliability: reliable\n      queue_depth: 20000\n")
    domain = next_domain()
    node = NodeProcess(["--params-file", str(params)], domain, tmp_path / "node.log")
    peer = Peer(domain)
    try:
        odo_pub = peer.node.create_publisher(Odometry, "/odometry", RELIABLE)
        imu_pub = peer.node.create_publisher(Imu, "/imu", RELIABLE)
        peer.wait_connected(node)
        peer.wait_for(lambda: odo_pub.get_subscription_count() > 0
                      and imu_pub.get_subscription_count() > 0, 30, "base subscriptions", node)
        time.sleep(1.0)   # discovery completes on both sides (volatile: earlier messages lost)
        # the messages in time order, as a robot publishes them
        names = Pipeline(Settings({"base.source": "odometry"}), urdf).model.joint_names
        stream = []
        msgs = _messages(T, Q, V)
        i = 0
        for k, t in enumerate(T):
            while i < len(msgs) and msgs[i][0] <= t:
                stream.append(msgs[i][1])
                i += 1
            stream.append(Sample(t, names, Q[k, 7:], V[k, 6:], E[k]))
        start = time.perf_counter()
        for n, item in enumerate(stream):
            delay = start + n / 800.0 - time.perf_counter()
            if delay > 0:
                time.sleep(delay)
            if isinstance(item, Sample):
                js = JointState(name=list(names), position=item.position.tolist(),
                                velocity=item.velocity.tolist(), effort=item.effort.tolist())
                _stamp(js, item.time)
                peer.joint_states.publish(js)
            elif isinstance(item, OdometryMessage):
                m = Odometry(child_frame_id=item.child_frame_id)
                m.header.frame_id = item.frame_id
                _stamp(m, item.time)
                p, o = m.pose.pose.position, m.pose.pose.orientation
                p.x, p.y, p.z = item.position.tolist()
                o.x, o.y, o.z, o.w = item.orientation.tolist()
                lin, ang = m.twist.twist.linear, m.twist.twist.angular
                lin.x, lin.y, lin.z = item.linear.tolist()
                ang.x, ang.y, ang.z = item.angular.tolist()
                odo_pub.publish(m)
            else:
                m = Imu()
                m.header.frame_id = item.frame_id
                _stamp(m, item.time)
                o, w = m.orientation, m.angular_velocity
                o.x, o.y, o.z, o.w = item.orientation.tolist()
                w.x, w.y, w.z = item.angular_velocity.tolist()
                imu_pub.publish(m)
        # reference: the Pipeline here, fed the same stream (stamps as the node reads them)
        ref = Pipeline(Settings({"base.source": "odometry", "health.max_latency": 10.0}), urdf)
        outputs = []
        done = lambda s: outputs.append((s.time, ref.last_outputs()))  # noqa: E731
        for item in stream:
            if isinstance(item, Sample):
                ref.submit(Sample(_time(item.time), item.names, item.position, item.velocity,
                                  item.effort), done)
            elif isinstance(item, OdometryMessage):
                ref.add_odometry(OdometryMessage(_time(item.time), item.frame_id,
                                                 item.child_frame_id, item.position,
                                                 item.orientation, item.linear, item.angular),
                                 done)
            else:
                ref.add_imu(type(item)(_time(item.time), item.frame_id, item.orientation,
                                       item.angular_velocity), done)
        assert len(outputs) > 1000
        try:
            peer.wait_for(lambda: len(peer.wrench) >= len(outputs), 30,
                          "one wrench per sample", node)
        except AssertionError:
            kv = values(peer.status.messages()[-1])
            raise AssertionError(f"{len(peer.wrench)} of {len(outputs)} wrenches; "
                                 f"{ {k: v for k, v in kv.items() if 'reject' in k} }") from None
        wrenches = peer.wrench.messages()
        assert len(wrenches) == len(outputs)   # the last joint states wait for odometry
        for w, (t, numbers) in zip(wrenches, outputs, strict=True):
            assert w.header.frame_id == "odom"   # the world frame: the odometry's
            assert (w.header.stamp.sec, w.header.stamp.nanosec) == seconds_to_stamp(t)
            f = w.wrench.force
            np.testing.assert_allclose([f.x, f.y, f.z], numbers[:3], rtol=0, atol=1e-9)
        statuses = [values(s) for s in peer.status.messages()]
        assert any(kv.get("state") == "free_motion" for kv in statuses)
        assert node.alive()
    finally:
        peer.close()
        node.stop()
