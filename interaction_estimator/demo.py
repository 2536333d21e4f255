"""The demo: Marten opens our storeroom door; the real node estimates it over DDS.

``python -m interaction_estimator.demo --out demo_out [--scenario NAME]`` (``make demo``, or
``make demo SCENARIO=cabinet_door``):

1. simulates the ``door`` scenario (or another built-in scenario with an object: the
   ``cabinet_door`` with the revolute model, the ``tool_cart_drawer`` with the prismatic model,
   the ``soft_fixture`` with the cartesian model) and writes it as a bag (``OUT/<name>_bag``);
2. starts the node (``python -m interaction_estimator.ros.node``) as a child process with
   ``OUT/params.yaml``: ``config/marten_demo.yaml`` when that file exists (else the defaults),
   with the scenario's recommended settings on top (its manipulation direction: the door's is
   estimated along the arc);
3. publishes the URDF on ``robot_description`` (transient local) and plays the bag's joint
   states into the node, at the recorded rate, as serialized messages (as a bag player does);
4. records what the node publishes (``~/wrench``, ``~/environment``, ``~/status``);
5. writes ``OUT/node/`` (estimates.csv, summary.json, report.html) from those recordings and
   ``OUT/replay/`` from an offline replay of the same bag, and prints a short table: true
   against estimated parameters, force RMSE and time to convergence, node beside replay.

ROS 2 traffic stays on this machine: the demo sets ``ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST``
and a ``ROS_DOMAIN_ID`` of its own (never the caller's, which may be a real robot's) before
rclpy is loaded, and passes both to the node. OUT is built under a temporary name and renamed
when complete.

:class:`NodeSession` (node process + player + recorder) is also what the tests use to check that
node and replay agree.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import signal
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

DEMO_SCENARIO = "door"
DEMO_PARAMS = Path(__file__).resolve().parent.parent / "config" / "marten_demo.yaml"
NODE_NAME = "interaction_estimator"
PLAYER_NAME = "interaction_estimator_demo_player"
_DOMAIN_BASE, _DOMAIN_SPAN = 120, 100  # demo domains: 120..219 (valid Fast DDS ids: 0..232)


def isolate_ros(env: dict[str, str] | None = None, domain: int | None = None) -> dict[str, str]:
    """Keep ROS 2 on this machine: LOCALHOST discovery and a domain id of our own.

    Sets the variables in ``env`` (default: this process's environment, before rclpy is
    imported) and returns them. The domain is derived from the process id, chosen to differ
    from any domain the caller had set.
    """
    env = os.environ if env is None else env
    if domain is None:
        inherited = env.get("ROS_DOMAIN_ID")
        domain = _DOMAIN_BASE + os.getpid() % _DOMAIN_SPAN
        if inherited == str(domain):
            domain = _DOMAIN_BASE + (domain - _DOMAIN_BASE + 1) % _DOMAIN_SPAN
    env["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
    env["ROS_DOMAIN_ID"] = str(domain)
    env.pop("ROS_LOCALHOST_ONLY", None)
    env.setdefault("RMW_IMPLEMENTATION", "rmw_fastrtps_cpp")
    return {k: env[k] for k in ("ROS_AUTOMATIC_DISCOVERY_RANGE", "ROS_DOMAIN_ID",
                                "RMW_IMPLEMENTATION")}


# --------------------------------------------------------------------------------------------
# the node, a player and a recorder


@dataclass
class NodeRecording:
    """What the node published, in arrival order.

    wrench: one row per message [sec, nanosec, fx, fy, fz, tx, ty, tz] (N, N·m).
    environment: one row per message, 2 m values (the m parameters, then their std: 8 for the
    models of four parameters on ~/environment, 42 for the cartesian model on
    ~/environment_cartesian).
    mechanism: one row per ~/mechanism message (revolute, prismatic models).
    status: (index of the next wrench row at arrival, level, message, key-values).
    """

    wrench: list[tuple[float, ...]] = field(default_factory=list)
    environment: list[tuple[float, ...]] = field(default_factory=list)
    mechanism: list[tuple[float, ...]] = field(default_factory=list)
    status: list[tuple[int, int, str, dict[str, str]]] = field(default_factory=list)
    frame_ids: set[str] = field(default_factory=set)


class NodeError(RuntimeError):
    """The node did not start, stopped early or did not answer in time (its log is attached)."""


class NodeSession:
    """The node as a child process, plus an rclpy player/recorder in this process.

    ``NodeSession(params_file)``; ``start()``; ``publish_description(urdf)``; ``wait_ready()``;
    ``play(raw_joint_states)``; ``drain()``; ``close()`` (or use as a context manager). The
    environment must already be isolated (:func:`isolate_ros`, or the tests' conftest).
    """

    def __init__(self, params_file: Path | None, log_path: Path | None = None,
                 reliable: bool = True, model_name: str = "along_direction"):
        self.params_file = params_file
        self.model_name = model_name   # the node's environment.model (which topics to record)
        self.log_path = log_path
        self.reliable = reliable
        self.recording = NodeRecording()
        self.sent = 0
        self._proc: subprocess.Popen | None = None
        self._log = None
        self._stop = threading.Event()
        self._spinner: threading.Thread | None = None
        self._lock = threading.Lock()

    # --- life cycle --------------------------------------------------------------------
    def start(self) -> None:
        for var in ("ROS_AUTOMATIC_DISCOVERY_RANGE", "ROS_DOMAIN_ID"):
            if var not in os.environ:
                raise NodeError(f"{var} is not set: call isolate_ros() first so that ROS 2 "
                                "traffic stays on this machine")
        cmd = [sys.executable, "-m", "interaction_estimator.ros.node"]
        if self.params_file is not None:
            cmd += ["--ros-args", "--params-file", str(self.params_file)]
        self._log = (open(self.log_path, "w", encoding="utf-8") if self.log_path
                     else tempfile.TemporaryFile("w+", encoding="utf-8"))
        self._proc = subprocess.Popen(cmd, stdout=self._log, stderr=subprocess.STDOUT,
                                      env=dict(os.environ), start_new_session=True)
        self._start_ros()

    def _start_ros(self) -> None:
        import rclpy
        from diagnostic_msgs.msg import DiagnosticStatus
        from geometry_msgs.msg import WrenchStamped
        from rclpy.qos import DurabilityPolicy, HistoryPolicy, QoSProfile, ReliabilityPolicy
        from sensor_msgs.msg import JointState
        from std_msgs.msg import Float64MultiArray, String

        self._context = rclpy.Context()
        rclpy.init(context=self._context)
        self._node = rclpy.create_node(PLAYER_NAME, context=self._context)
        rel = ReliabilityPolicy.RELIABLE if self.reliable else ReliabilityPolicy.BEST_EFFORT
        stream = QoSProfile(depth=1000, history=HistoryPolicy.KEEP_LAST, reliability=rel,
                            durability=DurabilityPolicy.VOLATILE)
        latched = QoSProfile(depth=1, history=HistoryPolicy.KEEP_LAST,
                             reliability=ReliabilityPolicy.RELIABLE,
                             durability=DurabilityPolicy.TRANSIENT_LOCAL)
        outputs = QoSProfile(depth=1000, history=HistoryPolicy.KEEP_LAST,
                             reliability=ReliabilityPolicy.RELIABLE,
                             durability=DurabilityPolicy.VOLATILE)
        self._states_pub = self._node.create_publisher(JointState, "joint_states", stream)
        self._description_pub = self._node.create_publisher(String, "robot_description",
                                                            latched)
        self._subs = [
            self._node.create_subscription(WrenchStamped, f"/{NODE_NAME}/wrench",
                                           self._on_wrench, outputs),
            self._node.create_subscription(
                Float64MultiArray, f"/{NODE_NAME}/environment_cartesian"
                if self.model_name == "cartesian" else f"/{NODE_NAME}/environment",
                self._on_environment, outputs),
            self._node.create_subscription(DiagnosticStatus, f"/{NODE_NAME}/status",
                                           self._on_status, outputs),
        ]
        if self.model_name in ("revolute", "prismatic"):
            self._subs.append(self._node.create_subscription(
                Float64MultiArray, f"/{NODE_NAME}/mechanism", self._on_mechanism, outputs))
        from rclpy.executors import SingleThreadedExecutor
        self._executor = SingleThreadedExecutor(context=self._context)
        self._executor.add_node(self._node)
        self._spinner = threading.Thread(target=self._spin, daemon=True)
        self._spinner.start()

    def _spin(self) -> None:
        while not self._stop.is_set():
            try:
                self._executor.spin_once(timeout_sec=0.05)
            except Exception:  # shutting down
                if self._stop.is_set():
                    return
                raise

    def close(self) -> str:
        """Stop the node (SIGINT, then SIGKILL after a grace period) and rclpy; return the
        node's log text."""
        self._stop.set()
        if self._spinner is not None:
            self._spinner.join(timeout=2.0)
        if getattr(self, "_context", None) is not None:
            try:
                self._executor.shutdown(timeout_sec=1.0)
                self._node.destroy_node()
            finally:
                import rclpy
                rclpy.try_shutdown(context=self._context)
                self._context = None
        proc = self._proc
        if proc is not None and proc.poll() is None:
            try:
                os.killpg(proc.pid, signal.SIGINT)
                proc.wait(timeout=5.0)
            except (subprocess.TimeoutExpired, ProcessLookupError):
                try:
                    os.killpg(proc.pid, signal.SIGKILL)
                except ProcessLookupError:
                    pass
                proc.wait(timeout=5.0)
        return self.node_log()

    def node_log(self) -> str:
        if self._log is None:
            return ""
        self._log.flush()
        try:
            if self.log_path:
                return Path(self.log_path).read_text(encoding="utf-8")
            self._log.seek(0)
            return self._log.read()
        except (OSError, ValueError):
            return ""

    def __enter__(self) -> NodeSession:
        self.start()
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    # --- recording ----------------------------------------------------------------------
    def _on_wrench(self, msg) -> None:
        f, t = msg.wrench.force, msg.wrench.torque
        with self._lock:
            self.recording.wrench.append((msg.header.stamp.sec, msg.header.stamp.nanosec,
                                          f.x, f.y, f.z, t.x, t.y, t.z))
            self.recording.frame_ids.add(msg.header.frame_id)

    def _on_environment(self, msg) -> None:
        with self._lock:
            self.recording.environment.append(tuple(msg.data))

    def _on_mechanism(self, msg) -> None:
        with self._lock:
            self.recording.mechanism.append(tuple(msg.data))

    def _on_status(self, msg) -> None:
        values = {kv.key: kv.value for kv in msg.values}
        with self._lock:
            self.recording.status.append((len(self.recording.wrench), msg.level[0]
                                          if isinstance(msg.level, bytes) else int(msg.level),
                                          msg.message, values))

    def last_state(self) -> str:
        with self._lock:
            return self.recording.status[-1][3].get("state", "") if self.recording.status \
                else ""

    # --- playing ------------------------------------------------------------------------
    def _check_alive(self, what: str) -> None:
        if self._proc is not None and self._proc.poll() is not None:
            raise NodeError(f"the node exited with code {self._proc.returncode} while {what}; "
                            f"its output:\n{self.node_log()[-3000:]}")

    def publish_description(self, urdf: str) -> None:
        from std_msgs.msg import String
        self._description_pub.publish(String(data=urdf))

    def wait_ready(self, timeout: float = 60.0) -> None:
        """Until the node has a model (status 'waiting_for_input') and every topic is
        matched both ways."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            self._check_alive("starting")
            ready = (self._states_pub.get_subscription_count() > 0
                     and all(s.get_publisher_count() > 0 for s in self._subs)
                     and self.last_state() == "waiting_for_input")
            if ready:
                time.sleep(0.3)  # let the late-joining matches settle
                return
            time.sleep(0.05)
        raise NodeError(f"the node was not ready within {timeout:g} s (last state "
                        f"{self.last_state()!r}); its output:\n{self.node_log()[-3000:]}")

    def play(self, messages: Sequence[tuple[int, bytes]], speed: float | None = 1.0,
             window: int = 200) -> None:
        """Publish serialized JointStates [(log time ns, CDR bytes)].

        speed: 1.0 plays at the recorded rate; None as fast as the node answers. In both
        cases at most ``window`` messages are in flight (sent, not yet answered), so no queue
        overflows.
        """
        if not messages:
            return
        t0_bag = messages[0][0]
        t0 = time.perf_counter()
        stalled_since = None
        for _k, (ns, raw) in enumerate(messages):
            if speed is not None:
                due = t0 + (ns - t0_bag) * 1e-9 / speed
                delay = due - time.perf_counter()
                if delay > 0:
                    time.sleep(delay)
            while self.sent - len(self.recording.wrench) >= window:
                self._check_alive("playing")
                now = time.perf_counter()
                stalled_since = stalled_since or now
                if now - stalled_since > 2.0:  # rejected samples are never answered
                    break
                time.sleep(0.0005)
            stalled_since = None
            self._states_pub.publish(raw)
            self.sent += 1

    def drain(self, quiet: float = 1.0, timeout: float = 30.0) -> None:
        """Wait until every sent message has been answered or nothing arrives for ``quiet``
        seconds."""
        deadline = time.monotonic() + timeout
        last_n, last_change = -1, time.monotonic()
        while time.monotonic() < deadline:
            n = len(self.recording.wrench)
            if n >= self.sent and len(self.recording.environment) >= n:
                time.sleep(0.1)
                return
            if n != last_n:
                last_n, last_change = n, time.monotonic()
            elif time.monotonic() - last_change > quiet:
                return
            time.sleep(0.02)


def bag_joint_state_messages(bag_path: Path) -> tuple[list[tuple[int, bytes]], str]:
    """The joint states of a bag as [(log time ns, CDR bytes)] and its URDF text."""
    from .io.bag import RecordedBag
    with RecordedBag(bag_path) as bag:
        urdf = bag.urdf() or ""
        msgs = [(ns, bytes(raw)) for _, ns, raw in bag._messages(bag.info.joint_states)]
    return msgs, urdf


def recording_columns(rec: NodeRecording, model_name: str = "along_direction"
                      ) -> dict[str, np.ndarray]:
    """Estimate columns from the node's messages: force and parameters per wrench/environment
    pair (in arrival order), the rest from the latest status before each pair (a mechanism's
    geometry too)."""
    from .core.object_models import model_named
    from .io.cdr import stamp_seconds
    from .io.estimates import EstimateTable
    names = model_named(model_name).parameter_names
    m = len(names)
    n = min(len(rec.wrench), len(rec.environment))
    w = np.array(rec.wrench[:n], dtype=float).reshape(-1, 8)
    env = np.array(rec.environment[:n], dtype=float).reshape(-1, 2 * m)
    cols: dict[str, Any] = {
        "time": np.array([stamp_seconds(int(a), int(b)) for a, b in w[:, :2]]),
        "force_x": w[:, 2], "force_y": w[:, 3], "force_z": w[:, 4],
    }
    for i, p in enumerate(names):
        cols[p] = env[:, i]
        cols[f"{p}_std"] = env[:, m + i]
    keys = {"force_along": "force_along[N]", "position_along": "position_along[m]",
            "velocity_along": "velocity_along[m/s]",
            "acceleration_along": "acceleration_along[m/s^2]", "nis": "nis",
            "nis_average": "nis_average", "nis_lower": "nis_lower", "nis_upper": "nis_upper",
            "measurement_std": "measurement_std[N]", "bias_age": "bias_age[s]",
            "kinematics_lag": "kinematics_lag[s]", "contact_level": "contact_level",
            "jacobian_condition": "jacobian_condition"}
    flags = {"converged": "converged", "in_contact": "in_contact",
             **{f"{p}_converged": f"{p}_converged" for p in names},
             **{f"{p}_excited": f"{p}_excited" for p in names}}
    vectors: dict[str, str] = {}
    scaled: dict[str, tuple[str, float]] = {}
    if model_name in ("revolute", "prismatic"):
        keys.update({"travel": "travel[m]", "path_rms": "path_rms[m]", "radius": "radius[m]",
                     "angle": "angle[rad]", "radius_std": "radius_std[m]"})
        scaled = {"swept_arc": ("swept_arc[deg]", math.pi / 180.0),
                  "axis_std": ("axis_std[deg]", math.pi / 180.0)}
        flags["geometry_converged"] = "geometry_converged"
        vectors = {"axis": "axis", "axis_point": "axis_point[m]"}
    vector_cols = [f"{v}_{c}" for v in vectors for c in "xyz"]
    filled = {c: np.full(n, np.nan) for c in [*keys, *flags, *scaled, *vector_cols, "level"]}
    states = [""] * n
    geometry = [""] * n
    row_of = {t: i for i, t in enumerate(cols["time"])}
    # a status reports on the estimate stamped time[s]; it holds until the next status
    marks = sorted((row_of[float(v["time[s]"])], level, v) for _, level, _, v in rec.status
                   if v.get("time[s]", "n/a") != "n/a" and float(v["time[s]"]) in row_of)
    for j, (a, level, values) in enumerate(marks):
        b = marks[j + 1][0] if j + 1 < len(marks) else n
        if a >= b:
            continue
        for c, key in keys.items():
            text = values.get(key, "n/a")
            filled[c][a:b] = float(text) if text not in ("n/a", "") else np.nan
        for c, key in flags.items():
            filled[c][a:b] = 1.0 if values.get(key) == "true" else 0.0
        for c, (key, factor) in scaled.items():
            text = values.get(key, "n/a")
            filled[c][a:b] = factor * float(text) if text not in ("n/a", "") else np.nan
        for c, key in vectors.items():
            parts = values.get(key, "").split()
            for k, axis in enumerate("xyz"):
                filled[f"{c}_{axis}"][a:b] = (float(parts[k]) if len(parts) == 3
                                              and parts[k] != "n/a" else np.nan)
        filled["level"][a:b] = level
        states[a:b] = [values.get("state", "")] * (b - a)
        geometry[a:b] = [values.get("geometry", "")] * (b - a)
    cols.update(filled)
    cols["state"] = states
    if vectors:
        cols["geometry"] = geometry
    return EstimateTable.from_columns(cols, model_name).columns()


# --------------------------------------------------------------------------------------------
# the demo


def demo_settings(scenario_settings: dict[str, Any]) -> dict[str, Any]:
    """The node's settings for the demo, as changes from the defaults: the robot's file
    (config/marten_demo.yaml, when present) with the scenario's own settings on top (its
    manipulation direction, effort side and contact frame describe the task, which a robot's
    file cannot know)."""
    from .core.settings import Settings
    from .io.parameter_file import load_parameter_file
    base = load_parameter_file(DEMO_PARAMS) if DEMO_PARAMS.exists() else Settings()
    merged = base.replace(scenario_settings)
    default = Settings()
    return {k: v for k, v in merged.to_flat().items() if v != default[k]}


def _print_table(truth: dict[str, float], node: dict, replay_summary: dict,
                 differences: dict[str, float], sent: int, answered: int,
                 description: str = "Marten opens the storeroom door") -> str:
    from .offline.report import display
    lines = ["", f"{description} (simulated); the node ran over DDS, the replay "
             "offline, on the same bag.", "",
             f"{'parameter':<26}{'truth':>9}{'node':>10}{'± std':>9}{'replay':>10}"
             f"{'converged after (s)':>21}"]
    for p, n in node["parameters"].items():
        r = replay_summary["parameters"][p]
        lines.append(f"{p + ' (' + n['unit'] + ')':<26}{display(truth.get(p)):>9}"
                     f"{display(n['final']):>10}{display(n['std']):>9}{display(r['final']):>10}"
                     f"{display(n['time_to_convergence_s']):>21}")
    mech = replay_summary.get("mechanism")
    if mech:
        lines.append("")
        lines.append(f"{mech['kind']} geometry (replay): {mech['geometry']}, axis error "
                     f"{display(mech.get('axis_error_deg'))} deg"
                     + (f", radius {display(mech['radius_m'])} m (truth "
                        f"{display(mech.get('truth', {}).get('radius'))} m), swept "
                        f"{display(mech['swept_arc_deg'])} deg" if "radius_m" in mech else ""))
        for name, entry in (mech.get("rotary") or {}).items():
            lines.append(f"  {name} ({entry['unit']}): {display(entry['final'])} "
                         f"(truth {display(mech.get('truth', {}).get(name))})")
    for prefix, entry in (replay_summary.get("principal") or {}).items():
        lines.append(f"principal {prefix} (replay): "
                     + ", ".join(display(v) for v in entry["values"])
                     + (" (truth " + ", ".join(display(v) for v in entry["truth_values"]) + ")"
                        if "truth_values" in entry else ""))
    fn, fr = node["force"], replay_summary["force"]
    lines += ["",
              f"force RMSE in contact (N):  node {display(fn['rmse_contact_N'])}, "
              f"replay {display(fr['rmse_contact_N'])} (the same forces; the node's contact "
              "flag is the one its last ~/status gave, the replay's is per sample)",
              f"all converged after (s): node {display(node['time_to_convergence_s'])}, "
              f"replay {display(replay_summary['time_to_convergence_s'])}",
              f"joint states sent {sent}, estimates received {answered}; largest node - replay "
              f"difference: force {differences['force_N']:.3g} N, parameters "
              f"{differences['parameters']:.3g}"]
    return "\n".join(lines)


def compare_with_replay(node_cols: dict[str, np.ndarray], replay_cols: dict[str, np.ndarray]
                        ) -> dict[str, float]:
    """Largest absolute differences between node and replay rows of equal stamps."""
    index = {t: i for i, t in enumerate(replay_cols["time"])}
    rows = [(i, index[t]) for i, t in enumerate(node_cols["time"]) if t in index]
    if not rows:
        return {"matched": 0, "force_N": math.nan, "parameters": math.nan}
    a, b = (np.array(x) for x in zip(*rows))
    force = max(float(np.max(np.abs(node_cols[c][a] - replay_cols[c][b])))
                for c in ("force_x", "force_y", "force_z"))
    names = [c[:-10] for c in node_cols if c.endswith("_converged")
             and c not in ("geometry_converged",) and c[:-10] in node_cols]
    params = max(float(np.max(np.abs(node_cols[c][a] - replay_cols[c][b])))
                 for p in names for c in (p, f"{p}_std"))
    return {"matched": len(rows), "force_N": force, "parameters": params}


def run_demo(out: Path, duration: float | None = None, seed: int = 0,
             scenario: str = DEMO_SCENARIO) -> int:
    env = isolate_ros()
    from .io.bag import RecordedBag
    from .io.estimates import ForceReference, summarize
    from .io.parameter_file import write_parameter_file
    from .offline.replay import (
        ReplayError,
        ReplayRequest,
        StagedDir,
        check_output_dir,
        replay,
        write_outputs,
    )
    from .sim.recording import write_simulated_bag
    from .sim.simulator import SCENARIOS, simulate
    started = time.perf_counter()
    try:
        if out.exists() and not (out / "demo.json").exists() and any(out.iterdir()):
            raise ReplayError(f"output directory {str(out)!r} exists and holds other files; "
                              "expected a new directory or an earlier demo's output")
        if out.exists() and (out / "demo.json").exists():
            pass  # an earlier demo: replaced when this one is complete
        else:
            check_output_dir(out)
    except ReplayError as exc:
        print(f"demo: error: {exc}", file=sys.stderr)
        return 2
    print(f"demo: ROS 2 kept on this machine (ROS_AUTOMATIC_DISCOVERY_RANGE="
          f"{env['ROS_AUTOMATIC_DISCOVERY_RANGE']}, ROS_DOMAIN_ID={env['ROS_DOMAIN_ID']})")
    with StagedDir(out) as stage:
        d = stage.path
        spec = SCENARIOS[scenario]
        print(f"demo: simulating '{scenario}': {spec.description}")
        run = simulate(scenario, duration=duration, seed=seed)
        bag_name = f"{scenario}_bag"
        bag_path = d / bag_name
        write_simulated_bag(bag_path, run, "mcap", description=spec.description)
        params = d / "params.yaml"
        settings = demo_settings(run.settings)
        write_parameter_file(params, settings)
        print("demo: node parameters: "
              + (f"{DEMO_PARAMS.relative_to(DEMO_PARAMS.parent.parent)}" if DEMO_PARAMS.exists()
                 else "the defaults")
              + f" with the {scenario} scenario's settings on top ({params.name}: "
              + ", ".join(f"{k} = {v}" for k, v in sorted(settings.items())) + ")")
        bag_settings = False  # the replay takes exactly the node's file
        messages, urdf = bag_joint_state_messages(bag_path)
        print(f"demo: starting the node and playing {len(messages)} joint states "
              f"({(messages[-1][0] - messages[0][0]) * 1e-9:.1f} s) into it over DDS")
        model_name = run.settings.get("environment.model", "along_direction")
        session = NodeSession(params, log_path=d / "node.log", model_name=model_name)
        try:
            session.start()
            session.publish_description(urdf)
            session.wait_ready()
            session.play(messages, speed=1.0)
            session.drain()
        finally:
            session.close()
        rec = session.recording
        print(f"demo: the node answered {len(rec.wrench)} of {session.sent} joint states")
        if not rec.wrench:
            print("demo: error: the node published no estimate; see node.log", file=sys.stderr)
            return 1
        replay_result = replay(ReplayRequest(bag_path, d / "replay", params=params,
                                             progress=False, bag_settings=bag_settings,
                                             bag_label=str(out / bag_name)))
        node_cols = recording_columns(rec, model_name)
        with RecordedBag(bag_path) as bag:
            ref = bag.reference()
            truth = bag.truth()
        reference = ForceReference(f"bag topic {ref.topic}", ref.time, ref.force)
        node_summary = summarize(
            node_cols, truth=truth.parameters, reference=reference,
            rejects=_status_rejects(rec), samples_read=session.sent, wall_time=None,
            truth_extra=truth.extra,
            source={"bag": str(out / bag_name), "storage": "mcap", "tool": "node over DDS",
                    "scenario": scenario, "urdf": "robot_description topic",
                    "efforts": "joint_states", "settings": [f"parameter file {params.name}"],
                    "settings_changed": replay_result.summary["source"]["settings_changed"]})
        (d / "node").mkdir()
        write_outputs(d / "node", node_summary, node_cols, reference,
                      title=f"Interaction estimate \u2014 the node over DDS ({scenario} demo)")
        differences = compare_with_replay(node_cols, replay_result.columns)
        table = _print_table(truth.parameters, node_summary, replay_result.summary,
                             differences, session.sent, len(rec.wrench),
                             spec.description.rstrip("."))
        (d / "demo.json").write_text(json.dumps({
            "scenario": scenario, "sent": session.sent, "answered": len(rec.wrench),
            "node_vs_replay": differences, "ros": env,
            "wall_time_s": time.perf_counter() - started}, indent=2) + "\n", encoding="utf-8")
        (d / "table.txt").write_text(table + "\n", encoding="utf-8")
        stage.commit()
    print(table)
    print(f"\ndemo: reports in {out}/node/report.html and {out}/replay/report.html "
          f"({time.perf_counter() - started:.0f} s)")
    return 0


def _status_rejects(rec: NodeRecording) -> dict[str, int]:
    for _, _, _, values in reversed(rec.status):
        counts = {k.split(".", 1)[1]: int(v) for k, v in values.items()
                  if k.startswith("rejects.")}
        if counts:
            return counts
    return {}


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m interaction_estimator.demo",
        description="Simulate Marten opening a door, run the node on it over DDS (this machine "
                    "only), write reports and print a comparison.")
    parser.add_argument("--out", type=Path, default=Path("demo_out"), metavar="DIR",
                        help="output directory (default demo_out)")
    parser.add_argument("--duration", type=float, default=None, metavar="S",
                        help="scenario length in s (default: the scenario's own)")
    parser.add_argument("--seed", type=int, default=0, help="noise seed (default 0)")
    parser.add_argument("--scenario", default=DEMO_SCENARIO, choices=_demo_scenarios(),
                        metavar="NAME",
                        help=f"built-in scenario (default {DEMO_SCENARIO}); one of: "
                        + ", ".join(_demo_scenarios()))
    args = parser.parse_args(argv)
    return run_demo(args.out, args.duration, args.seed, args.scenario)


def _demo_scenarios() -> list[str]:
    """The built-in scenarios with an object (the demo needs something to estimate)."""
    from .sim.scenarios import SCENARIOS
    return sorted(name for name, spec in SCENARIOS.items() if spec.has_object)


if __name__ == "__main__":
    sys.exit(main())
