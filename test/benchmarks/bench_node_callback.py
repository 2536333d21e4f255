"""The node's own cost per joint state, in one process, without DDS timing noise. Prints only.

An :class:`~interaction_estimator.ros.node.EstimatorNode` is built in this process (rclpy, its own
domain, discovery range LOCALHOST) with the 10-joint Marten URDF, and its joint-state callback
is called directly with the CDR bytes of JointState messages made by rclpy's serializer (what
the middleware hands over). A node whose subscription takes message objects is given
``deserialize_message(bytes)``, so its figure includes the conversion its executor would make.
Figures, in µs per message:

- callback: the whole callback, pipeline included;
- pipeline: ``Pipeline.process`` alone, on the same samples, in a fresh pipeline;
- pipeline (node's path): ``Pipeline.advance`` and ``last_outputs``, what the node calls per
  message (the Estimate is built only for a status);
- node: the callback with the pipeline replaced by a lookup of what it returned in a pipeline
  run, so this is everything the node does around the pipeline;
- then (for the current node) that cost taken apart: bytes -> Sample, the two per-message
  publications (encoded, published), and one status (NodeFigures, key-values, encoded,
  published), made at ``output.status_rate`` (once every 20 messages at 1 kHz and 50 Hz).

With ``--listen`` a separate process subscribes to the outputs (reliable), so publications go
to a matched reader as they do on a robot. With ``--source DIR`` the package is imported from
DIR/interaction_estimator (to compare versions under the same load, run them in turn).

Each figure is the minimum over ``--repeat`` passes (the machine is shared; the minimum is the
least disturbed pass), with the range over the passes.

Run: .venv/bin/python test/benchmarks/bench_node_callback.py [--messages 4000] [--repeat 5]
"""
from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

os.environ["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
if sys.argv[1:2] != ["--listener"]:  # the listener keeps the domain of the benchmark
    os.environ["ROS_DOMAIN_ID"] = str(150 + os.getpid() % 70)
os.environ.setdefault("RMW_IMPLEMENTATION", "rmw_fastrtps_cpp")
os.environ.pop("ROS_LOCALHOST_ONLY", None)

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "test"))
if "--source" in sys.argv[:-1]:
    sys.path.insert(0, sys.argv[sys.argv.index("--source") + 1])

import rclpy  # noqa: E402
import rclpy.executors  # noqa: E402
from rclpy.parameter import Parameter  # noqa: E402
from rclpy.qos import QoSProfile, ReliabilityPolicy  # noqa: E402
from rclpy.serialization import deserialize_message, serialize_message  # noqa: E402
from sensor_msgs.msg import JointState  # noqa: E402

from interaction_estimator.core.pipeline import Pipeline  # noqa: E402
from interaction_estimator.core.settings import NODE_NAME  # noqa: E402
from interaction_estimator.ros import messages as node_messages  # noqa: E402
from interaction_estimator.ros import node as node_module  # noqa: E402
from interaction_estimator.ros.messages import sample_from_joint_state  # noqa: E402
from interaction_estimator.sim import marten  # noqa: E402


def messages(n: int, rate: float) -> list[JointState]:
    """n joint states of Marten at rest, then pushing an object (the tests' scenario), stamped
    1/rate s apart, each through CDR and back."""
    from ros_harness import contact_scenario
    steps = contact_scenario(marten.mobile_urdf(), duration=n / rate, dt=1.0 / rate,
                             contact_at=min(1.5, 0.3 * n / rate))
    return [deserialize_message(serialize_message(s.message()), JointState) for s in steps]


def restamp(msgs: list[JointState], start_ns: int, rate: float) -> None:
    step = int(round(1e9 / rate))
    for i, m in enumerate(msgs):
        m.header.stamp.sec, m.header.stamp.nanosec = divmod(start_ns + i * step, 1_000_000_000)


def make_node(rate: float) -> node_module.EstimatorNode:
    return node_module.EstimatorNode(parameter_overrides=[
        Parameter("robot_description_file", value=str(marten.MOBILE_URDF)),
        Parameter("input.expected_rate", value=float(rate))])


class Replayed:
    """Stands in for a node's Pipeline: hands back, in order, what a real one returned for the
    same samples (``records``: (last_outputs, Estimate) per sample, None for a refused one);
    everything else is the real pipeline's."""

    def __init__(self, real: Pipeline, records: list):
        self._real, self._next, self._current = real, iter(records).__next__, None

    def advance(self, sample) -> bool:
        self._current = self._next()
        return self._current is not None

    def last_outputs(self) -> list[float]:
        return self._current[0]

    def estimate(self):
        return self._current[1]

    @property
    def observer_restarts(self) -> int:
        return self._current[1].observer_restarts

    def process(self, sample):   # a node of a version without advance()
        record = self._next()
        return None if record is None else record[1]

    def __getattr__(self, name: str):
        return getattr(self._real, name)


def per_message_us(fn, items) -> float:
    t0 = time.perf_counter()
    for x in items:
        fn(x)
    return (time.perf_counter() - t0) / len(items) * 1e6


def figure(values: list[float]) -> str:
    return f"{min(values):8.1f}  ({min(values):.1f} .. {max(values):.1f})"


def listener_main() -> int:
    """A separate process that subscribes to the node's three outputs (reliable, the bytes
    only, so its own cost stays small) until SIGINT; prints how many messages it received."""
    from diagnostic_msgs.msg import DiagnosticStatus
    from geometry_msgs.msg import WrenchStamped
    from std_msgs.msg import Float64MultiArray
    rclpy.init()
    node = rclpy.create_node("bench_listener")
    count = [0]

    def on_message(raw: bytes) -> None:
        count[0] += 1

    qos = QoSProfile(depth=100, reliability=ReliabilityPolicy.RELIABLE)
    for kind, topic in ((WrenchStamped, "wrench"), (Float64MultiArray, "environment"),
                        (DiagnosticStatus, "status")):
        node.create_subscription(kind, f"/interaction_estimator/{topic}", on_message, qos,
                                 raw=True)
    executor = node_module.make_executor()
    executor.add_node(node)
    try:
        while rclpy.ok():
            executor.spin_once(timeout_sec=0.1)
    except (KeyboardInterrupt, rclpy.executors.ExternalShutdownException):
        pass
    finally:
        print(f"  listener received {count[0]} messages", flush=True)
        node.destroy_node()
        rclpy.try_shutdown()
    return 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--messages", type=int, default=4000, help="messages per pass")
    parser.add_argument("--repeat", type=int, default=5, help="passes per figure")
    parser.add_argument("--rate", type=float, default=1000.0, help="stamp rate, Hz")
    parser.add_argument("--listen", action="store_true",
                        help="subscribe to the outputs from a separate process")
    parser.add_argument("--source", help="import interaction_estimator from this directory")
    args = parser.parse_args(argv)
    listener = None
    if args.listen:  # same domain (inherited), its own process
        command = [sys.executable, __file__, "--listener"]
        if args.source:
            command += ["--source", args.source]
        listener = subprocess.Popen(command)
    rclpy.init()
    # a node per pass: their start-up lines would only clutter the figures
    rclpy.logging.set_logger_level(NODE_NAME, rclpy.logging.LoggingSeverity.WARN)
    msgs = messages(args.messages, args.rate)
    node = make_node(args.rate)
    if listener is not None:  # let discovery match the publishers with the listener
        end = time.monotonic() + 10.0
        while time.monotonic() < end and node._wrench_pub.get_subscription_count() < 1:
            time.sleep(0.05)
    urdf = Path(marten.MOBILE_URDF).read_text()
    status_every = max(1, round(args.rate / node.settings["output.status_rate"])
                       if node.settings["output.status_rate"] > 0 else 1)
    takes_bytes = hasattr(node, "_on_joint_state_bytes")
    if takes_bytes:
        callback = node._on_joint_state_bytes
    else:
        def callback(raw: bytes) -> None:
            node._on_joint_state(deserialize_message(raw, JointState))
    results: dict[str, list[float]] = {k: [] for k in (
        "callback", "pipeline", "lean", "node", "read", "outputs", "status")}
    start_ns = 100_000_000_000
    for _rep in range(args.repeat):
        # whole callback (a fresh model each pass, so every pass sees the same sequence)
        node._load_model(urdf, "benchmark")
        start_ns += 10 * 1_000_000_000
        restamp(msgs, start_ns, args.rate)
        raws = [serialize_message(m) for m in msgs]
        results["callback"].append(per_message_us(callback, raws))

        # the pipeline alone on the same samples
        pipeline = Pipeline(node.settings, urdf)
        samples = [sample_from_joint_state(m, float("nan")) for m in msgs]
        t0 = time.perf_counter()
        for s in samples:
            pipeline.process(s)
        results["pipeline"].append((time.perf_counter() - t0) / len(samples) * 1e6)
        records = []
        pipeline = Pipeline(node.settings, urdf)
        if hasattr(pipeline, "advance"):
            t0 = time.perf_counter()
            for s in samples:
                records.append(pipeline.last_outputs() if pipeline.advance(s) else None)
            results["lean"].append((time.perf_counter() - t0) / len(samples) * 1e6)
            pipeline = Pipeline(node.settings, urdf)   # the Estimates, untimed
            records = [None if r is None else (r, pipeline.process(s))
                       for r, s in zip(records, samples)]
        else:
            records = [(None, pipeline.process(s)) for s in samples]
            records = [None if r[1] is None else r for r in records]

        # the callback around a pipeline that only hands back those results
        node._load_model(urdf, "benchmark")
        start_ns += 10 * 1_000_000_000
        restamp(msgs, start_ns, args.rate)
        raws = [serialize_message(m) for m in msgs]
        node.pipeline = Replayed(node.pipeline, records)
        results["node"].append(per_message_us(callback, raws))
        if not takes_bytes:
            continue

        # parts of the node's cost
        nm = node_messages
        reader = nm.JointStateReader()
        results["read"].append(per_message_us(
            lambda raw, nm=nm, reader=reader: nm.sample_from_parts(reader.read(raw),
                                                                   float("nan")), raws))
        encoder = nm.WrenchEncoder(node._frame_id())
        env, pub_w, pub_e = node._environment_encoder, node._wrench_pub, node._environment_pub

        def outputs(record, nm=nm, encoder=encoder, env=env, pub_w=pub_w, pub_e=pub_e):
            force, torque, values, stds = nm.output_numbers(record[0])
            pub_w.publish(encoder.encode(12, 34, force, torque))
            pub_e.publish(env.encode(values, stds))
        kept = [r for r in records if r is not None]
        results["outputs"].append(per_message_us(outputs, kept))
        results["status"].append(per_message_us(
            lambda r, nm=nm: node._publish(nm.status_fields(r[1], node._figures(r[1]),
                                                     node._hardware_id()),
                                    time.monotonic()), kept[::status_every]))
    rejects = {k: v for k, v in node._rejects().items() if v}
    print(f"bench_node_callback: Marten mobile (10 joints), {args.messages} messages per pass, "
          f"{args.repeat} passes, outputs {'subscribed' if listener else 'not subscribed'}"
          f"; package {Path(node_module.__file__).parent}; us per message, min (range)")
    print(f"  callback, pipeline included     {figure(results['callback'])}")
    print(f"  Pipeline.process alone          {figure(results['pipeline'])}")
    if results["lean"]:
        print(f"  Pipeline.advance + last_outputs {figure(results['lean'])}  (the node's path)")
    print(f"  node around a stub pipeline     {figure(results['node'])}")
    if takes_bytes:
        print(f"    bytes -> Sample               {figure(results['read'])}")
        print(f"    ~/wrench + ~/environment      {figure(results['outputs'])}")
        print(f"    one status (figures, key-values, encoded, published), per status "
              f"{figure(results['status'])}; one per {status_every} messages")
    if rejects:
        print(f"  rejects during the runs (should be none): {rejects}")
    node.destroy_node()
    rclpy.try_shutdown()
    if listener is not None:
        listener.send_signal(signal.SIGINT)
        try:
            listener.wait(5.0)
        except subprocess.TimeoutExpired:
            listener.kill()
            listener.wait(5.0)
    return 0


if __name__ == "__main__":
    if sys.argv[1:2] == ["--listener"]:
        sys.exit(listener_main())
    sys.exit(main())
