"""The ROS 2 node ``interaction_estimator``: JointState in, wrench and object estimates out.

A thin adapter around :class:`~interaction_estimator.core.pipeline.Pipeline`:
message -> Sample -> Pipeline -> Estimate -> messages. Topics (relative names, so namespaces and
remapping apply):

- in ``joint_states`` (sensor_msgs/JointState: positions rad or m, velocities, efforts N·m or N),
  and with ``input.separate_efforts`` also ``joint_efforts`` (efforts only, matched by stamp);
- in ``robot_description`` (std_msgs/String, transient local) unless ``robot_description_file``
  names a URDF file;
- out ``~/wrench`` (geometry_msgs/WrenchStamped: force N and torque N·m the robot applies to the
  environment, world frame = URDF root unless ``output.frame_id``), ``~/environment``
  (std_msgs/Float64MultiArray: mass kg, damping N·s/m, stiffness N/m, static force N, then their
  standard deviations), ``~/status`` (diagnostic_msgs/DiagnosticStatus) and ``/diagnostics``;
- services ``~/reset`` and ``~/calibrate_bias`` (std_srvs/Trigger).

States reported in the status besides the pipeline's (learning_bias, free_motion, in_contact,
converged, contact_lost): ``waiting_for_model`` (WARN: no URDF yet), ``model_error`` (ERROR: the
URDF cannot be used; the parser's message is the status message) and ``waiting_for_input`` (WARN
before the first usable joint state, STALE once input has stopped for ``health.stale_after`` s).

Nothing here blocks the executor: the URDF file is read once at start-up; each message costs one
pipeline step. Joint states are read from the bytes received, and the outputs are published as
bytes (:mod:`.node_messages`): rclpy's conversions of message objects cost more than the rest of
the node's own work per message. A message that cannot be used is counted by reason and
reported (status key-values and a throttled warning); an exception while handling one is
caught, counted and reported the same way. No non-finite number is ever published.

Run: ``estimator_node --ros-args --params-file config/default.yaml -r __ns:=/arm``.
"""
from __future__ import annotations

import gc
import math
import sys
import time
from collections import deque
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import rclpy
import rclpy.executors
import rclpy.utilities
from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus
from geometry_msgs.msg import WrenchStamped
from rcl_interfaces.msg import SetParametersResult
from rclpy.exceptions import ParameterUninitializedException
from rclpy.node import Node
from rclpy.parameter import Parameter
from rclpy.qos import DurabilityPolicy, HistoryPolicy, QoSProfile, ReliabilityPolicy
from rclpy.serialization import deserialize_message
from sensor_msgs.msg import JointState
from std_msgs.msg import Float64MultiArray, String
from std_srvs.srv import Trigger

from ..core.compiled import CACHE_DIR
from ..core.health import ERROR, STALE, WARN
from ..core.model import ModelError
from ..core.pipeline import Estimate, Pipeline
from ..core.samples import RejectCounts, Sample, SampleRejected
from ..core.settings import NODE_NAME, SPECS, Settings, SettingsError, unknown_name_message
from ..core.warmup import warm_up
from ..io.description_file import resolve as resolve_description
from ..io.effort_matching import EffortMatcher
from . import parameters as node_params
from .inputs import LatencyMeter, WarningThrottle
from .messages import (
    MODEL_ERROR,
    WAITING_FOR_INPUT,
    WAITING_FOR_MODEL,
    EnvironmentEncoder,
    JointStateReader,
    NodeFigures,
    StatusEncoder,
    StatusFields,
    WrenchEncoder,
    efforts_for_state,
    idle_fields,
    output_numbers,
    sample_from_joint_state,
    sample_from_parts,
    stamp_is_zero,
    status_fields,
    status_object,
    time_message,
    time_seconds,
)

# Topic and service names, relative (namespaces and remapping apply).
JOINT_STATES_TOPIC = "joint_states"
JOINT_EFFORTS_TOPIC = "joint_efforts"
ROBOT_DESCRIPTION_TOPIC = "robot_description"
WRENCH_TOPIC = "~/wrench"
ENVIRONMENT_TOPIC = "~/environment"
STATUS_TOPIC = "~/status"
DIAGNOSTICS_TOPIC = "/diagnostics"
RESET_SERVICE = "~/reset"
CALIBRATE_SERVICE = "~/calibrate_bias"
INPUT_TOPICS = (JOINT_STATES_TOPIC, JOINT_EFFORTS_TOPIC, ROBOT_DESCRIPTION_TOPIC)
OUTPUT_TOPICS = (WRENCH_TOPIC, ENVIRONMENT_TOPIC, STATUS_TOPIC, DIAGNOSTICS_TOPIC)

OUTPUT_DEPTH = 100          # messages kept per output publisher (reliable): 0.1 s at 1 kHz
WATCH_PERIOD_S = 0.25       # s, period of the check that reports waiting / stale states
RATE_TOLERANCE = 0.2        # input rate "far" from input.expected_rate: off by more than 20 %
RECENT_S = 1.0              # s, window of "in the last second" counts
EFFORT_BUFFER = 100         # joint states (and effort messages) held for stamp matching
SPIN_TIMEOUT_S = 0.1        # s, executor wait per spin_once


class EstimatorNode(Node):
    """The estimator as a ROS 2 node. Raises SettingsError if its parameters are invalid."""

    def __init__(self, parameter_files: Sequence[str] = (), **node_kwargs: Any):
        super().__init__(NODE_NAME, **node_kwargs)
        self._parameter_files = tuple(parameter_files)  # robot_description_file is relative to
        # the file that sets it
        self._throttle = WarningThrottle(self.get_logger().warning)
        self.settings = self._declare_settings()
        self.pipeline: Pipeline | None = None
        self._model_text: str | None = None
        self._model_error = ""
        self._old_rejects: dict[str, int] = {}   # counts of pipelines replaced by a new model
        self._node_rejects = RejectCounts(counts={})
        self._reject_times: deque[float] = deque(maxlen=1000)   # monotonic s, node + pipeline
        self._node_reject_times: deque[float] = deque(maxlen=1000)
        self._error_times: deque[float] = deque(maxlen=1000)
        self._errors = 0
        self._last_error = ""
        self._last_reject_text = ""
        self._latency = LatencyMeter()
        self._input_age = math.nan
        self._last_restarts = 0
        self._last_processed: float | None = None    # monotonic s of the last estimate
        self._last_status_time = -math.inf
        self._last_status: StatusFields | None = None
        # JointState read, and outputs written, as CDR bytes (see node_messages)
        self._reader = JointStateReader()
        self._wrench_encoder: WrenchEncoder | None = None   # made for the current frame_id
        self._environment_encoder = EnvironmentEncoder()
        self._status_encoder = StatusEncoder()
        self._matcher: EffortMatcher[JointState, JointState] = EffortMatcher(
            self.settings["input.stamp_tolerance"], EFFORT_BUFFER)

        s = self.settings
        reliability = (ReliabilityPolicy.RELIABLE if s["input.reliability"] == "reliable"
                       else ReliabilityPolicy.BEST_EFFORT)
        input_qos = QoSProfile(depth=s["input.queue_depth"], history=HistoryPolicy.KEEP_LAST,
                               reliability=reliability, durability=DurabilityPolicy.VOLATILE)
        output_qos = QoSProfile(depth=OUTPUT_DEPTH, history=HistoryPolicy.KEEP_LAST,
                                reliability=ReliabilityPolicy.RELIABLE,
                                durability=DurabilityPolicy.VOLATILE)
        self._wrench_pub = self.create_publisher(WrenchStamped, WRENCH_TOPIC, output_qos)
        self._environment_pub = self.create_publisher(Float64MultiArray, ENVIRONMENT_TOPIC,
                                                      output_qos)
        self._status_pub = self.create_publisher(DiagnosticStatus, STATUS_TOPIC, output_qos)
        self._diagnostics_pub = self.create_publisher(DiagnosticArray, DIAGNOSTICS_TOPIC, 10)
        self._efforts_sub = None
        if not s["input.separate_efforts"]:  # the bytes received, read by JointStateReader
            self._states_sub = self.create_subscription(JointState, JOINT_STATES_TOPIC,
                                                        self._on_joint_state_bytes, input_qos,
                                                        raw=True)
        else:  # message objects, held for stamp matching
            self._states_sub = self.create_subscription(JointState, JOINT_STATES_TOPIC,
                                                        self._on_joint_state, input_qos)
            self._efforts_sub = self.create_subscription(JointState, JOINT_EFFORTS_TOPIC,
                                                         self._on_efforts, input_qos)
        self._description_sub = None
        self._model_source = s["robot_description_file"]
        if not self._model_source:
            description_qos = QoSProfile(depth=1, history=HistoryPolicy.KEEP_LAST,
                                         reliability=ReliabilityPolicy.RELIABLE,
                                         durability=DurabilityPolicy.TRANSIENT_LOCAL)
            self._description_sub = self.create_subscription(
                String, ROBOT_DESCRIPTION_TOPIC, self._on_description, description_qos)
            self._model_source = f"topic {self._description_sub.topic_name}"
        self.create_service(Trigger, RESET_SERVICE, self._on_reset)
        self.create_service(Trigger, CALIBRATE_SERVICE, self._on_calibrate)
        self.create_timer(WATCH_PERIOD_S, self._on_watch)
        self._diagnostics_timer = self.create_timer(1.0 / s["output.diagnostics_rate"],
                                                    self._on_diagnostics)
        self.add_pre_set_parameters_callback(self._normalize_parameters)
        self.add_on_set_parameters_callback(self._on_set_parameters)

        if s["robot_description_file"]:
            self._load_file(s["robot_description_file"])
        self._publish_idle()

    # --- parameters ------------------------------------------------------------------------
    def _declare_settings(self) -> Settings:
        """Declare every setting as a parameter; return the validated settings."""
        values: dict[str, Any] = {}
        for spec in SPECS:
            try:
                param = self.declare_parameter(spec.name, node_params.declared_default(spec),
                                               node_params.descriptor(spec))
            except Exception as exc:  # a parameter-file value of the wrong type
                raise SettingsError(f"parameter {spec.name}: {exc}; expected "
                                    f"{spec.range_text()}") from None
            values[spec.name] = node_params.setting_value(param)
        # what the parameter files and -p set (rclpy keeps it; no public accessor exists)
        overrides = list(getattr(self, "_parameter_overrides", {}))
        unknown = node_params.unknown_overrides(overrides,
                                                [n for n in overrides if self.has_parameter(n)])
        if unknown:
            raise SettingsError("; ".join(unknown_name_message(n) for n in unknown))
        settings = Settings(values)
        # store floats and typed lists where a file wrote 9 for 9.0 or [] (not for read-only ones)
        fixes = []
        for spec in SPECS:
            try:
                param = self.get_parameter(spec.name)
            except ParameterUninitializedException:
                param = Parameter(spec.name)
            fixed = node_params.normalized(param)
            if not spec.read_only and fixed.type_ != param.type_:
                fixes.append(fixed)
        if fixes:
            self.set_parameters(fixes)
        return settings

    def _normalize_parameters(self, params: list[Parameter]) -> list[Parameter]:
        return [node_params.normalized(p) for p in params]

    def _on_set_parameters(self, params: list[Parameter]) -> SetParametersResult:
        changes = node_params.changes_from(params)
        if not changes:
            return SetParametersResult(successful=True)
        try:
            new = self.settings.replace(changes)
            node_params.check_fits_model(new, None if self.pipeline is None
                                         else self.pipeline.model.joint_names)
        except SettingsError as exc:
            self.get_logger().warning(f"parameter change refused: {exc}")
            return SetParametersResult(successful=False, reason=str(exc))
        try:
            if self.pipeline is not None:
                self.pipeline.apply_settings(new)
        except Exception as exc:  # the change is refused; the pipeline keeps running
            reason = f"could not apply {sorted(changes)}: {type(exc).__name__}: {exc}"
            self.get_logger().warning(f"parameter change refused: {reason}")
            return SetParametersResult(successful=False, reason=reason)
        old, self.settings = self.settings, new
        self._matcher.tolerance_s = new["input.stamp_tolerance"]
        if new["output.diagnostics_rate"] != old["output.diagnostics_rate"]:
            self.destroy_timer(self._diagnostics_timer)
            self._diagnostics_timer = self.create_timer(1.0 / new["output.diagnostics_rate"],
                                                        self._on_diagnostics)
        self.get_logger().info("parameters changed: " + ", ".join(
            f"{k}={v!r}" for k, v in sorted(changes.items())))
        return SetParametersResult(successful=True)

    # --- robot model -----------------------------------------------------------------------
    def _load_file(self, path: str) -> None:
        path = str(resolve_description(path, self._parameter_files))
        try:
            text = Path(path).read_text(encoding="utf-8")
        except OSError as exc:
            self._set_model_error(f"robot_description_file {path!r} cannot be read: "
                                  f"{exc.strerror}; expected a readable URDF file")
            return
        self._load_model(text, f"file {path}")

    def _on_description(self, msg: String) -> None:
        try:
            if msg.data == self._model_text and self.pipeline is not None:
                self.get_logger().info("robot description unchanged; model kept")
                return
            self._load_model(msg.data, self._model_source)
        except Exception as exc:  # never let a description take the node down
            self._set_model_error(f"robot description from {self._model_source} failed: "
                                  f"{type(exc).__name__}: {exc}")

    def _load_model(self, urdf: str, source: str) -> None:
        self._retire_pipeline()
        self._model_text = urdf
        try:
            pipeline = Pipeline(self.settings, urdf)
        except (ModelError, SettingsError) as exc:
            self._set_model_error(f"robot description from {source} is unusable: {exc}")
            return
        self.pipeline, self._model_error = pipeline, ""
        self._matcher.clear()
        self._node_reject_times.clear()  # rejects without a model are not this model's findings
        self._last_restarts = 0
        self._last_processed = None
        m = pipeline.model
        self.get_logger().info(
            f"robot model {m.model.name!r} from {source}: {len(m.joint_names)} joints, contact "
            f"frame {m.contact_frame!r}, world frame {m.root_frame!r}")
        self._publish_idle()

    def _retire_pipeline(self) -> None:
        if self.pipeline is not None:
            for reason, n in self.pipeline.rejects.counts.items():
                self._old_rejects[reason] = self._old_rejects.get(reason, 0) + n
        self.pipeline = None

    def _set_model_error(self, text: str) -> None:
        self._retire_pipeline()
        self._model_error = text
        self.get_logger().error(text)
        self._publish_idle()

    # --- inputs ----------------------------------------------------------------------------
    def _now_s(self) -> float:
        return self.get_clock().now().nanoseconds * 1e-9

    def _reject_no_model(self) -> None:
        self._reject_node(SampleRejected(
            "no_model", f"joint state received before a usable robot model ({self._idle_text()})"))

    def _on_joint_state_bytes(self, raw: bytes) -> None:
        """A JointState as the CDR bytes received (without input.separate_efforts)."""
        start = time.perf_counter()
        try:
            if self.pipeline is None:
                self._reject_no_model()
                return
            parts = self._reader.read(raw)
            if parts is None:  # an encoding the reader does not handle: rclpy reads it
                self._on_joint_state(deserialize_message(raw, JointState), start)
                return
            sec, nanosec = parts[0], parts[1]
            # the ROS clock is read only where its value is used: a zero stamp, or the input
            # age of a status about to be published
            due = self._status_due()
            receive = self._now_s() if due or (sec == 0 and nanosec == 0) else math.nan
            self._process(sample_from_parts(parts, receive), sec, nanosec, receive, start, due)
        except Exception as exc:
            self._internal_error(exc, "joint state")

    def _on_joint_state(self, msg: JointState, start: float | None = None) -> None:
        """A JointState message (with input.separate_efforts, or bytes the reader left)."""
        start = time.perf_counter() if start is None else start
        try:
            if self.pipeline is None:
                self._reject_no_model()
                return
            if self._efforts_sub is None:
                due = self._status_due()
                receive = (self._now_s() if due or stamp_is_zero(msg.header.stamp)
                           else math.nan)
                self._process_message(msg, receive, None, start, due)
                return
            receive = self._now_s()
            t = receive if stamp_is_zero(msg.header.stamp) else time_seconds(msg.header.stamp)
            for pair in self._matcher.add_state(t, (msg, receive)):
                self._process_pair(pair, start)
        except Exception as exc:
            self._internal_error(exc, "joint state")

    def _on_efforts(self, msg: JointState) -> None:
        start = time.perf_counter()
        try:
            if self.pipeline is None:
                return  # the joint state of the same stamp is counted as no_model
            t = (self._now_s() if stamp_is_zero(msg.header.stamp)
                 else time_seconds(msg.header.stamp))
            for pair in self._matcher.add_effort(t, msg):
                self._process_pair(pair, start)
        except Exception as exc:
            self._internal_error(exc, "effort message")

    def _process_pair(self, pair, start: float) -> None:
        state, receive = pair.state
        if pair.effort is None:
            self._reject_node(SampleRejected(
                "missing_effort", f"no effort message within input.stamp_tolerance = "
                f"{self.settings['input.stamp_tolerance']:g} s of the joint state stamped "
                f"{pair.time:.6f} s"))
            return
        efforts, why = efforts_for_state(state, pair.effort, self.pipeline.model.joint_names)
        if efforts is None:
            self._reject_node(SampleRejected("missing_effort", why))
            return
        self._process_message(state, receive, efforts, start)

    def _status_due(self) -> bool:
        rate = self.settings["output.status_rate"]
        return rate == 0.0 or time.monotonic() - self._last_status_time >= 1.0 / rate

    def _process_message(self, msg: JointState, receive: float,
                         efforts: Sequence[float] | None, start: float,
                         due: bool | None = None) -> None:
        """One JointState message (efforts from ``efforts`` when given)."""
        stamp = msg.header.stamp
        self._process(sample_from_joint_state(msg, receive, efforts), stamp.sec, stamp.nanosec,
                      receive, start, due)

    def _process(self, sample: Sample, sec: int, nanosec: int, receive: float, start: float,
                 due: bool | None = None) -> None:
        """One sample; (sec, nanosec): its message's header stamp; receive: ROS time s, NaN
        when not read; start: perf_counter s at receipt; due: publish a status after it (None:
        decide now)."""
        pipeline = self.pipeline
        before = pipeline.rejects.total
        if not pipeline.advance(sample):
            if pipeline.rejects.total > before:
                self._note_pipeline_reject(pipeline)
            return
        if sample.stamp_from_receive:
            self._input_age = math.nan
        elif receive == receive:   # read (not NaN)
            self._input_age = receive - sample.time
        restarts = pipeline.observer_restarts
        if restarts > self._last_restarts:
            self._last_restarts = restarts
            self._throttle.emit("observer_restarted", (
                f"momentum observer restarted at {sample.time:.6f} s: the gap since the "
                f"previous sample exceeds observer.max_gap = "
                f"{self.settings['observer.max_gap']:g} s ({restarts} restarts so far)"))
        if sample.stamp_from_receive:
            self._throttle.emit("stamp_from_receive", "joint state stamps are zero: the "
                                "receive time is used instead (less accurate)")
        # the messages from the numbers alone; the Estimate (health words, figures) is built
        # only when a status is published
        numbers = output_numbers(pipeline.last_outputs())
        if numbers is not None:
            force, torque, values, stds = numbers
            if sample.stamp_from_receive:
                stamp = time_message(sample.time)
                sec, nanosec = stamp.sec, stamp.nanosec
            frame = self._frame_id()
            encoder = self._wrench_encoder
            if encoder is None or encoder.frame_id != frame:
                encoder = self._wrench_encoder = WrenchEncoder(frame)
            self._wrench_pub.publish(encoder.encode(sec, nanosec, force, torque))
            self._environment_pub.publish(self._environment_encoder.encode(values, stds))
        else:
            self._reject_node(SampleRejected(
                "non_finite_output", f"estimate at {sample.time:.6f} s has a non-finite force "
                "or parameter; not published"))
        self._latency.add(time.perf_counter() - start)
        now = self._last_processed = time.monotonic()
        if self._status_due() if due is None else due:
            est = pipeline.estimate()
            self._publish(status_fields(est, self._figures(est), self._hardware_id()), now)

    # --- rejects and errors ----------------------------------------------------------------
    def _reject_node(self, exc: SampleRejected) -> None:
        self._node_rejects.add(exc)
        self._last_reject_text = f"{exc.reason}: {exc}"
        now = time.monotonic()
        self._reject_times.append(now)
        self._node_reject_times.append(now)
        self._throttle.emit(exc.reason, f"sample rejected ({exc.reason}): {exc}")

    def _note_pipeline_reject(self, pipeline: Pipeline) -> None:
        self._reject_times.append(time.monotonic())
        r = pipeline.rejects
        self._last_reject_text = f"{r.last_reason}: {r.last_message}"
        self._throttle.emit(r.last_reason, f"sample rejected ({r.last_reason}): "
                                           f"{r.last_message}")

    def _internal_error(self, exc: Exception, what: str) -> None:
        self._errors += 1
        self._error_times.append(time.monotonic())
        self._last_error = f"{type(exc).__name__}: {exc}"
        self._reject_node(SampleRejected("internal_error", f"handling a {what} failed and it "
                                         f"was skipped: {self._last_error}"))

    def _rejects(self) -> dict[str, int]:
        counts = dict(self._old_rejects)
        sources = [self._node_rejects.counts]
        if self.pipeline is not None:
            sources.append(self.pipeline.rejects.counts)
        for source in sources:
            for reason, n in source.items():
                counts[reason] = counts.get(reason, 0) + n
        return counts

    @staticmethod
    def _recent(times: deque[float], now: float) -> int:
        while times and times[0] < now - RECENT_S:
            times.popleft()
        return len(times)

    # --- status ----------------------------------------------------------------------------
    def _frame_id(self) -> str:
        return self.settings["output.frame_id"] or (
            self.pipeline.model.root_frame if self.pipeline is not None else "")

    def _hardware_id(self) -> str:
        return self.pipeline.model.model.name if self.pipeline is not None else ""

    def _findings(self, est: Estimate | None) -> list[tuple[int, str]]:
        now = time.monotonic()
        s = self.settings
        out: list[tuple[int, str]] = []
        errors = self._recent(self._error_times, now)
        if errors:
            out.append((ERROR, f"{errors} messages failed in the last second "
                               f"({self._last_error})"))
        node_rejects = self._recent(self._node_reject_times, now)
        if node_rejects and self.pipeline is not None:
            out.append((WARN, f"{node_rejects} samples rejected by the node in the last second "
                              f"({self._node_rejects.last_reason})"))
        if self._latency.count and self._latency.mean_s > s["health.max_latency"]:
            out.append((WARN, f"processing latency {self._latency.mean_s * 1e3:.1f} ms above "
                              f"health.max_latency = {s['health.max_latency'] * 1e3:.1f} ms"))
        expected = s["input.expected_rate"]
        if est is not None and expected > 0 and est.rate_hz > 0 and abs(
                est.rate_hz - expected) > RATE_TOLERANCE * expected:
            text = (f"input rate {est.rate_hz:.0f} Hz far from input.expected_rate = "
                    f"{expected:.0f} Hz")
            out.append((WARN, text))
            self._throttle.emit("rate", text)
        return out

    def _figures(self, est: Estimate | None) -> NodeFigures:
        m = self.pipeline.model if self.pipeline is not None else None
        return NodeFigures(
            node_name=self.get_fully_qualified_name().lstrip("/"),
            rejects=self._rejects(), last_reject=self._last_reject_text, errors=self._errors,
            latency_s=self._latency.mean_s, latency_max_s=self._latency.take_max(),
            input_age_s=self._input_age, frame_id=self._frame_id(),
            model_name=m.model.name if m is not None else "",
            joints=len(m.joint_names) if m is not None else 0,
            contact_frame=self.settings["contact_frame"], findings=self._findings(est))

    def _idle_text(self) -> str:
        if self._model_error:
            return self._model_error
        if self.pipeline is None:
            return f"waiting for the robot description on {self._model_source}"
        return f"no usable joint state on {self._states_sub.topic_name}"

    def _idle_state(self) -> tuple[str, int, str]:
        if self._model_error:
            return MODEL_ERROR, ERROR, self._model_error
        if self.pipeline is None:
            return WAITING_FOR_MODEL, WARN, self._idle_text()
        now = time.monotonic()
        recent = self._recent(self._reject_times, now)
        text = self._idle_text()
        if self._last_processed is None:
            level, text = WARN, text + " yet"
        else:
            level, text = STALE, f"{text} for {now - self._last_processed:.1f} s: estimates stale"
        if recent:
            text += (f"; {recent} samples rejected in the last second "
                     f"(last: {self._last_reject_text})")
        return WAITING_FOR_INPUT, level, text

    def _publish_idle(self) -> None:
        state, level, text = self._idle_state()
        self._publish(idle_fields(state, level, text, self._figures(None), self._hardware_id()),
                      time.monotonic())

    def _publish(self, status: StatusFields, now: float) -> None:
        self._status_pub.publish(self._status_encoder.encode(status))
        self._last_status, self._last_status_time = status, now

    def _on_watch(self) -> None:
        try:
            now = time.monotonic()
            quiet = max(self.settings["health.stale_after"], WATCH_PERIOD_S)
            if self._last_processed is None or now - self._last_processed > quiet:
                self._publish_idle()
        except Exception as exc:
            self._internal_error(exc, "status check")

    def _on_diagnostics(self) -> None:
        try:
            if self._last_status is None:
                return
            msg = DiagnosticArray()
            msg.header.stamp = self.get_clock().now().to_msg()
            msg.status = [status_object(self._last_status)]
            self._diagnostics_pub.publish(msg)
        except Exception as exc:
            self._internal_error(exc, "diagnostics publication")

    # --- services --------------------------------------------------------------------------
    def _on_reset(self, request: Trigger.Request, response: Trigger.Response):
        if self.pipeline is None:
            response.success, response.message = False, (
                f"nothing to reset: no robot model ({self._idle_text()})")
            return response
        self.pipeline.reset()
        self._matcher.clear()
        self._last_restarts = self.pipeline.observer.restarts
        response.success = True
        response.message = (
            "reset: observer, torque bias, contact state and object estimates cleared; the bias "
            f"is learned for {self.settings['bias.startup']:g} s from the next joint state: keep "
            "the robot clear of contact")
        self.get_logger().info(response.message)
        return response

    def _on_calibrate(self, request: Trigger.Request, response: Trigger.Response):
        if self.pipeline is None:
            response.success, response.message = False, (
                f"refused: no robot model ({self._idle_text()})")
            return response
        response.success, response.message = self.pipeline.calibrate_bias()
        self.get_logger().info(f"calibrate_bias: {response.message}")
        return response


def make_executor():
    """rclpy's EventsExecutor where it exists, else the SingleThreadedExecutor."""
    try:
        from rclpy.experimental import EventsExecutor
        return EventsExecutor()
    except (ImportError, AttributeError, RuntimeError):
        from rclpy.executors import SingleThreadedExecutor
        return SingleThreadedExecutor()


USAGE = f"""usage: estimator_node [--ros-args [-p NAME:=VALUE] [--params-file FILE]
                                 [-r FROM:=TO] ...]

ROS 2 node '{NODE_NAME}': estimates the force a manipulator applies at its contact frame and the
mass, damping, stiffness and static force of the object, from joint states alone.
Parameters: see config/default.yaml (every one with unit, meaning and range).
"""


def main(argv: Sequence[str] | None = None) -> int:
    """Run the node until SIGINT or SIGTERM. ``argv``: the arguments after the program name
    (None: ``sys.argv[1:]``), ROS arguments after ``--ros-args``. Returns the exit status."""
    args = ["estimator_node", *(sys.argv[1:] if argv is None else argv)]
    for path in node_params.parameter_files(args):
        problem = node_params.unreadable_file(path)
        if problem:
            print(f"estimator_node: {problem}", file=sys.stderr)
            return 2
    try:
        rest = rclpy.utilities.remove_ros_args(args)[1:]
    except Exception as exc:  # rcl's parser refuses the arguments or a parameter file
        print(f"estimator_node: invalid ROS arguments: {exc}", file=sys.stderr)
        return 2
    if rest:
        if rest[0] in ("-h", "--help"):
            print(USAGE)
            return 0
        print(f"estimator_node: unexpected arguments {rest}; expected ROS arguments after "
              f"--ros-args\n\n{USAGE}", file=sys.stderr)
        return 2
    rclpy.init(args=args)
    node = None
    try:
        try:
            node = EstimatorNode(node_params.parameter_files(args))
        except SettingsError as exc:
            print(f"estimator_node: invalid parameters: {exc}", file=sys.stderr)
            return 2
        for path in node_params.parameter_files(args):
            warning = node_params.unmatched_file_warning(path, node.get_fully_qualified_name())
            if warning:
                node.get_logger().warning(warning)
        # the compiled arithmetic loaded (or, on a machine's first run, compiled) before the
        # first joint state, not while handling it
        node.get_logger().info(f"compiled arithmetic ready in {warm_up():.1f} s "
                               f"(cache {CACHE_DIR})")
        # Everything made so far (rclpy, numpy, Pinocchio, Numba: some 160 000 objects) lives
        # as long as the process: kept out of the garbage collector's full passes, which
        # otherwise scan all of it (about 0.1 s here) every so often while messages wait
        gc.collect()
        gc.freeze()
        executor = make_executor()
        executor.add_node(node)
        while rclpy.ok():
            executor.spin_once(timeout_sec=SPIN_TIMEOUT_S)
    except KeyboardInterrupt:
        pass
    except rclpy.executors.ExternalShutdownException:
        pass
    finally:
        if node is not None:
            node.destroy_node()
        rclpy.try_shutdown()
    return 0


if __name__ == "__main__":
    sys.exit(main())
