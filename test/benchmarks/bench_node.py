"""The node at 1 kHz over DDS beside a floor node that does no estimation. Prints, asserts nothing.

The 10-joint Marten (mobile) publishes joint states at --rate Hz for --duration s (after a warm-up)
to each subject in turn, in its own namespace:

- floor: this script's own node, the same executor loop and QoS, answering each JointState with
  an empty WrenchStamped on ``~/wrench`` (the cost of rclpy and DDS alone);
- estimator: ``python -m interaction_estimator.ros.node`` with the Marten URDF.

Figures per subject: fraction of joint states answered by a wrench, latency from the input stamp
to the wrench's reception by this process's middleware (p50, p99, max; both clocks are this
machine's system clock; see :func:`_recorder`), and the CPU time of
the subject's process (from /proc/<pid>/stat) per second of wall time and per joint state
answered.

The subjects run side by side: all are started and warmed up first, then the driver feeds them
one after the other in short turns (``--turn`` s measured after SETTLE_S s unmeasured; the
others idle meanwhile), until each has ``--duration`` s measured. A slow spell of the shared
machine (other processes, or the hypervisor taking CPU time: the steal column) then falls on
every subject alike instead of on whichever one it happened to be measuring; measured here with
20 s rounds and a fresh process per round, the pooled p99 ratio of the same code moved from
0.7x to 1.8x between runs. Each subject's turns are pooled (all its latencies and CPU time as
one measurement) and the targets checked on the pooled figures; the median and quartiles of the
turn-by-turn p99 ratios (each turn of a node against the floor's turn just before it) show the
spread.

With ``--source DIR`` (repeatable) the nodes of those copies of the package
(DIR/interaction_estimator, each named after DIR) are measured instead of this checkout's.

Run: .venv/bin/python test/benchmarks/bench_node.py  (60 s per subject; --duration 10: a look)
"""
from __future__ import annotations

import argparse
import gc
import math
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
from rclpy.qos import DurabilityPolicy, HistoryPolicy, QoSProfile, ReliabilityPolicy  # noqa: E402
from sensor_msgs.msg import JointState  # noqa: E402

INPUT_QOS = QoSProfile(depth=200, history=HistoryPolicy.KEEP_LAST,
                       reliability=ReliabilityPolicy.BEST_EFFORT,
                       durability=DurabilityPolicy.VOLATILE)  # the node's default input QoS
OUTPUT_QOS = QoSProfile(depth=100, history=HistoryPolicy.KEEP_LAST,
                        reliability=ReliabilityPolicy.RELIABLE,
                        durability=DurabilityPolicy.VOLATILE)  # the node's output QoS
GRACE_S = 3.0
WARMUP_S = 3.0
SETTLE_S = 0.5   # s fed unmeasured at the start of each turn (the subject idled meanwhile)


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
    from ros_harness import contact_scenario

    from interaction_estimator.sim import marten
    steps = contact_scenario(marten.mobile_urdf(), duration=seconds, dt=1.0 / rate,
                             contact_at=1.5)
    return [s.message() for s in steps]


def _recorder(out: list[tuple[int, int]]):
    """A wrench callback appending (stamp, arrival) to ``out``, ns. The arrival is the time the
    middleware received the message (rclpy's MessageInfo received_timestamp, system clock, as
    the stamp), not the time this process's executor got to it: the driver's publishing thread
    and its executor thread share one interpreter lock, and its waits are the driver's own."""
    def record(msg: WrenchStamped, info) -> None:
        out.append((msg.header.stamp.sec * 1_000_000_000 + msg.header.stamp.nanosec,
                    info["received_timestamp"]))
    return record


class Driver:
    """Publishes joint states to the subjects, one namespace each, and records the wrenches
    that come back (one context, one executor thread for all of them)."""

    def __init__(self, namespaces: list[str], cycle: list[JointState]):
        self.context = rclpy.Context()
        rclpy.init(context=self.context)
        self.node = rclpy.create_node("bench_driver", context=self.context)
        self.pubs, self.subs, self.arrivals = {}, {}, {}
        for ns in namespaces:
            self.pubs[ns] = self.node.create_publisher(JointState, f"{ns}/joint_states",
                                                       INPUT_QOS)
            arrivals: list[tuple[int, int]] = []   # (stamp ns, arrival ns)
            self.arrivals[ns] = arrivals
            self.subs[ns] = self.node.create_subscription(
                WrenchStamped, f"{ns}/interaction_estimator/wrench", _recorder(arrivals),
                OUTPUT_QOS)
        # ~/status (estimator only) is read once, after the measured turns: a subscription
        # during them would make this process deserialize 50 status messages a second and delay
        # its own wrench arrival stamps, a load the floor subject does not put on it
        self.status: dict[str, DiagnosticStatus] = {}
        self.cycle = cycle
        self._next: dict[str, int] = {}   # per namespace, the index in cycle of its next message
        from rclpy.executors import SingleThreadedExecutor
        self.executor = SingleThreadedExecutor(context=self.context)
        self.executor.add_node(self.node)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._spin, daemon=True)
        self._thread.start()

    def _spin(self) -> None:
        while not self._stop.is_set():
            self.executor.spin_once(timeout_sec=0.05)

    def read_status(self, ns: str, timeout: float = 2.0) -> DiagnosticStatus | None:
        """Subscribe to a subject's ~/status and wait (up to ``timeout`` s) for one message."""
        self.node.create_subscription(
            DiagnosticStatus, f"{ns}/interaction_estimator/status",
            lambda msg: self.status.__setitem__(ns, msg), OUTPUT_QOS)
        end = time.monotonic() + timeout
        while ns not in self.status and time.monotonic() < end:
            time.sleep(0.02)
        return self.status.get(ns)

    def wait_matched(self, ns: str, proc: subprocess.Popen, timeout: float = 60.0) -> bool:
        end = time.monotonic() + timeout
        while time.monotonic() < end and proc.poll() is None:
            if (self.pubs[ns].get_subscription_count() >= 1
                    and self.subs[ns].get_publisher_count() >= 1):
                return True
            time.sleep(0.05)
        return False

    def run(self, ns: str, seconds: float, rate: float) -> list[int]:
        """Publish to ``ns`` for ``seconds`` at ``rate``, going on in the cycle where the last
        turn of ``ns`` stopped; returns the stamps sent (ns)."""
        pub, cycle = self.pubs[ns], self.cycle
        period = 1.0 / rate
        sent = []
        n = int(seconds * rate)
        first = self._next.get(ns, 0)
        self._next[ns] = first + n
        start = time.perf_counter()
        for i in range(n):
            delay = start + i * period - time.perf_counter()
            if delay > 0:
                time.sleep(delay)
            msg = cycle[(first + i) % len(cycle)]
            ns_now = time.time_ns()
            msg.header.stamp.sec, msg.header.stamp.nanosec = divmod(ns_now, 1_000_000_000)
            pub.publish(msg)
            sent.append(ns_now)
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


def steal_ticks() -> int:
    """Time the hypervisor gave this machine's virtual CPUs to others, all CPUs, clock ticks
    (the 8th value of the cpu line of /proc/stat; 0 where not reported)."""
    values = Path("/proc/stat").read_text().split("\n", 1)[0].split()[1:]
    return int(values[7]) if len(values) > 7 else 0


def latencies(sent: list[int], arrivals: list[tuple[int, int]]) -> np.ndarray:
    """Arrival minus stamp, ms, of the stamps in ``sent`` that came back."""
    first, last = sent[0], sent[-1]
    window = {stamp: arrival for stamp, arrival in arrivals if first <= stamp <= last}
    return np.array([window[s] - s for s in sent if s in window], dtype=float) * 1e-6


def summary(turns: list[dict]) -> dict[str, float]:
    """One subject's measured turns as one measurement: latencies, messages, CPU time and
    steal time summed."""
    latency = np.concatenate([s["latency"] for s in turns])
    sent = sum(s["sent"] for s in turns)
    cpu = sum(s["cpu_seconds"] for s in turns)
    wall = sum(s["wall_seconds"] for s in turns)
    out = {"sent": sent, "answered": len(latency) / sent, "latency": latency,
           "load": max(s["load"] for s in turns), "cpu": cpu / wall * 100.0,
           "cpu_per_answer": cpu / max(len(latency), 1) * 1e6,
           "steal": sum(s["steal_ticks"] for s in turns) / os.sysconf("SC_CLK_TCK")
           / (wall * (os.cpu_count() or 1)) * 100.0,
           "turn_p99": [float(np.percentile(s["latency"], 99)) if len(s["latency"])
                        else math.nan for s in turns]}
    if len(latency):
        out.update(p50=float(np.percentile(latency, 50)), p99=float(np.percentile(latency, 99)),
                   max=float(latency.max()))
    return out


def measure_all(subjects: dict, cycle: list[JointState], seconds: float, turn: float,
                rate: float) -> dict[str, dict]:
    """Every subject started once and warmed up, then the subjects fed one after the other,
    each turn SETTLE_S s unmeasured then ``turn`` s measured, until each has ``seconds`` s
    measured."""
    logs, procs = {}, {}
    driver = Driver([ns for _, ns, _ in subjects.values()], cycle)
    turns: dict[str, list[dict]] = {name: [] for name in subjects}
    try:
        for name, (command, _ns, cwd) in subjects.items():
            logs[name] = open(f"/tmp/bench_node_{name}_{os.getpid()}.log", "wb")
            procs[name] = subprocess.Popen(command, stdout=logs[name],
                                           stderr=subprocess.STDOUT, cwd=cwd)
        for name, (_, ns, _) in subjects.items():
            if not driver.wait_matched(ns, procs[name]):
                return {name: {"error": 1.0}}
            driver.run(ns, WARMUP_S, rate)
        for _ in range(max(1, math.ceil(seconds / turn - 1e-9))):
            for name, (_, ns, _) in subjects.items():
                pid = procs[name].pid
                driver.run(ns, SETTLE_S, rate)
                cpu0, wall0, steal0 = cpu_seconds(pid), time.monotonic(), steal_ticks()
                sent = driver.run(ns, turn, rate)
                cpu1, wall1, steal1 = cpu_seconds(pid), time.monotonic(), steal_ticks()
                turns[name].append({"sent": sent, "cpu_seconds": cpu1 - cpu0,
                                    "wall_seconds": wall1 - wall0,
                                    "steal_ticks": steal1 - steal0,
                                    "load": os.getloadavg()[0]})
        time.sleep(0.5)  # stragglers
        status = {name: driver.read_status(ns) for name, (_, ns, _) in subjects.items()
                  if name != "floor"}
    finally:
        driver.close()
        for name, proc in procs.items():
            stop(proc)
            logs[name].close()
    results = {}
    for name, (_, ns, _) in subjects.items():
        for s in turns[name]:
            stamps = s["sent"]
            s["sent"], s["latency"] = len(stamps), latencies(stamps, driver.arrivals[ns])
        results[name] = summary(turns[name])
        st = status.get(name)
        if st is not None:  # the node's own figure: receive -> published, mean
            kv = {v.key: v.value for v in st.values}
            if kv.get("latency[s]", "n/a") != "n/a":
                results[name]["processing"] = float(kv["latency[s]"]) * 1e3
    return results


def estimator_command(rate: float, namespace: str) -> list[str]:
    from interaction_estimator.sim import marten
    return [sys.executable, "-m", "interaction_estimator.ros.node", "--ros-args", "-r",
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
          f"{r['cpu_per_answer']:7.0f} {proc} {r['steal']:6.1f} {r['load']:5.2f}", flush=True)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--duration", type=float, default=60.0,
                        help="measured seconds per subject (default 60)")
    parser.add_argument("--turn", type=float, default=2.0,
                        help="measured seconds per turn of a subject (default 2)")
    parser.add_argument("--rate", type=float, default=1000.0,
                        help="joint-state rate, Hz (default 1000)")
    parser.add_argument("--source", action="append", default=[], metavar="DIR",
                        help="measure the node of the package in DIR/interaction_estimator "
                             "instead of this checkout's (repeatable; named after DIR)")
    args = parser.parse_args(argv)
    if not (args.duration > 0 and args.turn * args.rate >= 1 and args.rate > 0):
        parser.error(f"--duration ({args.duration}) and --rate ({args.rate}) must be positive, "
                     f"and --turn ({args.turn}) s long enough for one joint state at that rate")
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
    turns = max(1, math.ceil(args.duration / args.turn - 1e-9))
    print(f"bench_node: Marten mobile (10 joints), {args.rate:.0f} Hz; each subject warmed up "
          f"{WARMUP_S:.0f} s, then the subjects fed in turn, {turns} turns of {SETTLE_S:g} s "
          f"unmeasured + {args.turn:g} s measured ({turns * args.turn:g} s measured per "
          f"subject); {os.cpu_count()} cores; domain {os.environ['ROS_DOMAIN_ID']}, discovery "
          "range LOCALHOST", flush=True)
    # this process's own set-up objects kept out of the garbage collector's full passes (as the
    # node does with its own): a full pass over them pauses the driver for tens of ms
    gc.collect()
    gc.freeze()
    results = measure_all(subjects, cycle, args.duration, args.turn, args.rate)
    print(f"{'subject':<12} {'sent':>7} {'answered':>9} {'p50 ms':>8} {'p99 ms':>8} "
          f"{'max ms':>8} {'CPU %':>6} {'CPU us':>7} {'proc ms':>8} {'steal%':>6} {'load':>5}")
    for name, r in results.items():
        print_row(name, r)
    print("Latency: joint-state stamp to the wrench's reception by this process's "
          "middleware, all turns of the subject together. CPU %: CPU time of the subject's "
          "process per wall second (100 = one core); CPU us: that CPU time per joint state "
          "answered; proc ms: the node's "
          "own processing time per message (its status latency[s], running mean); steal%: "
          "time the hypervisor took from this machine's CPUs during the subject's turns; load: "
          "the machine's largest 1-minute load average at the end of a turn.")
    floor = results.get("floor", {})
    for name, es in results.items():
        if name == "floor" or "p50" not in es or "p50" not in floor:
            continue
        ratios = np.array(es["turn_p99"]) / np.array(floor["turn_p99"])
        q1, med, q3 = np.nanpercentile(ratios, [25, 50, 75])
        print(f"{name} vs floor: answered {es['answered'] * 100:.2f} % (target >= 99.9 %), "
              f"p50 {es['p50'] - floor['p50']:+.2f} ms (target <= +0.3 ms), p99 "
              f"{es['p99'] / floor['p99']:.2f}x (target <= 1.5x), CPU {es['cpu']:.1f} % of a "
              f"core (target <= 50 %); turn by turn, p99 over the floor's in the turn next to "
              f"it: median {med:.2f}x (quartiles {q1:.2f}x-{q3:.2f}x, {len(ratios)} turns)")
    return 0


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--floor":
        sys.exit(floor_main(sys.argv[2:]))
    sys.exit(main())
