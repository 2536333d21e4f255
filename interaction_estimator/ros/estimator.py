"""The estimator's node behaviour, shared by the plain node (:class:`.node.EstimatorNode`) and
the managed one (:class:`.lifecycle.ManagedEstimatorNode`): its state, the ROS entities it
creates (publishers, subscriptions, services, timers), the robot model (from a file or the
``robot_description`` topic), and the per-message path: joint states (as bytes, or as messages
matched with separate efforts), the base's odometry and IMU, one pipeline step, the wrench and
environment messages. Parameters are :mod:`.parameter_handling`'s, the status, diagnostics and
markers :mod:`.status`'s (mixins of :class:`_Estimator`)."""
from __future__ import annotations

import math
import time
from collections import OrderedDict, deque
from collections.abc import Sequence
from pathlib import Path

from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus
from geometry_msgs.msg import WrenchStamped
from nav_msgs.msg import Odometry
from rclpy.qos import DurabilityPolicy, HistoryPolicy, QoSProfile, ReliabilityPolicy
from rclpy.serialization import deserialize_message
from sensor_msgs.msg import Imu, JointState
from std_msgs.msg import Float64MultiArray, String
from std_srvs.srv import Trigger
from visualization_msgs.msg import MarkerArray

from ..core.model import ModelError
from ..core.pipeline import Pipeline
from ..core.samples import RejectCounts, Sample, SampleRejected
from ..core.settings import Settings, SettingsError
from ..io.bag import base_records
from ..io.description_file import resolve as resolve_description
from ..io.effort_matching import EffortMatcher
from .inputs import LatencyMeter, WarningThrottle
from .markers import ContactPoint, MarkerBuilder
from .messages import (
    CARTESIAN_DIMS,
    MECHANISM_DIMS,
    MECHANISM_FIELDS,
    ArrayEncoder,
    EnvironmentEncoder,
    JointStateReader,
    StatusEncoder,
    StatusFields,
    WrenchEncoder,
    efforts_for_state,
    mechanism_numbers,
    output_numbers,
    sample_from_joint_state,
    sample_from_parts,
    stamp_is_zero,
    status_fields,
    time_message,
    time_seconds,
)
from .parameter_handling import _ParameterHandling
from .status import WATCH_PERIOD_S, _StatusReporting
from .topics import (
    ACTIVE,
    CALIBRATE_SERVICE,
    CARTESIAN_TOPIC,
    DIAGNOSTICS_TOPIC,
    ENVIRONMENT_TOPIC,
    IMU_TOPIC,
    JOINT_EFFORTS_TOPIC,
    JOINT_STATES_TOPIC,
    MARKERS_TOPIC,
    MECHANISM_TOPIC,
    ODOMETRY_TOPIC,
    RESET_SERVICE,
    ROBOT_DESCRIPTION_TOPIC,
    STATUS_TOPIC,
    WRENCH_TOPIC,
)

MARKERS_DEPTH = 5           # marker arrays kept (reliable): a viewer wants the latest
OUTPUT_DEPTH = 100          # messages kept per output publisher (reliable): 0.1 s at 1 kHz
EFFORT_BUFFER = 100         # joint states (and effort messages) held for stamp matching
HELD_CAPACITY = 10000       # joint states' stamps kept while they wait for the base's messages


class _Estimator(_ParameterHandling, _StatusReporting):
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
        # JointState read, and outputs written, as CDR bytes (see .messages)
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
