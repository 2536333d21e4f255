"""Test harness for the node: the node in a subprocess, a peer node in the test process.

Everything goes over real DDS on this machine: each node process and its peer share a ROS domain
of their own (``ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST``, set in conftest and again here). The
node process is always stopped: SIGINT, then SIGKILL after a grace period.

Also here: the synthetic Marten contact scenario the tests feed to the node, and the reference
run of the Pipeline on the very same samples.
"""
from __future__ import annotations

import itertools
import os
import signal
import subprocess
import sys
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pinocchio as pin
import rclpy
from builtin_interfaces.msg import Time as TimeMsg
from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus
from geometry_msgs.msg import WrenchStamped
from rcl_interfaces.msg import Parameter as ParameterMsg
from rcl_interfaces.srv import GetParameters, SetParameters
from rclpy.context import Context
from rclpy.executors import SingleThreadedExecutor
from rclpy.parameter import Parameter
from rclpy.qos import DurabilityPolicy, HistoryPolicy, QoSProfile, ReliabilityPolicy
from sensor_msgs.msg import JointState
from std_msgs.msg import Float64MultiArray, String
from std_srvs.srv import Trigger

from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.samples import Sample
from interaction_estimator.core.settings import Settings

REPO = Path(__file__).resolve().parents[1]
NODE_NAME = "interaction_estimator"
_DOMAINS = itertools.count()
GRACE_S = 3.0


def next_domain() -> int:
    """A ROS domain for one node and its peer: 90..219, away from conftest's 10..89."""
    base = int(os.environ.get("ROS_DOMAIN_ID", "10"))
    return 90 + (base * 7 + next(_DOMAINS)) % 130


def local_env(domain: int) -> dict[str, str]:
    env = dict(os.environ)
    env.update(ROS_AUTOMATIC_DISCOVERY_RANGE="LOCALHOST", ROS_DOMAIN_ID=str(domain),
               RMW_IMPLEMENTATION=env.get("RMW_IMPLEMENTATION", "rmw_fastrtps_cpp"),
               PYTHONUNBUFFERED="1", RCUTILS_LOGGING_BUFFERED_STREAM="0")
    env.pop("ROS_LOCALHOST_ONLY", None)
    return env


class NodeProcess:
    """``python -m interaction_estimator.ros.node [node_args] --ros-args ...`` with output in a
    log file."""

    def __init__(self, ros_args: list[str], domain: int, log_path: Path,
                 node_args: list[str] | None = None):
        self.log_path = log_path
        self._log = open(log_path, "wb")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "interaction_estimator.ros.node", *(node_args or []),
             "--ros-args", *ros_args],
            env=local_env(domain), stdout=self._log, stderr=subprocess.STDOUT, cwd=REPO)

    def alive(self) -> bool:
        return self.proc.poll() is None

    def log(self) -> str:
        if not self._log.closed:
            self._log.flush()
        return self.log_path.read_text(errors="replace")

    def stop(self, sig: int = signal.SIGINT) -> int | None:
        """``sig``, then SIGKILL after GRACE_S; returns the exit code (None if killed)."""
        code = None
        if self.proc.poll() is None:
            self.proc.send_signal(sig)
            try:
                code = self.proc.wait(GRACE_S)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(GRACE_S)
        else:
            code = self.proc.returncode
        self._log.close()
        return code


RELIABLE = QoSProfile(depth=5000, history=HistoryPolicy.KEEP_LAST,
                      reliability=ReliabilityPolicy.RELIABLE,
                      durability=DurabilityPolicy.VOLATILE)
LATCHED = QoSProfile(depth=1, history=HistoryPolicy.KEEP_LAST,
                     reliability=ReliabilityPolicy.RELIABLE,
                     durability=DurabilityPolicy.TRANSIENT_LOCAL)


class Recorder:
    """Messages received on one topic, with their arrival time (time.monotonic, s)."""

    def __init__(self):
        self.items: list[tuple[float, object]] = []

    def __call__(self, msg) -> None:
        self.items.append((time.monotonic(), msg))

    def messages(self) -> list:
        return [m for _, m in list(self.items)]

    def __len__(self) -> int:
        return len(self.items)


class Peer:
    """The test's own node: publishes the node's inputs, records its outputs, calls services.

    All entities are made before the spin thread starts; the thread runs
    ``spin_once(0.05)`` until :meth:`close`.
    """

    def __init__(self, domain: int, namespace: str = "/", node_name: str = NODE_NAME,
                 efforts_topic: str | None = None):
        self.context = Context()
        rclpy.init(context=self.context, domain_id=domain)
        self.node = rclpy.create_node("estimator_test_peer", context=self.context)
        ns = namespace.rstrip("/")
        self.prefix = f"{ns}/{node_name}"
        n = self.node
        self.joint_states = n.create_publisher(JointState, f"{ns}/joint_states", RELIABLE)
        self.joint_efforts = n.create_publisher(JointState, efforts_topic or f"{ns}/joint_efforts",
                                                RELIABLE)
        self.description = n.create_publisher(String, f"{ns}/robot_description", LATCHED)
        self.wrench, self.environment = Recorder(), Recorder()
        self.status, self.diagnostics = Recorder(), Recorder()
        self._subs = [
            n.create_subscription(WrenchStamped, f"{self.prefix}/wrench", self.wrench, RELIABLE),
            n.create_subscription(Float64MultiArray, f"{self.prefix}/environment",
                                  self.environment, RELIABLE),
            n.create_subscription(DiagnosticStatus, f"{self.prefix}/status", self.status,
                                  RELIABLE),
            n.create_subscription(DiagnosticArray, "/diagnostics", self.diagnostics, RELIABLE),
        ]
        self.reset = n.create_client(Trigger, f"{self.prefix}/reset")
        self.calibrate = n.create_client(Trigger, f"{self.prefix}/calibrate_bias")
        self.set_params = n.create_client(SetParameters, f"{self.prefix}/set_parameters")
        self.get_params = n.create_client(GetParameters, f"{self.prefix}/get_parameters")
        self.executor = SingleThreadedExecutor(context=self.context)
        self.executor.add_node(n)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._spin, daemon=True)
        self._thread.start()

    def _spin(self) -> None:
        while not self._stop.is_set() and self.context.ok():
            try:
                self.executor.spin_once(timeout_sec=0.05)
            except Exception:  # shutting down
                if self._stop.is_set():
                    return
                raise

    def close(self) -> None:
        self._stop.set()
        self._thread.join(5.0)
        self.executor.shutdown()
        self.node.destroy_node()
        self.context.try_shutdown()

    # --- waiting ---------------------------------------------------------------------------
    @staticmethod
    def wait_for(predicate: Callable[[], object], timeout: float, what: str,
                 node: NodeProcess | None = None):
        """Poll ``predicate`` until truthy; fail naming ``what`` (and the node's log)."""
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            value = predicate()
            if value:
                return value
            if node is not None and not node.alive():
                raise AssertionError(f"node exited while waiting for {what}:\n{node.log()}")
            time.sleep(0.02)
        log = f"\nnode log:\n{node.log()[-4000:]}" if node is not None else ""
        raise AssertionError(f"timed out after {timeout} s waiting for {what}{log}")

    def wait_connected(self, node: NodeProcess, timeout: float = 30.0,
                       efforts: bool = False) -> None:
        """Until the node and the peer see each other on every topic the test uses."""
        def ready():
            ok = (self.joint_states.get_subscription_count() >= 1
                  and all(s.get_publisher_count() >= 1 for s in self._subs[:3])
                  and len(self.status) > 0 and self.reset.service_is_ready()
                  and self.calibrate.service_is_ready() and self.set_params.service_is_ready())
            return ok and (not efforts or self.joint_efforts.get_subscription_count() >= 1)
        self.wait_for(ready, timeout, "discovery of the node", node)

    def latest_status(self) -> DiagnosticStatus | None:
        items = self.status.items
        return items[-1][1] if items else None

    def wait_status(self, predicate: Callable[[dict, DiagnosticStatus], bool], timeout: float,
                    what: str, node: NodeProcess | None = None) -> DiagnosticStatus:
        """Until a status arriving from now on satisfies ``predicate(key_values, status)``."""
        start = len(self.status)

        def found():
            for _, st in self.status.items[start:]:
                if predicate(values(st), st):
                    return st
            return None
        return self.wait_for(found, timeout, what, node)

    # --- services --------------------------------------------------------------------------
    def call(self, client, request, timeout: float = 10.0):
        future = client.call_async(request)
        self.wait_for(future.done, timeout, f"a reply from {client.srv_name}")
        return future.result()

    def set_parameter(self, name: str, value, type_: Parameter.Type | None = None):
        """Set one parameter through the node's set_parameters service; returns the result."""
        param = Parameter(name, value=value) if type_ is None else Parameter(name, type_, value)
        req = SetParameters.Request(parameters=[param.to_parameter_msg()])
        return self.call(self.set_params, req).results[0]

    def get_parameter(self, name: str):
        reply = self.call(self.get_params, GetParameters.Request(names=[name]))
        msg = ParameterMsg(name=name, value=reply.values[0])
        return Parameter.from_parameter_msg(msg)


def values(status: DiagnosticStatus) -> dict[str, str]:
    return {kv.key: kv.value for kv in status.values}


def level(status: DiagnosticStatus) -> int:
    return status.level[0] if isinstance(status.level, (bytes, bytearray)) else int(status.level)


# --- the synthetic scenario -------------------------------------------------------------------
EXTRA_JOINT = "marten_gripper_finger"  # not in the URDF: the node must ignore it


@dataclass(frozen=True)
class Step:
    """One joint state: stamp in integer ns and the arrays in message order."""

    stamp_ns: int
    names: tuple[str, ...]
    position: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray

    @property
    def time(self) -> float:
        """The stamp as the node reads it: sec + nanosec * 1e-9 (DESIGN.md section 7)."""
        sec, nsec = divmod(self.stamp_ns, 1_000_000_000)
        return sec + nsec * 1e-9

    def stamp(self) -> TimeMsg:
        sec, nsec = divmod(self.stamp_ns, 1_000_000_000)
        return TimeMsg(sec=sec, nanosec=nsec)

    def message(self) -> JointState:
        msg = JointState()
        msg.header.stamp = self.stamp()
        msg.name = list(self.names)
        msg.position = [float(x) for x in self.position]
        msg.velocity = [float(x) for x in self.velocity]
        msg.effort = [float(x) for x in self.effort]
        return msg

    def sample(self) -> Sample:
        return Sample(self.time, self.names, self.position, self.velocity, self.effort)


# invented object: mass kg, damping N·s/m, stiffness N/m, static force N (robot on object)
OBJECT = (1.5, 10.0, 200.0, 5.0)


def contact_scenario(urdf: str, duration: float, dt: float = 0.002, contact_at: float = 2.0,
                     start_ns: int = 100_000_000_000) -> list[Step]:
    """Marten (mobile) holding still, then pushing an invented spring-damper-mass object.

    Until ``contact_at`` s the robot is still and free; then its base moves along world x by
    x(t) = 0.02 (1 - cos(2 pi 0.7 s)) + 0.01 (1 - cos(2 pi 2.3 s)) m (s = time in contact) while
    the object resists along x with f = m x'' + d x' + k x + f0 (:data:`OBJECT`). Efforts are
    the exact inverse dynamics (Pinocchio's RNEA) plus J^T of the force on the object. Joint
    order is shuffled and an extra joint the URDF lacks is appended.
    """
    model = Pipeline(Settings(), urdf).model
    names = list(model.joint_names)
    pm = model.model
    pd = pm.createData()
    base = np.zeros(len(names))
    base[names.index("marten_shoulder_pitch")] = 0.5
    base[names.index("marten_elbow_pitch")] = 1.2
    base[names.index("marten_wrist_pitch")] = 0.6
    ix = names.index("marten_base_x")
    order = [names.index(n) for n in reversed(names)]  # message order: reversed model order
    step_ns = int(round(dt * 1e9))
    out = []
    for k in range(int(round(duration / dt))):
        t = k * dt
        q, v, a = base.copy(), np.zeros_like(base), np.zeros_like(base)
        if t >= contact_at:
            s = t - contact_at
            for amp, freq in ((0.02, 0.7), (0.01, 2.3)):
                w = 2 * np.pi * freq
                q[ix] += amp * (1 - np.cos(w * s))
                v[ix] += amp * w * np.sin(w * s)
                a[ix] += amp * w * w * np.cos(w * s)
        cfg = model.configuration_from_angles(q)
        tau = pin.rnea(pm, pd, cfg, v, a).copy()
        if t >= contact_at:
            m, d, k_, f0 = OBJECT
            f = m * a[ix] + d * v[ix] + k_ * (q[ix] - base[ix]) + f0
            tau += model.dynamics(cfg, v).jacobian[:3].T @ np.array([f, 0.0, 0.0])
        out.append(Step(start_ns + k * step_ns, tuple(names[i] for i in order) + (EXTRA_JOINT,),
                        np.append(q[order], 0.0), np.append(v[order], 0.0),
                        np.append(tau[order], 0.0)))
    return out


def still_scenario(urdf: str, count: int, dt: float = 0.002,
                   start_ns: int = 100_000_000_000) -> list[Step]:
    """Marten standing still in free space (efforts = gravity), in model joint order."""
    model = Pipeline(Settings(), urdf).model
    names = tuple(model.joint_names)
    q = np.zeros(len(names))
    q[names.index("marten_shoulder_pitch")] = 0.5
    q[names.index("marten_elbow_pitch")] = 1.2
    gravity = model.dynamics(model.configuration_from_angles(q), np.zeros(len(names))).gravity
    step_ns = int(round(dt * 1e9))
    return [Step(start_ns + k * step_ns, names, q.copy(), np.zeros(len(names)), gravity.copy())
            for k in range(count)]


def sample_of(msg: JointState) -> Sample:
    """The Sample a JointState stands for (stamp sec + nanosec * 1e-9, arrays as sent)."""
    t = msg.header.stamp.sec + msg.header.stamp.nanosec * 1e-9
    return Sample(t, tuple(msg.name), np.array(msg.position, dtype=float),
                  np.array(msg.velocity, dtype=float), np.array(msg.effort, dtype=float))


def publish_paced(publisher, messages, rate_hz: float) -> None:
    """Publish each message at about ``rate_hz`` (wall clock)."""
    period = 1.0 / rate_hz
    start = time.perf_counter()
    for i, msg in enumerate(messages):
        delay = start + i * period - time.perf_counter()
        if delay > 0:
            time.sleep(delay)
        publisher.publish(msg)
