"""The node at 1 kHz over DDS beside a floor node that does no estimation. Prints, asserts nothing.

The 10-joint Marten (mobile) publishes joint states at --rate Hz for --duration s (after a warm-up)
to each subject in turn, in its own namespace:

- floor: this script's own node, the same executor loop and QoS, answering each JointState with
  an empty WrenchStamped on ``~/wrench`` (the cost of rclpy and DDS alone);
- estimator: ``python -m interaction_estimator.node`` with the Marten URDF.

Figures per subject: fraction of joint states answered by a wrench, latency from the input stamp
to the wrench's arrival here (p50, p99, max; both clocks are this machine's), and the CPU time of
the subject's process (from /proc/<pid>/stat) per second of wall time and per joint state
answered.

With ``--source DIR`` (repeatable) the nodes of those copies of the package
(DIR/interaction_estimator, each named after DIR) are measured instead of this checkout's, and
``--rounds N`` repeats every subject N times in turn (floor, then each node, then floor again,
...), so versions are compared under the same load; the rounds of each subject are then pooled
(all its latencies and CPU time as one measurement of ``N * duration`` s), and the targets are
checked on the pooled figures: a slow spell of the shared machine then falls on every subject
instead of on whichever one it happened to be measuring.

Run: .venv/bin/python test/benchmarks/bench_node.py --duration 20
"""
from __future__ import annotations

import argparse
import gc
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

# ROS 2 traffic stays on this machine, on a domain of this benchmark's own (before rclpy loads);
# the floor node, started by the benchmark, keeps the benchmark's domain.
os.environ["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
if sys.argv[1:2] != ["--floor"]:
    os.environ["ROS_DOMAIN_ID"] = str(150 + os.getpid() % 70)
os.environ.setdefault("RMW_IMPLEMENTATION", "rmw_fastrtps_cpp")
os.environ.pop("ROS_LOCALHOST_ONLY", None)

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "test"))

import numpy as np  # noqa: E402
import rclpy  # noqa: E402
import rclpy.executors  # noqa: E402
from diagnostic_msgs.msg import DiagnosticStatus  # noqa: E402
from geometry_msgs.msg import WrenchStamped  # noqa: E402
from rclpy.qos import (DurabilityPolicy, HistoryPolicy, QoSProfile,  # noqa: E402
                       ReliabilityPolicy)
from sensor_msgs.msg import JointState  # noqa: E402

INPUT_QOS = QoSProfile(depth=200, history=HistoryPolicy.KEEP_LAST,
                       reliability=ReliabilityPolicy.BEST_EFFORT,
                       durability=DurabilityPolicy.VOLATILE)  # the node's default input QoS
OUTPUT_QOS = QoSProfile(depth=100, history=HistoryPolicy.KEEP_LAST,
                        reliability=ReliabilityPolicy.RELIABLE,
                        durability=DurabilityPolicy.VOLATILE)  # the node's output QoS
GRACE_S = 3.0
WARMUP_S = 3.0


# --- the floor node (run as a subprocess: bench_node.py --floor --ros-args ...) ---------------
def floor_main(argv: list[str]) -> int:
    from rclpy.node import Node
    rclpy.init(args=["floor", *argv])
    node = Node("interaction_estimator")
    pub = node.create_publisher(WrenchStamped, "~/wrench", OUTPUT_QOS)

    def answer(msg: JointState) -> None:
        out = WrenchStamped()
        out.header.stamp = msg.header.stamp
        pub.publish(out)

    node.create_subscription(JointState, "joint_states", answer, INPUT_QOS)
    try:
        from rclpy.experimental import EventsExecutor
        executor = EventsExecutor()
    except ImportError:
        executor = rclpy.executors.SingleThreadedExecutor()
    executor.add_node(node)
    try:
        while rclpy.ok():
            executor.spin_once(timeout_sec=0.1)
    except (KeyboardInterrupt, rclpy.executors.ExternalShutdownException):
        pass
    finally:
        node.destroy_node()
        rclpy.try_shutdown()
    return 0


# --- the driver (this process) -----------------------------------------------------------------
def cpu_seconds(pid: int) -> float:
    """utime + stime of a process, s (fields 14 and 15 of /proc/<pid>/stat)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def joint_states_cycle(seconds: float, rate: float) -> list[JointState]:
    """One cycle of Marten moving and pushing an object (from the tests' scenario)."""
    from interaction_estimator.scenarios import marten
    from ros_harness import contact_scenario
    steps = contact_scenario(marten.mobile_urdf(), duration=seconds, dt=1.0 / rate,
                             contact_at=1.5)
    return [s.message() for s in steps]


class Driver:
    """Publishes joint states to one namespace and records the wrenches that come back."""

    def __init__(self, namespace: str, cycle: list[JointState]):
        self.context = rclpy.Context()
        rclpy.init(context=self.context)
        self.node = rclpy.create_node("bench_driver", context=self.context)
        self.pub = self.node.create_publisher(JointState, f"{namespace}/joint_states", INPUT_QOS)
        self.arrivals: list[tuple[int, int]] = []  # (stamp ns, arrival ns)
        self.sub = self.node.create_subscription(
            WrenchStamped, f"{namespace}/interaction_estimator/wrench", self._on_wrench,
            OUTPUT_QOS)
        # ~/status (estimator only) is read once, after the measured window: a subscription
        # during it would make this process deserialize 50 status messages a second and delay
        # its own wrench arrival stamps, a load the floor subject does not put on it
        self.status = None
        self._namespace = namespace
        self.cycle = cycle
        from rclpy.executors import SingleThreadedExecutor
        self.executor = SingleThreadedExecutor(context=self.context)
        self.executor.add_node(self.node)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._spin, daemon=True)
        self._thread.start()

    def _spin(self) -> None:
        while not self._stop.is_set():
            self.executor.spin_once(timeout_sec=0.05)

    def _on_wrench(self, msg: WrenchStamped) -> None:
        now = time.time_ns()
        self.arrivals.append((msg.header.stamp.sec * 1_000_000_000 + msg.header.stamp.nanosec,
                              now))

    def _on_status(self, msg: DiagnosticStatus) -> None:
        self.status = msg

    def read_status(self, timeout: float = 2.0) -> None:
        """Subscribe to ~/status and wait (up to ``timeout`` s) for one message."""
        self.node.create_subscription(DiagnosticStatus,
                                      f"{self._namespace}/interaction_estimator/status",
                                      self._on_status, OUTPUT_QOS)
        end = time.monotonic() + timeout
        while self.status is None and time.monotonic() < end:
            time.sleep(0.02)

    def wait_matched(self, proc: subprocess.Popen, timeout: float = 60.0) -> bool:
        end = time.monotonic() + timeout
        while time.monotonic() < end and proc.poll() is None:
            if self.pub.get_subscription_count() >= 1 and self.sub.get_publisher_count() >= 1:
                return True
            time.sleep(0.05)
        return False

    def run(self, seconds: float, rate: float) -> list[int]:
        """Publish for ``seconds`` at ``rate``; returns the stamps sent (ns)."""
        period = 1.0 / rate
        sent = []
        n = int(seconds * rate)
        start = time.perf_counter()
        for i in range(n):
            delay = start + i * period - time.perf_counter()
            if delay > 0:
                time.sleep(delay)
            msg = self.cycle[i % len(self.cycle)]
            ns = time.time_ns()
            msg.header.stamp.sec, msg.header.stamp.nanosec = divmod(ns, 1_000_000_000)
            self.pub.publish(msg)
            sent.append(ns)
        return sent

    def close(self) -> None:
        self._stop.set()
        self._thread.join(5.0)
        self.node.destroy_node()
        self.context.try_shutdown()


def stop(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.send_signal(signal.SIGINT)
        try:
            proc.wait(GRACE_S)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(GRACE_S)


def measure(name: str, command: list[str], namespace: str, cycle: list[JointState],
            seconds: float, rate: float, cwd: Path = REPO) -> dict[str, float]:
    log = open(f"/tmp/bench_node_{name}_{os.getpid()}.log", "wb")
    proc = subprocess.Popen(command, stdout=log, stderr=subprocess.STDOUT, cwd=cwd)
    driver = Driver(namespace, cycle)
    try:
        if not driver.wait_matched(proc):
            return {"error": 1.0}
        driver.run(WARMUP_S, rate)
        cpu0, wall0 = cpu_seconds(proc.pid), time.monotonic()
        sent = driver.run(seconds, rate)
        cpu1, wall1 = cpu_seconds(proc.pid), time.monotonic()
        load = os.getloadavg()[0]  # the machine's 1-minute load at the end of the window
        time.sleep(0.5)  # stragglers
        if name != "floor":
            driver.read_status()
    finally:
        driver.close()
        stop(proc)
        log.close()
    first, last = sent[0], sent[-1]
    window = {stamp: arrival for stamp, arrival in driver.arrivals if first <= stamp <= last}
    latency = np.array([window[s] - s for s in sent if s in window], dtype=float) * 1e-6
    answered = len(latency) / len(sent)
    out = {"sent": len(sent), "answered": answered, "load": load, "latency": latency,
           "cpu_seconds": cpu1 - cpu0, "wall_seconds": wall1 - wall0,
           "cpu": (cpu1 - cpu0) / (wall1 - wall0) * 100.0,
           "cpu_per_answer": (cpu1 - cpu0) / max(len(latency), 1) * 1e6}
    if driver.status is not None:  # the node's own figure: receive -> published, mean
        kv = {v.key: v.value for v in driver.status.values}
        if kv.get("latency[s]", "n/a") != "n/a":
            out["processing"] = float(kv["latency[s]"]) * 1e3
    if len(latency):
        out.update(p50=float(np.percentile(latency, 50)), p99=float(np.percentile(latency, 99)),
                   max=float(latency.max()))
    return out


def pool(runs: list[dict[str, float]]) -> dict[str, float]:
    """One subject's rounds as one measurement: latencies, messages and CPU time summed."""
    latency = np.concatenate([r["latency"] for r in runs])
    sent = sum(r["sent"] for r in runs)
    cpu = sum(r["cpu_seconds"] for r in runs)
    out = {"sent": sent, "answered": len(latency) / sent, "latency": latency,
           "load": max(r["load"] for r in runs),
           "cpu": cpu / sum(r["wall_seconds"] for r in runs) * 100.0,
           "cpu_per_answer": cpu / max(len(latency), 1) * 1e6}
    if len(latency):
        out.update(p50=float(np.percentile(latency, 50)), p99=float(np.percentile(latency, 99)),
                   max=float(latency.max()))
    return out


def estimator_command(rate: float, namespace: str) -> list[str]:
    from interaction_estimator.scenarios import marten
    return [sys.executable, "-m", "interaction_estimator.node", "--ros-args", "-r",
            f"__ns:={namespace}", "-p", f"robot_description_file:={marten.MOBILE_URDF}", "-p",
            "input.expected_rate:=" + str(float(rate))]


def print_row(name: str, r: dict[str, float]) -> None:
    if "error" in r:
        print(f"{name:<12} did not connect (see /tmp/bench_node_*_{os.getpid()}.log)",
              flush=True)
        return
    lat = (f"{r['p50']:8.2f} {r['p99']:8.2f} {r['max']:8.1f}" if "p50" in r
           else f"{'-':>8} {'-':>8} {'-':>8}")
    proc = f"{r['processing']:8.3f}" if "processing" in r else f"{'-':>8}"
    print(f"{name:<12} {r['sent']:>7d} {r['answered'] * 100:8.2f}% {lat} {r['cpu']:6.1f} "
          f"{r['cpu_per_answer']:7.0f} {proc} {r['load']:5.2f}", flush=True)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--duration", type=float, default=60.0,
                        help="measured seconds per subject (default 60)")
    parser.add_argument("--rate", type=float, default=1000.0,
                        help="joint-state rate, Hz (default 1000)")
    parser.add_argument("--source", action="append", default=[], metavar="DIR",
                        help="measure the node of the package in DIR/interaction_estimator "
                             "instead of this checkout's (repeatable; named after DIR)")
    parser.add_argument("--rounds", type=int, default=1,
                        help="measure every subject this many times, interleaved (default 1)")
    args = parser.parse_args(argv)
    cycle = joint_states_cycle(4.0, args.rate)
    # name -> (command, namespace, working directory: python -m imports the package from it)
    subjects = {
        "floor": ([sys.executable, __file__, "--floor", "--ros-args", "-r",
                   "__ns:=/bench_floor"], "/bench_floor", REPO),
    }
    if not args.source:
        subjects["estimator"] = (estimator_command(args.rate, "/bench_estimator"),
                                 "/bench_estimator", REPO)
    for i, source in enumerate(args.source):
        path = Path(source).resolve()
        name = path.name[:12]
        namespace = f"/bench_source_{i}"
        subjects[name] = (estimator_command(args.rate, namespace), namespace, path)
    print(f"bench_node: Marten mobile (10 joints), {args.rate:.0f} Hz, {args.duration:.0f} s "
          f"measured per subject after {WARMUP_S:.0f} s warm-up; {os.cpu_count()} cores; "
          f"domain {os.environ['ROS_DOMAIN_ID']}, discovery range LOCALHOST", flush=True)
    print(f"{'subject':<12} {'sent':>7} {'answered':>9} {'p50 ms':>8} {'p99 ms':>8} "
          f"{'max ms':>8} {'CPU %':>6} {'CPU us':>7} {'proc ms':>8} {'load':>5}", flush=True)
    results: dict[str, list[dict[str, float]]] = {name: [] for name in subjects}
    # this process's own set-up objects kept out of the garbage collector's full passes (as the
    # node does with its own): a full pass over them pauses the driver for tens of ms
    gc.collect()
    gc.freeze()
    for _ in range(args.rounds):
        for name, (command, namespace, cwd) in subjects.items():
            r = measure(name, command, namespace, cycle, args.duration, args.rate, cwd)
            results[name].append(r)
            print_row(name, r)
    print("CPU %: CPU time of the subject's process per wall second (100 = one core); CPU us: "
          "that CPU time per joint state answered (comparable when some are lost); proc ms: "
          "the node's own processing time per message (its status latency[s], running mean); "
          "load: the machine's 1-minute load average at the end of the window (other processes "
          "count).")
    if args.rounds > 1:   # each subject's rounds pooled: its whole measured time at once
        print(f"pooled over the {args.rounds} rounds ({args.rounds * args.duration:.0f} s per "
              "subject, interleaved):")
        for name, runs in results.items():
            runs = [r for r in runs if "latency" in r]
            if runs:
                results[name] = [pool(runs)]
                print_row(name, results[name][0])
    for name in subjects:
        if name == "floor":
            continue
        for fl, es in zip(results["floor"], results[name]):
            if "p50" in fl and "p50" in es:
                print(f"{name} vs floor: answered {es['answered'] * 100:.2f} % (target >= 99.9 "
                      f"%), p50 +{es['p50'] - fl['p50']:.2f} ms (target <= 0.3 ms), p99 "
                      f"{es['p99'] / fl['p99']:.2f}x (target <= 1.5x), CPU {es['cpu']:.1f} % "
                      "of a core (target <= 50 %)")
    return 0


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--floor":
        sys.exit(floor_main(sys.argv[2:]))
    sys.exit(main())
