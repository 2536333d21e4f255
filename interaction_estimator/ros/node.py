"""The ROS 2 node ``interaction_estimator``: JointState in, wrench and object estimates out.

A thin adapter around :class:`~interaction_estimator.core.pipeline.Pipeline`:
message -> Sample -> Pipeline -> Estimate -> messages. Topics (relative names, so namespaces and
remapping apply):

- in ``joint_states`` (sensor_msgs/JointState: positions rad or m, velocities, efforts N·m or N),
  and with ``input.separate_efforts`` also ``joint_efforts`` (efforts only, matched by stamp);
- in ``robot_description`` (std_msgs/String, transient local) unless ``robot_description_file``
  names a URDF file;
- with ``base.source: odometry`` also in ``odometry`` (nav_msgs/Odometry) and, with
  ``base.imu``, ``imu`` (sensor_msgs/Imu): the base's state, interpolated at each joint state's
  stamp (a joint state waits for the messages after it: at most one odometry interval); the
  world frame of the outputs is then the odometry's frame_id;
- out ``~/wrench`` (geometry_msgs/WrenchStamped: force N and torque N·m the robot applies to the
  environment, world frame = URDF root unless ``output.frame_id``), ``~/environment``
  (std_msgs/Float64MultiArray: mass kg, damping N·s/m, stiffness N/m, static force N, then their
  standard deviations), ``~/status`` (diagnostic_msgs/DiagnosticStatus), ``/diagnostics`` and
  ``~/markers`` (visualization_msgs/MarkerArray for RViz, at the status rate while subscribed:
  :mod:`.markers`);
- services ``~/reset`` and ``~/calibrate_bias`` (std_srvs/Trigger).

Two kinds of node, one behaviour: :class:`EstimatorNode` is set up and running from its start;
:class:`ManagedEstimatorNode` (``--managed``) is a ROS 2 lifecycle node that a lifecycle manager
configures, activates, deactivates and cleans up (see its docstring); its status then also
reports ``unconfigured`` and ``inactive`` (the lifecycle state's label).

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

Run: ``estimator_node [--managed] --ros-args --params-file config/default.yaml -r __ns:=/arm``.
"""
from __future__ import annotations

import gc
import math
import sys
import time
from collections import OrderedDict, deque
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import rclpy
import rclpy.executors
import rclpy.utilities
from builtin_interfaces.msg import Time as TimeMsg
from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus
from geometry_msgs.msg import WrenchStamped
from nav_msgs.msg import Odometry
from rcl_interfaces.msg import SetParametersResult
from rclpy.exceptions import ParameterUninitializedException
from rclpy.lifecycle import LifecycleNode, LifecycleState, TransitionCallbackReturn
from rclpy.node import Node
from rclpy.parameter import Parameter
from rclpy.qos import DurabilityPolicy, HistoryPolicy, QoSProfile, ReliabilityPolicy
from rclpy.serialization import deserialize_message
from sensor_msgs.msg import Imu, JointState
from std_msgs.msg import Float64MultiArray, String
from std_srvs.srv import Trigger
from visualization_msgs.msg import MarkerArray

from ..core.compiled import CACHE_DIR
from ..core.environment import PARAMETER_NAMES, PARAMETER_UNITS
from ..core.health import ERROR, OK, STALE, WARN
from ..core.model import ModelError
from ..core.pipeline import Estimate, Pipeline
from ..core.samples import RejectCounts, Sample, SampleRejected
from ..core.settings import (
    NODE_NAME,
    SPEC_BY_NAME,
    SPECS,
    Settings,
    SettingsError,
    unknown_name_message,
)
from ..core.warmup import warm_up
from ..io.bag import base_records
from ..io.description_file import resolve as resolve_description
from ..io.effort_matching import EffortMatcher
from . import parameters as node_params
from .inputs import LatencyMeter, WarningThrottle
from .markers import ContactPoint, MarkerBuilder, MarkerScene
from .messages import (
    CARTESIAN_DIMS,
    MECHANISM_DIMS,
    MECHANISM_FIELDS,
    MODEL_ERROR,
    WAITING_FOR_INPUT,
    WAITING_FOR_MODEL,
    ArrayEncoder,
    EnvironmentEncoder,
    JointStateReader,
    NodeFigures,
    StatusEncoder,
    StatusFields,
    WrenchEncoder,
    efforts_for_state,
    idle_fields,
    mechanism_numbers,
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
ODOMETRY_TOPIC = "odometry"   # base.source odometry: nav_msgs/Odometry
IMU_TOPIC = "imu"             # and sensor_msgs/Imu (base.imu)
WRENCH_TOPIC = "~/wrench"
ENVIRONMENT_TOPIC = "~/environment"
CARTESIAN_TOPIC = "~/environment_cartesian"
MECHANISM_TOPIC = "~/mechanism"
STATUS_TOPIC = "~/status"
MARKERS_TOPIC = "~/markers"
DIAGNOSTICS_TOPIC = "/diagnostics"
RESET_SERVICE = "~/reset"
CALIBRATE_SERVICE = "~/calibrate_bias"
# lifecycle states as the status reports them (the labels of lifecycle_msgs/State)
UNCONFIGURED, INACTIVE, ACTIVE, FINALIZED = "unconfigured", "inactive", "active", "finalized"
INPUT_TOPICS = (JOINT_STATES_TOPIC, JOINT_EFFORTS_TOPIC, ROBOT_DESCRIPTION_TOPIC,
                ODOMETRY_TOPIC, IMU_TOPIC)
OUTPUT_TOPICS = (WRENCH_TOPIC, ENVIRONMENT_TOPIC, STATUS_TOPIC, DIAGNOSTICS_TOPIC, MARKERS_TOPIC)
# with environment.model cartesian, ~/environment_cartesian in place of ~/environment; with
# revolute or prismatic, ~/mechanism beside it (at the status rate)
MODEL_TOPICS = (CARTESIAN_TOPIC, MECHANISM_TOPIC)

MARKERS_DEPTH = 5           # marker arrays kept (reliable): a viewer wants the latest
OUTPUT_DEPTH = 100          # messages kept per output publisher (reliable): 0.1 s at 1 kHz
WATCH_PERIOD_S = 0.25       # s, period of the check that reports waiting / stale states
RATE_TOLERANCE = 0.2        # input rate "far" from input.expected_rate: off by more than 20 %
RECENT_S = 1.0              # s, window of "in the last second" counts
EFFORT_BUFFER = 100         # joint states (and effort messages) held for stamp matching
SPIN_TIMEOUT_S = 0.1        # s, executor wait per spin_once
HELD_CAPACITY = 10000       # joint states' stamps kept while they wait for the base's messages


class _Estimator:
    """The estimator's node behaviour, shared by :class:`EstimatorNode` (a plain node: all of it
    set up at construction) and :class:`ManagedEstimatorNode` (a lifecycle node: set up by its
    transitions). Mixed into an rclpy Node class."""

    managed = False

    # --- set-up in pieces (a plain node makes them all at once, a managed one per transition)
    def _init_state(self, settings: Settings) -> None:
        """Everything but the ROS entities; ``settings`` validated."""
        self._throttle = WarningThrottle(self.get_logger().warning)
        self.settings = settings
        self.pipeline: Pipeline | None = None
        self._model_text: str | None = None
        self._model_error = ""
        self._model_source = ""
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
            settings["input.stamp_tolerance"], EFFORT_BUFFER)
        self._wrench_pub = self._environment_pub = self._markers_pub = None
        self._mechanism_pub = None   # revolute and prismatic models
        self._parameter_count = 4    # the object model's (21 for cartesian)
        self._states_sub = self._efforts_sub = self._description_sub = None
        self._node_services: list = []
        self._watch_timer = None
        # markers: drawn only while someone subscribes (checked by the watch timer)
        self._markers_wanted = False
        self._markers_shown = False
        self._contact_point: ContactPoint | None = None
        self._last_sample: Sample | None = None
        self._marker_scale = self._node_setting("output.marker_force_scale")
        self._marker_builder: MarkerBuilder | None = None   # made for the current settings
        self._declare_errors: dict[str, str] = {}
        self._lifecycle = ACTIVE   # a plain node is always active; a managed one says
        self._configure_error = ""
        # base.source odometry: joint states held for the base's messages, by stamp
        self._held: OrderedDict[float, tuple] = OrderedDict()
        self._odometry_sub = self._imu_sub = None

    def _create_status_outputs(self) -> None:
        """~/status and /diagnostics (published in every lifecycle state)."""
        self._status_pub = self.create_publisher(DiagnosticStatus, STATUS_TOPIC,
                                                 self._output_qos())
        self._diagnostics_pub = self.create_publisher(DiagnosticArray, DIAGNOSTICS_TOPIC, 10)
        self._diagnostics_timer = self.create_timer(
            1.0 / self.settings["output.diagnostics_rate"], self._on_diagnostics)

    @staticmethod
    def _output_qos() -> QoSProfile:
        return QoSProfile(depth=OUTPUT_DEPTH, history=HistoryPolicy.KEEP_LAST,
                          reliability=ReliabilityPolicy.RELIABLE,
                          durability=DurabilityPolicy.VOLATILE)

    def _create_outputs(self) -> None:
        """~/wrench, ~/environment and ~/markers (lifecycle publishers in a managed node)."""
        make = self.create_lifecycle_publisher if self.managed else self.create_publisher
        qos = self._output_qos()
        self._wrench_pub = make(WrenchStamped, WRENCH_TOPIC, qos)
        model = self.settings["environment.model"]
        self._parameter_count = 21 if model == "cartesian" else 4
        if model == "cartesian":   # the 21 parameters, in place of ~/environment's four
            self._environment_pub = make(Float64MultiArray, CARTESIAN_TOPIC, qos)
            self._environment_encoder = ArrayEncoder(CARTESIAN_DIMS, 42)  # type: ignore[assignment]
        else:
            self._environment_pub = make(Float64MultiArray, ENVIRONMENT_TOPIC, qos)
            self._environment_encoder = EnvironmentEncoder()
        if model in ("revolute", "prismatic"):
            self._mechanism_pub = make(Float64MultiArray, MECHANISM_TOPIC, qos)
            self._mechanism_encoder = ArrayEncoder(MECHANISM_DIMS, len(MECHANISM_FIELDS))
        self._markers_pub = make(MarkerArray, MARKERS_TOPIC, MARKERS_DEPTH)

    def _create_inputs(self) -> None:
        """The joint-state subscriptions (and the separate efforts')."""
        s = self.settings
        reliability = (ReliabilityPolicy.RELIABLE if s["input.reliability"] == "reliable"
                       else ReliabilityPolicy.BEST_EFFORT)
        input_qos = QoSProfile(depth=s["input.queue_depth"], history=HistoryPolicy.KEEP_LAST,
                               reliability=reliability, durability=DurabilityPolicy.VOLATILE)
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
        self._odometry_sub = self._imu_sub = None
        if s["base.source"] == "odometry":   # the bytes received, read by io/cdr
            self._odometry_sub = self.create_subscription(
                Odometry, ODOMETRY_TOPIC, lambda raw: self._on_base_bytes(raw, True), input_qos,
                raw=True)
            if s["base.imu"]:
                self._imu_sub = self.create_subscription(
                    Imu, IMU_TOPIC, lambda raw: self._on_base_bytes(raw, False), input_qos,
                    raw=True)

    def _destroy_inputs(self) -> None:
        for sub in (self._states_sub, self._efforts_sub, self._odometry_sub, self._imu_sub):
            if sub is not None:
                self.destroy_subscription(sub)
        self._states_sub = self._efforts_sub = self._odometry_sub = self._imu_sub = None
        self._matcher.clear()
        self._held.clear()

    def _create_model_input(self) -> None:
        """The robot_description subscription, unless robot_description_file names a file."""
        s = self.settings
        self._description_sub = None
        self._model_source = s["robot_description_file"]
        if not self._model_source:
            description_qos = QoSProfile(depth=1, history=HistoryPolicy.KEEP_LAST,
                                         reliability=ReliabilityPolicy.RELIABLE,
                                         durability=DurabilityPolicy.TRANSIENT_LOCAL)
            self._description_sub = self.create_subscription(
                String, ROBOT_DESCRIPTION_TOPIC, self._on_description, description_qos)
            self._model_source = f"topic {self._description_sub.topic_name}"

    def _create_services(self) -> None:
        self._node_services = [self.create_service(Trigger, RESET_SERVICE, self._on_reset),
                               self.create_service(Trigger, CALIBRATE_SERVICE,
                                                   self._on_calibrate)]

    def _create_watch(self) -> None:
        self._watch_timer = self.create_timer(WATCH_PERIOD_S, self._on_watch)

    def _node_setting(self, name: str) -> Any:
        """A node-only setting (node_params.NODE_SPECS) or, once the registry has it, the
        registry's value."""
        if name in SPEC_BY_NAME:
            return self.settings[name]
        return node_params.node_value(node_params.NODE_SPEC_BY_NAME[name],
                                      self.get_parameter(name).value)


    # --- parameters (both node kinds) -------------------------------------------------
    def _declare_parameters(self) -> dict[str, str]:
        """Declare every setting (and node-only setting) as a parameter. A value from a
        parameter file that rclpy refuses (wrong type, out of the descriptor's range) leaves
        the default declared; returns {name: why} for those, and for names no setting has
        (key ``<unknown>``)."""
        errors: dict[str, str] = {}
        for spec in (*SPECS, *node_params.NODE_SPECS):
            try:
                self.declare_parameter(spec.name, node_params.declared_default(spec),
                                       node_params.descriptor(spec))
            except Exception as exc:  # a parameter-file value of the wrong type or range
                errors[spec.name] = (f"parameter {spec.name}: {exc}; expected "
                                     f"{spec.range_text()}")
                self.declare_parameter(spec.name, node_params.declared_default(spec),
                                       node_params.descriptor(spec), ignore_override=True)
        # what the parameter files and -p set (rclpy keeps it; no public accessor exists)
        overrides = list(getattr(self, "_parameter_overrides", {}))
        unknown = node_params.unknown_overrides(overrides,
                                                [n for n in overrides if self.has_parameter(n)])
        if unknown:
            errors["<unknown>"] = "; ".join(unknown_name_message(n) for n in unknown)
        return errors

    def _read_settings(self) -> Settings:
        """The settings the declared parameters hold, validated (raises SettingsError)."""
        values: dict[str, Any] = {}
        for spec in SPECS:
            try:
                param = self.get_parameter(spec.name)
            except ParameterUninitializedException:
                param = Parameter(spec.name)
            values[spec.name] = node_params.setting_value(param)
        settings = Settings(values)
        for spec in node_params.NODE_SPECS:
            node_params.node_value(spec, self.get_parameter(spec.name).value)
        return settings

    def _normalize_declared(self) -> None:
        """Store floats and typed lists where a file wrote 9 for 9.0 or [] (not for read-only
        ones)."""
        fixes = []
        for spec in (*SPECS, *node_params.NODE_SPECS):
            try:
                param = self.get_parameter(spec.name)
            except ParameterUninitializedException:
                param = Parameter(spec.name)
            fixed = node_params.normalized(param)
            if not spec.read_only and fixed.type_ != param.type_:
                fixes.append(fixed)
        if fixes:
            self.set_parameters(fixes)

    def _normalize_parameters(self, params: list[Parameter]) -> list[Parameter]:
        return [node_params.normalized(p) for p in params]

    def _on_set_parameters(self, params: list[Parameter]) -> SetParametersResult:
        node_only = {}
        for p in params:
            spec = node_params.NODE_SPEC_BY_NAME.get(p.name)
            if spec is not None:
                try:
                    node_only[p.name] = node_params.node_value(spec, p.value)
                except SettingsError as exc:
                    self.get_logger().warning(f"parameter change refused: {exc}")
                    return SetParametersResult(successful=False, reason=str(exc))
        changes = node_params.changes_from(params)
        if not changes:
            self._apply_node_only(node_only)
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
        self._apply_node_only(node_only)
        for name in changes:
            self._declare_errors.pop(name, None)
        self._matcher.tolerance_s = new["input.stamp_tolerance"]
        if new["output.diagnostics_rate"] != old["output.diagnostics_rate"]:
            self.destroy_timer(self._diagnostics_timer)
            self._diagnostics_timer = self.create_timer(1.0 / new["output.diagnostics_rate"],
                                                        self._on_diagnostics)
        self.get_logger().info("parameters changed: " + ", ".join(
            f"{k}={v!r}" for k, v in sorted(changes.items())))
        return SetParametersResult(successful=True)

    def _apply_node_only(self, values: dict[str, Any]) -> None:
        for name in values:
            self._declare_errors.pop(name, None)
        if "output.marker_force_scale" in values:
            self._marker_scale = values["output.marker_force_scale"]
            self._marker_builder = None   # made again with the new scale
        if values:
            self.get_logger().info("parameters changed: " + ", ".join(
                f"{k}={v!r}" for k, v in sorted(values.items())))

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
        self._contact_point = ContactPoint(pipeline.model)
        self._marker_builder = None
        self._clear_markers()
        self._matcher.clear()
        self._held.clear()
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
        self._contact_point = None
        self._last_sample = None

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
        if pipeline.base is not None:   # held until the base's messages around it are there
            held = self._held
            held[sample.time] = (sec, nanosec, receive, start, due)
            while len(held) > HELD_CAPACITY:
                held.popitem(last=False)
            pipeline.submit(sample, self._after_base)
            if pipeline.rejects.total > before:
                self._note_pipeline_reject(pipeline)
            return
        if not pipeline.advance(sample):
            if pipeline.rejects.total > before:
                self._note_pipeline_reject(pipeline)
            return
        self._outputs(sample, sec, nanosec, receive, start, due)

    def _after_base(self, sample: Sample) -> None:
        """A held joint state that the pipeline has just processed (base.source odometry)."""
        held = self._held
        while held:   # the ones before it were rejected (stale base), or are this one
            t, entry = held.popitem(last=False)
            if t == sample.time:
                self._outputs(sample, *entry)
                return
        stamp = time_message(sample.time)
        self._outputs(sample, stamp.sec, stamp.nanosec, math.nan, time.perf_counter(), None)

    def _on_base_bytes(self, raw: bytes, odometry: bool) -> None:
        """An Odometry or Imu message as the CDR bytes received (base.source odometry)."""
        what = "odometry" if odometry else "IMU"
        try:
            pipeline = self.pipeline
            if pipeline is None or pipeline.base is None:
                return
            receive_ns = int(self._now_s() * 1e9)
            before = pipeline.rejects.total
            for msg in base_records(odometry, [receive_ns], [raw]):
                if odometry:
                    pipeline.add_odometry(msg, self._after_base)
                else:
                    pipeline.add_imu(msg, self._after_base)
            if pipeline.rejects.total > before:
                self._note_pipeline_reject(pipeline)
        except Exception as exc:
            self._internal_error(exc, f"{what} message")

    def _outputs(self, sample: Sample, sec: int, nanosec: int, receive: float, start: float,
                 due: bool | None = None) -> None:
        """The messages of a processed sample (and a status when due)."""
        pipeline = self.pipeline
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
        numbers = output_numbers(pipeline.last_outputs(), self._parameter_count)
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
        self._last_sample = sample
        if self._status_due() if due is None else due:
            est = pipeline.estimate()
            if self._mechanism_pub is not None:
                self._mechanism_pub.publish(self._mechanism_encoder.encode(
                    mechanism_numbers(est)))
            self._publish(status_fields(est, self._figures(est), self._hardware_id()), now)
            if self._markers_wanted and numbers is not None:
                self._publish_markers(est, sample, sec, nanosec)

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
            self.pipeline.world_frame if self.pipeline is not None else "")

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
        topic = (self._states_sub.topic_name if self._states_sub is not None
                 else self.resolve_topic_name(JOINT_STATES_TOPIC))
        return f"no usable joint state on {topic}"

    def _lifecycle_state(self) -> tuple[str, int, str]:
        """The status of a managed node that is not active: the lifecycle state's label."""
        if self._lifecycle == UNCONFIGURED:
            if self._configure_error:
                return UNCONFIGURED, ERROR, self._configure_error
            return UNCONFIGURED, WARN, ("not configured: waiting for the configure transition "
                                        "(a lifecycle manager or the change_state service)")
        if self._lifecycle == FINALIZED:
            return FINALIZED, WARN, "shut down"
        if self._model_error:
            return INACTIVE, ERROR, self._model_error
        model = ("model not yet received" if self.pipeline is None
                 else f"model {self.pipeline.model.model.name!r} ready")
        return INACTIVE, OK, (f"configured and inactive ({model}): no estimates until "
                              "activated")

    def _idle_state(self) -> tuple[str, int, str]:
        if self._lifecycle != ACTIVE:
            return self._lifecycle_state()
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
            self._check_marker_subscribers()
            now = time.monotonic()
            quiet = max(self.settings["health.stale_after"], WATCH_PERIOD_S)
            if self._last_processed is None or now - self._last_processed > quiet:
                self._clear_markers()
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

    # --- markers ---------------------------------------------------------------------------
    def _publish_markers(self, est: Estimate, sample: Sample, sec: int, nanosec: int) -> None:
        """~/markers for the estimate just published (at the status rate, while subscribed)."""
        builder = self._marker_builder
        model = self._object_model()
        if builder is None:
            builder = self._marker_builder = MarkerBuilder(
                self._marker_scale, self.settings["health.stale_after"], model[0])
        scene = MarkerScene(
            frame_id=self._frame_id(), stamp=TimeMsg(sec=sec, nanosec=nanosec),
            contact_point=self._contact_point.position(sample), force=est.force,
            direction=est.direction, parameters=est.parameters.tolist(),
            parameter_std=est.parameter_std.tolist(), names=model[1],
            units=model[2], state=est.state,
            level=self._last_status.level if self._last_status is not None else est.level)
        self._markers_pub.publish(builder.markers(scene))
        self._markers_shown = True

    def _object_model(self) -> tuple[str, Sequence[str], Sequence[str]]:
        """(name, parameter names, units) of the Pipeline's object model."""
        m = getattr(self.pipeline, "object_model", None)
        if m is None:
            return "along_direction", PARAMETER_NAMES, PARAMETER_UNITS
        return m.name, m.parameter_names, m.parameter_units

    def _clear_markers(self) -> None:
        """One DELETEALL when markers are shown (stale estimates, model replaced, deactivated)."""
        if self._markers_shown and self._markers_pub is not None:
            self._markers_pub.publish(MarkerBuilder.clear(self._frame_id()))
            self._markers_shown = False

    def _check_marker_subscribers(self) -> None:
        self._markers_wanted = (self._markers_pub is not None
                                and self._markers_pub.get_subscription_count() > 0)

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


class EstimatorNode(_Estimator, Node):
    """The estimator as a ROS 2 node, set up and running from construction. Raises
    SettingsError if its parameters are invalid."""

    def __init__(self, parameter_files: Sequence[str] = (), **node_kwargs: Any):
        Node.__init__(self, NODE_NAME, **node_kwargs)
        # robot_description_file is relative to the file that sets it
        self._parameter_files = tuple(parameter_files)
        errors = self._declare_parameters()
        if errors:
            raise SettingsError("; ".join(errors.values()))
        settings = self._read_settings()
        self._normalize_declared()
        self._init_state(settings)
        self._create_status_outputs()
        self._create_outputs()
        self._create_inputs()
        self._create_model_input()
        self._create_services()
        self._create_watch()
        self.add_pre_set_parameters_callback(self._normalize_parameters)
        self.add_on_set_parameters_callback(self._on_set_parameters)

        if settings["robot_description_file"]:
            self._load_file(settings["robot_description_file"])
        self._publish_idle()


class ManagedEstimatorNode(_Estimator, LifecycleNode):
    """The estimator as a ROS 2 managed (lifecycle) node: a lifecycle manager, or the
    ``change_state`` service, takes it through its states (ROS 2 design article "Managed
    nodes"):

    - constructed (unconfigured): parameters declared; ~/status and /diagnostics say
      ``unconfigured``; nothing else exists;
    - configure: the parameters are read and validated and the URDF is read (the
      ``robot_description_file``, else the ``robot_description`` topic is subscribed and the
      model is built when it arrives); the outputs, services and the watch are created. A
      refused parameter or an unusable URDF file fails the transition (its result is FAILURE:
      the node stays unconfigured), and the reason is logged and is the status message;
    - activate: joint states are subscribed and the outputs publish;
    - deactivate: joint states unsubscribed, outputs silent, markers cleared (the estimates
      are kept; the observer restarts at the gap when activated again);
    - cleanup: everything configure made is destroyed and the model freed;
    - shutdown (from any state): the same, and the node is finalized.
    """

    managed = True

    def __init__(self, parameter_files: Sequence[str] = (), **node_kwargs: Any):
        LifecycleNode.__init__(self, NODE_NAME, **node_kwargs)
        # robot_description_file is relative to the file that sets it
        self._parameter_files = tuple(parameter_files)
        errors = self._declare_parameters()
        try:
            settings = self._read_settings()
            self._normalize_declared()
        except SettingsError as exc:   # reported by configure, which refuses to go on
            settings, errors = Settings(), {**errors, "<settings>": str(exc)}
        self._init_state(settings)
        self._declare_errors = errors
        self._lifecycle = UNCONFIGURED
        self._configure_error = ""
        self._create_status_outputs()
        self._create_watch()
        self.add_pre_set_parameters_callback(self._normalize_parameters)
        self.add_on_set_parameters_callback(self._on_set_parameters)
        self._publish_idle()

    # --- transitions (each returns SUCCESS, FAILURE or ERROR) ---------------------------
    def on_configure(self, state: LifecycleState) -> TransitionCallbackReturn:
        problems = [v for k, v in self._declare_errors.items() if k != "<settings>"]
        try:
            settings = self._read_settings()
        except SettingsError as exc:
            problems.append(str(exc))
        if problems:
            return self._configure_failed("invalid parameters: " + "; ".join(problems))
        self.settings = settings
        self._declare_errors.pop("<settings>", None)
        self._matcher = EffortMatcher(settings["input.stamp_tolerance"], EFFORT_BUFFER)
        self._marker_scale = self._node_setting("output.marker_force_scale")
        self._marker_builder = None
        path = settings["robot_description_file"]
        if path:
            self._load_file(path)
            if self.pipeline is None:
                error = self._model_error
                self._model_error = ""
                return self._configure_failed(error)
        self._create_outputs()
        self._create_model_input()
        self._create_services()
        self._configure_error = ""
        self._lifecycle = INACTIVE
        result = super().on_configure(state)
        self.get_logger().info(f"configured (model from {self._model_source})")
        self._publish_idle()
        return result

    def _configure_failed(self, why: str) -> TransitionCallbackReturn:
        self._configure_error = f"configure failed: {why}"
        self.get_logger().error(self._configure_error)
        self._retire_pipeline()
        self._publish_idle()
        return TransitionCallbackReturn.FAILURE

    def on_activate(self, state: LifecycleState) -> TransitionCallbackReturn:
        result = super().on_activate(state)   # enables the lifecycle publishers
        self._create_inputs()
        self._last_processed = None
        self._lifecycle = ACTIVE
        self.get_logger().info(f"active: reading {self._states_sub.topic_name}")
        self._publish_idle()
        return result

    def on_deactivate(self, state: LifecycleState) -> TransitionCallbackReturn:
        self._destroy_inputs()
        self._clear_markers()
        self._lifecycle = INACTIVE
        result = super().on_deactivate(state)   # silences the lifecycle publishers
        self.get_logger().info("inactive: joint states no longer read, outputs silent")
        self._publish_idle()
        return result

    def on_cleanup(self, state: LifecycleState) -> TransitionCallbackReturn:
        self._tear_down()
        self.get_logger().info("cleaned up: model freed")
        self._publish_idle()
        return TransitionCallbackReturn.SUCCESS

    def on_shutdown(self, state: LifecycleState) -> TransitionCallbackReturn:
        self._tear_down()
        self._lifecycle = FINALIZED
        self._publish_idle()
        return TransitionCallbackReturn.SUCCESS

    def on_error(self, state: LifecycleState) -> TransitionCallbackReturn:
        self._tear_down()
        return TransitionCallbackReturn.SUCCESS   # back to unconfigured

    def _tear_down(self) -> None:
        """Destroy what configure and activate made; free the model."""
        self._destroy_inputs()
        self._clear_markers()   # from active (shutdown): its publisher is still enabled
        for pub in (self._wrench_pub, self._environment_pub, self._markers_pub,
                    self._mechanism_pub):
            if pub is not None:
                self.destroy_lifecycle_publisher(pub)
        self._wrench_pub = self._environment_pub = self._markers_pub = None
        self._mechanism_pub = None
        self._markers_wanted = False
        if self._description_sub is not None:
            self.destroy_subscription(self._description_sub)
            self._description_sub = None
        for srv in self._node_services:
            self.destroy_service(srv)
        self._node_services = []
        self._retire_pipeline()
        self._model_text, self._model_error = None, ""
        self._last_processed = None
        self._lifecycle = UNCONFIGURED


def make_executor():
    """rclpy's EventsExecutor where it exists, else the SingleThreadedExecutor."""
    try:
        from rclpy.experimental import EventsExecutor
        return EventsExecutor()
    except (ImportError, AttributeError, RuntimeError):
        from rclpy.executors import SingleThreadedExecutor
        return SingleThreadedExecutor()


USAGE = f"""usage: estimator_node [--managed] [--ros-args [-p NAME:=VALUE] [--params-file FILE]
                                 [-r FROM:=TO] ...]

ROS 2 node '{NODE_NAME}': estimates the force a manipulator applies at its contact frame and the
mass, damping, stiffness and static force of the object, from joint states alone.

  --managed    run as a managed (lifecycle) node: it waits, unconfigured, for the configure
               and activate transitions of a lifecycle manager or of the change_state
               service (--managed=false: the plain node, the default)

Parameters: see config/default.yaml (every one with unit, meaning and range).
"""


def managed_flag(args: list[str]) -> tuple[bool | None, list[str]]:
    """(--managed given as true/false, or None when absent; the other arguments). Accepts
    ``--managed``, ``--managed=true`` and ``--managed=false`` (what the launch file passes);
    returns (None, args) with the bad argument left in ``args`` for anything else."""
    managed, rest = False, []
    for a in args:
        if a == "--managed":
            managed = True
        elif a.startswith("--managed="):
            value = a.split("=", 1)[1].strip().lower()
            if value not in ("true", "false"):
                return None, [a]
            managed = value == "true"
        else:
            rest.append(a)
    return managed, rest


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
    managed, rest = managed_flag(rest)
    if managed is None:
        print(f"estimator_node: {rest[0]!r} is not allowed; expected --managed, "
              f"--managed=true or --managed=false\n\n{USAGE}", file=sys.stderr)
        return 2
    if rest:
        if rest[0] in ("-h", "--help"):
            print(USAGE)
            return 0
        print(f"estimator_node: unexpected arguments {rest}; expected --managed and ROS "
              f"arguments after --ros-args\n\n{USAGE}", file=sys.stderr)
        return 2
    rclpy.init(args=args)
    node = None
    try:
        try:
            files = node_params.parameter_files(args)
            node = ManagedEstimatorNode(files) if managed else EstimatorNode(files)
        except SettingsError as exc:
            print(f"estimator_node: invalid parameters: {exc}", file=sys.stderr)
            return 2
        except Exception:
            if not rclpy.ok():   # SIGINT or SIGTERM while the node was being built: a stop
                return 0
            raise
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
