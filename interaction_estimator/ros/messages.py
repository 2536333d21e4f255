"""ROS 2 messages <-> the pipeline's records, for the node; no node, no I/O.

JointState -> :class:`~interaction_estimator.core.samples.Sample`, and
:class:`~interaction_estimator.core.pipeline.Estimate` -> WrenchStamped, Float64MultiArray and
DiagnosticStatus message objects. What the messages hold is defined once, without rclpy, in
:mod:`interaction_estimator.io.node_outputs` (layouts, status key-values) and written as CDR
bytes by :mod:`interaction_estimator.io.cdr`; this module adds the rclpy side: the message
objects, and the start-up self-check of the byte encoders against rclpy's own serializer
(:class:`WrenchEncoder`, :class:`EnvironmentEncoder`, :class:`StatusEncoder`: bytes when they
agree, message objects should they ever disagree, so a change of encoding costs speed, never
correctness). The names the node uses from io/ are imported here for it (see ``__all__``).

Time: a stamp (sec, nanosec) is :func:`~interaction_estimator.io.cdr.stamp_seconds` seconds.
A zero stamp means "not stamped": the receive time is used instead and the sample is flagged
(``stamp_from_receive``).
"""
from __future__ import annotations

from array import array
from collections.abc import Iterable, Sequence

import numpy as np
from builtin_interfaces.msg import Time as TimeMsg
from diagnostic_msgs.msg import DiagnosticStatus, KeyValue
from geometry_msgs.msg import WrenchStamped
from rclpy.serialization import deserialize_message
from sensor_msgs.msg import JointState
from std_msgs.msg import Float64MultiArray, MultiArrayDimension

from ..core.health import WARN
from ..core.samples import Sample
from ..io import cdr
from ..io.cdr import JointStateReader, seconds_to_stamp, stamp_seconds
from ..io.effort_matching import efforts_in_order
from ..io.node_outputs import (
    CARTESIAN_DIMS,
    ENVIRONMENT_DIMS,
    MECHANISM_DIMS,
    MECHANISM_FIELDS,
    NodeFigures,
    StatusFields,
    environment_encoder,
    estimate_outputs,
    idle_fields,
    mechanism_numbers,
    output_numbers,
    outputs_finite,
    status_fields,
)

__all__ = [
    "ArrayEncoder", "CARTESIAN_DIMS", "MECHANISM_DIMS", "MECHANISM_FIELDS", "mechanism_numbers",
    "MODEL_ERROR", "WAITING_FOR_INPUT", "WAITING_FOR_MODEL", "EnvironmentEncoder",
    "JointStateReader", "NodeFigures", "StatusEncoder", "StatusFields", "WrenchEncoder",
    "efforts_for_state", "environment_message", "environment_message_template",
    "estimate_outputs", "idle_fields", "idle_status", "output_numbers", "outputs_finite",
    "sample_from_joint_state", "sample_from_parts", "stamp_is_zero", "status_fields",
    "status_message", "status_object", "status_values", "time_message", "time_seconds",
    "wrench_message",
]

# Status states the node itself reports when there is no estimate to report.
WAITING_FOR_MODEL = "waiting_for_model"   # level WARN: no URDF received or read yet
MODEL_ERROR = "model_error"               # level ERROR: the URDF (or settings for it) is unusable
WAITING_FOR_INPUT = "waiting_for_input"   # WARN before any joint state, STALE once input stops


def time_seconds(stamp: TimeMsg) -> float:
    """builtin_interfaces/Time -> seconds (:func:`~interaction_estimator.io.cdr.stamp_seconds`)."""
    return stamp_seconds(stamp.sec, stamp.nanosec)


def stamp_is_zero(stamp: TimeMsg) -> bool:
    return stamp.sec == 0 and stamp.nanosec == 0


def time_message(t: float) -> TimeMsg:
    """Seconds -> builtin_interfaces/Time (:func:`~interaction_estimator.io.cdr.seconds_to_stamp`:
    nanosecond resolution, rounded)."""
    sec, nanosec = seconds_to_stamp(t)
    return TimeMsg(sec=sec, nanosec=nanosec)


def sample_from_joint_state(msg: JointState, receive_time: float,
                            effort: Sequence[float] | None = None) -> Sample:
    """A Sample from one JointState (efforts from ``effort`` when given, else from ``msg``).

    receive_time: s, used (and flagged) only when the message stamp is zero. Lengths and values
    are not checked here: the pipeline's validator does that and counts what it rejects.
    """
    zero = stamp_is_zero(msg.header.stamp)
    t = receive_time if zero else time_seconds(msg.header.stamp)
    return Sample(
        time=t,
        names=tuple(msg.name),
        position=np.asarray(msg.position, dtype=float),
        velocity=np.asarray(msg.velocity, dtype=float),
        effort=np.asarray(msg.effort if effort is None else effort, dtype=float),
        stamp_from_receive=zero,
    )


def sample_from_parts(parts: tuple, receive_time: float) -> Sample:
    """A Sample from what :meth:`JointStateReader.read` returns (sec, nanosec, names,
    position, velocity, effort); as :func:`sample_from_joint_state` for the same message."""
    sec, nanosec, names, position, velocity, effort = parts
    zero = sec == 0 and nanosec == 0
    return Sample(receive_time if zero else stamp_seconds(sec, nanosec), names, position,
                  velocity, effort, zero)


def efforts_for_state(state: JointState, efforts: JointState,
                      model_joints: Iterable[str]) -> tuple[list[float] | None, str]:
    """Efforts of ``efforts`` arranged in the joint order of ``state``
    (:func:`~interaction_estimator.io.effort_matching.efforts_in_order`): (values, "") or
    (None, reason) when a model joint has no effort."""
    return efforts_in_order(state.name, efforts.name, efforts.effort, model_joints)


def wrench_message(est, frame_id: str, stamp: TimeMsg,
                   msg: WrenchStamped | None = None) -> WrenchStamped:
    """Force (N) and torque (N·m) the robot applies to the environment, world frame.

    ``msg``: a message to fill (reused between publications, which copy it), else a new one.
    """
    msg = WrenchStamped() if msg is None else msg
    msg.header.stamp = stamp
    msg.header.frame_id = frame_id
    f, tq = est.force, est.torque
    msg.wrench.force.x, msg.wrench.force.y, msg.wrench.force.z = (float(f[0]), float(f[1]),
                                                                  float(f[2]))
    msg.wrench.torque.x, msg.wrench.torque.y, msg.wrench.torque.z = (float(tq[0]), float(tq[1]),
                                                                     float(tq[2]))
    return msg


def environment_message_template() -> Float64MultiArray:
    """An ~/environment message with its labelled layout and no data yet."""
    msg = Float64MultiArray()
    msg.layout.dim = [MultiArrayDimension(label=label, size=size, stride=stride)
                      for label, size, stride in ENVIRONMENT_DIMS]
    msg.layout.data_offset = 0
    return msg


def environment_message(est, msg: Float64MultiArray | None = None) -> Float64MultiArray:
    """[mass kg, damping N·s/m, stiffness N/m, static_force N] then their standard deviations.

    Layout: dim[0] rows (value, std; stride 8), dim[1] the four parameters (stride 4), so
    ``data[0:4]`` are the values and ``data[4:8]`` the standard deviations. ``msg``: a message
    from :func:`environment_message_template` to refill (publication copies it).
    """
    msg = environment_message_template() if msg is None else msg
    msg.data = array("d", np.concatenate((est.parameters, est.parameter_std)).astype(
        float).tobytes())
    return msg


def status_object(fields: StatusFields) -> DiagnosticStatus:
    """A status record as a diagnostic_msgs/DiagnosticStatus."""
    return DiagnosticStatus(level=bytes([fields.level]), name=fields.name,
                            message=fields.message, hardware_id=fields.hardware_id,
                            values=[KeyValue(key=k, value=v) for k, v in fields.pairs])


def status_message(est, fig: NodeFigures, hardware_id: str) -> DiagnosticStatus:
    """:func:`~interaction_estimator.io.node_outputs.status_fields` as a DiagnosticStatus."""
    return status_object(status_fields(est, fig, hardware_id))


def idle_status(state: str, level: int, message: str, fig: NodeFigures,
                hardware_id: str) -> DiagnosticStatus:
    """:func:`~interaction_estimator.io.node_outputs.idle_fields` as a DiagnosticStatus."""
    return status_object(idle_fields(state, level, message, fig, hardware_id))


def status_values(status: DiagnosticStatus) -> dict[str, str]:
    """The key-values of a status as a dict (for controllers and tests)."""
    return {kv.key: kv.value for kv in status.values}


# --- the byte encoders, checked against rclpy once ------------------------------------------
# rclpy publishes a bytes object as it is (Publisher.publish), so the node writes ~/wrench,
# ~/environment and ~/status as the bytes of io.cdr. Each encoder below checks those bytes once
# against rclpy's own deserializer and, should they ever disagree, hands out message objects
# instead (publish takes either).


def _agrees(raw: bytes, reference) -> bool:
    """True when rclpy's deserializer reads ``raw`` back as a message equal to ``reference``."""
    try:
        return deserialize_message(raw, type(reference)) == reference
    except Exception:  # any failure to read it back means: do not use the encoder
        return False


class WrenchEncoder:
    """~/wrench (geometry_msgs/WrenchStamped) for one frame_id: the stamp, then force (N) and
    torque (N·m) the robot applies, as :func:`wrench_message` fills them; CDR bytes of
    :class:`~interaction_estimator.io.cdr.WrenchEncoder` when they pass the check (``raw``)."""

    def __init__(self, frame_id: str):
        self.frame_id = frame_id
        self._bytes = cdr.WrenchEncoder(frame_id).encode
        probe = WrenchStamped()
        probe.header.stamp.sec, probe.header.stamp.nanosec = 1234567890, 987654321
        probe.header.frame_id = frame_id
        values = (1.5, -2.25, 3e-300, -4e300, 0.1, -0.0)
        w = probe.wrench
        w.force.x, w.force.y, w.force.z, w.torque.x, w.torque.y, w.torque.z = values
        self.raw = _agrees(self._bytes(1234567890, 987654321, values[:3], values[3:]), probe)

    def encode(self, sec: int, nanosec: int, force: Sequence[float],
               torque: Sequence[float]) -> bytes | WrenchStamped:
        """Stamp (sec, nanosec), force (3,) N and torque (3,) N·m as floats."""
        if self.raw:
            return self._bytes(sec, nanosec, force, torque)
        msg = WrenchStamped()
        msg.header.stamp.sec, msg.header.stamp.nanosec = sec, nanosec
        msg.header.frame_id = self.frame_id
        w = msg.wrench
        w.force.x, w.force.y, w.force.z = force
        w.torque.x, w.torque.y, w.torque.z = torque
        return msg


class EnvironmentEncoder:
    """~/environment (std_msgs/Float64MultiArray): the labelled layout of
    :func:`environment_message_template`, then the four values and their four standard
    deviations (see :func:`environment_message`); CDR bytes when they pass the check."""

    def __init__(self) -> None:
        self._bytes = environment_encoder().encode
        probe = environment_message_template()
        values = (1.5, -2.25, 3e-300, -4e300, 0.1, -0.0, 7.0, 1e-3)
        probe.data = array("d", values)
        self.raw = _agrees(self._bytes(*values), probe)

    def encode(self, values: Sequence[float],
               stds: Sequence[float]) -> bytes | Float64MultiArray:
        """values (4,): mass kg, damping N·s/m, stiffness N/m, static force N; stds (4,)."""
        if self.raw:
            return self._bytes(*values, *stds)
        msg = environment_message_template()
        msg.data = array("d", [*values, *stds])
        return msg


class ArrayEncoder:
    """A Float64MultiArray of a fixed labelled layout (dims: (label, size, stride) each) and
    ``count`` numbers: ``~/environment_cartesian`` and ``~/mechanism``; CDR bytes when they pass
    the check against rclpy, message objects otherwise."""

    def __init__(self, dims: Sequence[tuple[str, int, int]], count: int):
        self._dims, self.count = tuple(dims), count
        self._bytes = cdr.Float64MultiArrayEncoder(dims, count).encode
        probe = self._template()
        values = [1.5, -2.25, 3e-300, -4e300, 0.1, -0.0, 7.0, 1e-3] * (count // 8 + 1)
        probe.data = array("d", values[:count])
        self.raw = _agrees(self._bytes(*values[:count]), probe)

    def _template(self) -> Float64MultiArray:
        msg = Float64MultiArray()
        msg.layout.dim = [MultiArrayDimension(label=label, size=size, stride=stride)
                          for label, size, stride in self._dims]
        msg.layout.data_offset = 0
        return msg

    def encode(self, *parts: Sequence[float]) -> bytes | Float64MultiArray:
        """The numbers of ``parts`` in order (e.g. the values, then their stds)."""
        numbers = [x for part in parts for x in part]
        if self.raw:
            return self._bytes(*numbers)
        msg = self._template()
        msg.data = array("d", [float(x) for x in numbers])
        return msg


class StatusEncoder:
    """~/status (diagnostic_msgs/DiagnosticStatus) from :class:`StatusFields`; CDR bytes of
    :class:`~interaction_estimator.io.cdr.StatusEncoder` when they pass the check."""

    def __init__(self) -> None:
        self._bytes = cdr.StatusEncoder().encode
        probe = StatusFields(WARN, "ns/interaction_estimator", "a message · with UTF-8",
                             "hw", [("mass[kg]", "1.5"), ("damping[N·s/m]", "n/a"),
                                    ("last_reject", ""), ("k", "abcd"), ("kk", "abc")])
        self.raw = _agrees(self._bytes(probe), status_object(probe))

    def encode(self, status: StatusFields) -> bytes | DiagnosticStatus:
        if self.raw:
            return self._bytes(status)
        return status_object(status)
