"""The managed (lifecycle) node over real DDS, driven as a lifecycle manager drives it: through
the ``change_state`` and ``get_state`` services (lifecycle_msgs) from this process.

References: the state and transition IDs are lifecycle_msgs' own constants (lifecycle_msgs/State
and lifecycle_msgs/Transition, which encode the state machine of the ROS 2 design article
"Managed nodes"); the transition events are the ones rcl_lifecycle publishes on
``~/transition_event``; the wrenches are compared with the Pipeline run in this process on the
same samples; error texts with the operating system's and the settings registry's.
"""
from __future__ import annotations

import textwrap
import threading
import time

import numpy as np
import pytest
import rclpy
from diagnostic_msgs.msg import DiagnosticStatus
from geometry_msgs.msg import WrenchStamped
from lifecycle_msgs.msg import State, Transition, TransitionEvent
from lifecycle_msgs.srv import ChangeState, GetState
from rcl_interfaces.srv import SetParameters
from rclpy.context import Context
from rclpy.executors import SingleThreadedExecutor
from rclpy.parameter import Parameter
from ros_harness import (
    RELIABLE,
    NodeProcess,
    Peer,
    Recorder,
    level,
    next_domain,
    publish_paced,
    still_scenario,
    values,
)
from sensor_msgs.msg import JointState

from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.io.parameter_file import load_parameter_file
from interaction_estimator.sim import marten

PREFIX = "/interaction_estimator"


class Manager:
    """What a lifecycle manager does, by hand: change_state and get_state calls, plus the
    node's transition events, status and wrench recorded."""

    def __init__(self, domain: int):
        self.context = Context()
        rclpy.init(context=self.context, domain_id=domain)
        n = self.node = rclpy.create_node("lifecycle_test_manager", context=self.context)
        self.change = n.create_client(ChangeState, f"{PREFIX}/change_state")
        self.get = n.create_client(GetState, f"{PREFIX}/get_state")
        self.set_params = n.create_client(SetParameters, f"{PREFIX}/set_parameters")
        self.events, self.status, self.wrench = Recorder(), Recorder(), Recorder()
        self._subs = [
            n.create_subscription(TransitionEvent, f"{PREFIX}/transition_event", self.events,
                                  10),
            n.create_subscription(DiagnosticStatus, f"{PREFIX}/status", self.status, RELIABLE),
            n.create_subscription(WrenchStamped, f"{PREFIX}/wrench", self.wrench, RELIABLE),
        ]
        self.joint_states = n.create_publisher(JointState, "/joint_states", RELIABLE)
        self.executor = SingleThreadedExecutor(context=self.context)
        self.executor.add_node(n)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._spin, daemon=True)
        self._thread.start()

    def _spin(self):
        while not self._stop.is_set() and self.context.ok():
            try:
                self.executor.spin_once(timeout_sec=0.05)
            except Exception:
                if self._stop.is_set():
                    return
                raise

    def close(self):
        self._stop.set()
        self._thread.join(5.0)
        self.executor.shutdown()
        self.node.destroy_node()
        self.context.try_shutdown()

    def call(self, client, request, timeout=15.0):
        future = client.call_async(request)
        Peer.wait_for(future.done, timeout, f"a reply from {client.srv_name}")
        return future.result()

    def transition(self, transition_id: int) -> bool:
        req = ChangeState.Request()
        req.transition.id = transition_id
        return self.call(self.change, req).success

    def state(self) -> tuple[int, str]:
        s = self.call(self.get, GetState.Request()).current_state
        return s.id, s.label

    def publishers(self, topic: str) -> int:
        return self.node.count_publishers(topic)

    def latest_status(self):
        items = self.status.items
        return items[-1][1] if items else None


@pytest.fixture
def managed(tmp_path):
    started = []

    def start(params_body: str):
        params = tmp_path / f"p{len(started)}.yaml"
        params.write_text("/**/interaction_estimator:\n  ros__parameters:\n"
                          + textwrap.indent(textwrap.dedent(params_body), "    "))
        domain = next_domain()
        node = NodeProcess(["--params-file", str(params)], domain,
                           tmp_path / f"node{len(started)}.log", node_args=["--managed"])
        manager = Manager(domain)
        started.append((node, manager))
        Peer.wait_for(lambda: manager.change.service_is_ready() and manager.get.service_is_ready()
                      and manager.latest_status() is not None, 30,
                      "the lifecycle services and a status", node)
        return node, manager, params

    yield start
    for node, manager in started:
        try:
            manager.close()
        finally:
            node.stop()


def goal_states(events) -> list[tuple[int, int]]:
    """(start state id, goal state id) of each transition event (rcl_lifecycle 10.1 leaves
    the event's ``transition`` field empty: id 0; the states say which step it was)."""
    return [(e.start_state.id, e.goal_state.id) for e in events.messages()]


def wait_event(manager: Manager, count: int, node) -> list[tuple[int, int]]:
    Peer.wait_for(lambda: len(manager.events) >= count, 10, f"{count} transition events", node)
    return goal_states(manager.events)


def test_transitions_configure_activate_deactivate_cleanup_shutdown(managed):
    body = f"""\
        robot_description_file: {marten.MOBILE_URDF}
        output: {{status_rate: 0.0}}
        health: {{max_latency: 10.0}}
        input: {{reliability: reliable, queue_depth: 20000}}
        """
    node, m, params = managed(body)
    urdf = marten.MOBILE_URDF.read_text()

    # reference: lifecycle_msgs' state IDs and labels
    assert m.state() == (State.PRIMARY_STATE_UNCONFIGURED, "unconfigured")
    assert values(m.latest_status())["state"] == "unconfigured"
    assert m.publishers(f"{PREFIX}/wrench") == 0          # nothing made before configure

    assert m.transition(Transition.TRANSITION_CONFIGURE)
    assert m.state() == (State.PRIMARY_STATE_INACTIVE, "inactive")
    events = wait_event(m, 2, node)
    # reference: the design article's configure transition: unconfigured -> configuring ->
    # (on_configure SUCCESS) inactive
    assert events[:2] == [
        (State.PRIMARY_STATE_UNCONFIGURED, State.TRANSITION_STATE_CONFIGURING),
        (State.TRANSITION_STATE_CONFIGURING, State.PRIMARY_STATE_INACTIVE)]
    Peer.wait_for(lambda: m.publishers(f"{PREFIX}/wrench") == 1, 10, "the wrench publisher",
                  node)
    st = Peer.wait_for(lambda: (s := m.latest_status()) is not None
                       and values(s)["state"] == "inactive" and s, 10, "inactive status", node)
    assert "model 'marten_mobile' ready" in st.message

    # inactive: joint states are not read, nothing is published
    steps = still_scenario(urdf, 300)
    publish_paced(m.joint_states, [s.message() for s in steps[:50]], 500.0)
    time.sleep(1.0)
    assert len(m.wrench) == 0

    assert m.transition(Transition.TRANSITION_ACTIVATE)
    assert m.state() == (State.PRIMARY_STATE_ACTIVE, "active")
    Peer.wait_for(lambda: m.joint_states.get_subscription_count() >= 1, 10,
                  "the node's joint-state subscription", node)
    active = steps[50:200]
    publish_paced(m.joint_states, [s.message() for s in active], 500.0)
    Peer.wait_for(lambda: len(m.wrench) >= len(active), 15, "one wrench per sample", node)
    # reference: the Pipeline on the samples sent while active (and only those)
    ref = Pipeline(load_parameter_file(params), urdf)
    expected = [ref.process(s.sample()) for s in active]
    got = m.wrench.messages()
    assert len(got) == len(active)
    for w, est, step in zip(got, expected, active):
        assert (w.header.stamp.sec, w.header.stamp.nanosec) == (step.stamp().sec,
                                                                step.stamp().nanosec)
        np.testing.assert_allclose([w.wrench.force.x, w.wrench.force.y, w.wrench.force.z],
                                   est.force, rtol=0, atol=1e-9)

    assert m.transition(Transition.TRANSITION_DEACTIVATE)
    assert m.state() == (State.PRIMARY_STATE_INACTIVE, "inactive")
    Peer.wait_for(lambda: m.joint_states.get_subscription_count() == 0, 10,
                  "the joint-state subscription gone", node)
    publish_paced(m.joint_states, [s.message() for s in steps[200:250]], 500.0)
    time.sleep(1.0)
    assert len(m.wrench) == len(active)       # silent while inactive

    assert m.transition(Transition.TRANSITION_CLEANUP)
    assert m.state() == (State.PRIMARY_STATE_UNCONFIGURED, "unconfigured")
    Peer.wait_for(lambda: m.publishers(f"{PREFIX}/wrench") == 0, 10,
                  "the outputs destroyed by cleanup", node)
    assert "cleaned up: model freed" in node.log()

    # an invalid transition from this state is refused (design article: activate needs
    # inactive)
    assert not m.transition(Transition.TRANSITION_ACTIVATE)
    assert m.state()[0] == State.PRIMARY_STATE_UNCONFIGURED

    # configure again (the model is read again), then shut down from inactive
    assert m.transition(Transition.TRANSITION_CONFIGURE)
    assert m.state()[0] == State.PRIMARY_STATE_INACTIVE
    assert m.transition(Transition.TRANSITION_INACTIVE_SHUTDOWN)
    assert m.state() == (State.PRIMARY_STATE_FINALIZED, "finalized")
    assert node.alive()


def test_failed_configure_says_why_and_can_be_fixed(managed, tmp_path):
    missing = tmp_path / "no_such_robot.urdf"
    body = f"""\
        robot_description_file: {missing}
        filter: {{converged_fraction: 20.0}}
        """
    node, m, _ = managed(body)
    assert node.alive()   # a managed node does not exit on bad parameters: configure fails
    assert not m.transition(Transition.TRANSITION_CONFIGURE)
    assert m.state() == (State.PRIMARY_STATE_UNCONFIGURED, "unconfigured")
    events = wait_event(m, 2, node)
    # reference: the design article: on_configure FAILURE -> back to unconfigured
    assert events[-1] == (State.TRANSITION_STATE_CONFIGURING, State.PRIMARY_STATE_UNCONFIGURED)
    st = Peer.wait_for(lambda: (s := m.latest_status()) is not None
                       and "configure failed" in s.message and s, 10, "the reason", node)
    assert level(st) == 2 and values(st)["state"] == "unconfigured"
    # reference: the registry's range for the bad value
    assert "filter.converged_fraction" in st.message and "20.0" in st.message

    # the value fixed through the parameter service: configure now fails on the URDF file only
    req = SetParameters.Request(parameters=[
        Parameter("filter.converged_fraction", value=0.05).to_parameter_msg()])
    assert m.call(m.set_params, req).results[0].successful
    assert not m.transition(Transition.TRANSITION_CONFIGURE)
    st = Peer.wait_for(lambda: (s := m.latest_status()) is not None
                       and "cannot be read" in s.message and s, 10, "the file's reason", node)
    # reference: the operating system's text for a missing file
    assert f"robot_description_file '{missing}' cannot be read: No such file or directory" \
        in st.message
    assert "converged_fraction" not in st.message
    assert "configure failed" in node.log()

    missing.write_text(marten.MOBILE_URDF.read_text())   # the file now exists
    assert m.transition(Transition.TRANSITION_CONFIGURE)
    assert m.state()[0] == State.PRIMARY_STATE_INACTIVE
    assert m.transition(Transition.TRANSITION_INACTIVE_SHUTDOWN)
    assert m.state()[0] == State.PRIMARY_STATE_FINALIZED
