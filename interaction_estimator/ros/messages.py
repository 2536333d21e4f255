"""Conversions between ROS 2 messages and the pipeline's records; no node, no I/O.

JointState -> :class:`~interaction_estimator.core.samples.Sample`, and
:class:`~interaction_estimator.core.pipeline.Estimate` -> WrenchStamped, Float64MultiArray and
DiagnosticStatus, as message objects and as the CDR bytes the node actually reads and publishes
(:class:`JointStateReader`, :class:`WrenchEncoder`, :class:`EnvironmentEncoder`,
:class:`StatusEncoder`; same content, checked against rclpy's deserializer). Kept apart from the
node so that every field's meaning and unit is written down in one place and a test can read the
same definitions.

Time: a stamp is ``sec + nanosec * 1e-9`` seconds (float). A zero stamp means "not stamped": the
receive time is used instead and the sample is flagged (``stamp_from_receive``).

Status key-values are strings. Numbers are written with ``repr`` (shortest text that reads back
to the same float), so a controller can parse them without loss; a non-finite number is never
written: it becomes ``n/a``. Keys carry their unit in brackets, SI: ``mass[kg]``,
``bias_age[s]``.
"""
from __future__ import annotations

import math
import struct
from array import array
from dataclasses import dataclass, field
from typing import Iterable, Mapping, NamedTuple, Sequence

import numpy as np
from builtin_interfaces.msg import Time as TimeMsg
from diagnostic_msgs.msg import DiagnosticStatus, KeyValue
from geometry_msgs.msg import WrenchStamped
from rclpy.serialization import deserialize_message
from sensor_msgs.msg import JointState
from std_msgs.msg import Float64MultiArray, MultiArrayDimension

from ..io.bag import JointStateDecoder
from ..core.environment import PARAMETER_NAMES, PARAMETER_UNITS
from ..core.health import ERROR, OK, STALE, WARN
from ..core.samples import Sample

# Layout of ~/environment: data[row * 4 + column]; row 0 the values, row 1 their standard
# deviations; column i is parameter PARAMETER_NAMES[i] in PARAMETER_UNITS[i].
ENVIRONMENT_ROWS = ("value", "std")
ENVIRONMENT_ROW_LABEL = "row: value, std (standard deviation, same unit as the value)"
ENVIRONMENT_COLUMN_LABEL = "column: " + ", ".join(
    f"{n} [{u}]" for n, u in zip(PARAMETER_NAMES, PARAMETER_UNITS))

# Status states the node itself reports when there is no estimate to report.
WAITING_FOR_MODEL = "waiting_for_model"   # level WARN: no URDF received or read yet
MODEL_ERROR = "model_error"               # level ERROR: the URDF (or settings for it) is unusable
WAITING_FOR_INPUT = "waiting_for_input"   # WARN before any joint state, STALE once input stops

_SEVERITY = {OK: 0, WARN: 1, STALE: 2, ERROR: 3}  # ERROR is the worst, then STALE


def worse_level(a: int, b: int) -> int:
    """The more severe of two DiagnosticStatus levels (OK < WARN < STALE < ERROR)."""
    return a if _SEVERITY.get(a, 3) >= _SEVERITY.get(b, 3) else b


def stamp_seconds(stamp: TimeMsg) -> float:
    """Header stamp -> seconds (float): ``sec + nanosec * 1e-9``."""
    return stamp.sec + stamp.nanosec * 1e-9


def stamp_is_zero(stamp: TimeMsg) -> bool:
    return stamp.sec == 0 and stamp.nanosec == 0


def seconds_to_stamp(t: float) -> TimeMsg:
    """Seconds -> builtin_interfaces/Time (nanosecond resolution, rounded)."""
    ns = int(round(t * 1e9))
    return TimeMsg(sec=ns // 1_000_000_000, nanosec=ns % 1_000_000_000)


def sample_from_joint_state(msg: JointState, receive_time: float,
                            effort: Sequence[float] | None = None) -> Sample:
    """A Sample from one JointState (efforts from ``effort`` when given, else from ``msg``).

    receive_time: s, used (and flagged) only when the message stamp is zero. Lengths and values
    are not checked here: the pipeline's validator does that and counts what it rejects.
    """
    zero = stamp_is_zero(msg.header.stamp)
    t = receive_time if zero else stamp_seconds(msg.header.stamp)
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
    return Sample(receive_time if zero else sec + nanosec * 1e-9, names, position, velocity,
                  effort, zero)


def efforts_for_state(state: JointState, efforts: JointState,
                      model_joints: Iterable[str]) -> tuple[list[float] | None, str]:
    """Efforts of ``efforts`` arranged in the joint order of ``state``.

    Returns (values, "") or (None, reason) when a model joint has no effort. An effort message
    without names is taken to be in the state's order if it has one effort per state joint.
    Joints the model does not have get 0.0 (they are not used).
    """
    names = list(state.name)
    values = list(efforts.effort)
    if not efforts.name:
        if len(values) == len(names):
            return [float(v) for v in values], ""
        return None, (f"effort message has no names and {len(values)} efforts; expected "
                      f"{len(names)} (one per joint of the joint state) or names")
    if len(efforts.name) != len(values):
        return None, (f"effort message has {len(efforts.name)} names but {len(values)} "
                      f"efforts; expected one effort per name")
    by_name = dict(zip(efforts.name, values))
    model = set(model_joints)
    missing = [n for n in names if n in model and n not in by_name]
    if missing:
        return None, f"effort message lacks model joints {missing}; it has {list(efforts.name)}"
    return [float(by_name.get(n, 0.0)) for n in names], ""


def output_numbers(numbers: Sequence[float]
                   ) -> tuple[list[float], list[float], list[float], list[float]] | None:
    """The 14 numbers the wrench and environment messages carry (force (3) N, torque (3) N·m,
    parameters (4), their standard deviations (4): :meth:`.Pipeline.last_outputs`, or
    :func:`estimate_outputs`) split into those four lists; None when any of them is not finite.

    One sum: NaN or infinity anywhere makes it non-finite (a sum of huge finite values that
    overflows counts as non-finite too, which errs on the safe side)."""
    if math.isfinite(sum(numbers)):
        return numbers[0:3], numbers[3:6], numbers[6:10], numbers[10:14]
    return None


def estimate_outputs(est) -> list[float]:
    """The 14 numbers of an Estimate that the output messages carry, in the order of
    :meth:`.Pipeline.last_outputs`."""
    return (est.force.tolist() + est.torque.tolist() + est.parameters.tolist()
            + est.parameter_std.tolist())


def outputs_finite(est) -> bool:
    """True when every number the wrench and environment messages would carry is finite
    (see :func:`output_numbers`)."""
    return output_numbers(estimate_outputs(est)) is not None


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
    msg.layout.dim = [
        MultiArrayDimension(label=ENVIRONMENT_ROW_LABEL, size=2, stride=8),
        MultiArrayDimension(label=ENVIRONMENT_COLUMN_LABEL, size=4, stride=4),
    ]
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


def number_text(x: float) -> str:
    """A float as text that reads back exactly; ``n/a`` for NaN or infinity."""
    x = float(x)
    return repr(x) if math.isfinite(x) else "n/a"


def _flag(b: bool) -> str:
    return "true" if b else "false"


@dataclass
class NodeFigures:
    """What the node adds to the pipeline's figures (units in the names).

    rejects: counts by reason, pipeline and node together. latency_s: mean processing time per
    message (receive -> published), s; latency_max_s: largest since the last status.
    input_age_s: receive time minus stamp of the last sample, s. findings: node-level
    warnings (one short sentence each) with the level they raise.
    """

    node_name: str
    rejects: Mapping[str, int] = field(default_factory=dict)
    last_reject: str = ""
    errors: int = 0
    latency_s: float = 0.0
    latency_max_s: float = 0.0
    input_age_s: float = math.nan
    frame_id: str = ""
    model_name: str = ""
    joints: int = 0
    contact_frame: str = ""
    findings: Sequence[tuple[int, str]] = ()


class StatusFields(NamedTuple):
    """The content of one DiagnosticStatus: level (0 OK, 1 WARN, 2 ERROR, 3 STALE), name,
    message, hardware_id and the key-values as (key, value) text pairs, in order."""

    level: int
    name: str
    message: str
    hardware_id: str
    pairs: list[tuple[str, str]]

    def message_object(self) -> DiagnosticStatus:
        """The same status as a diagnostic_msgs/DiagnosticStatus."""
        return DiagnosticStatus(level=bytes([self.level]), name=self.name, message=self.message,
                                hardware_id=self.hardware_id,
                                values=[KeyValue(key=k, value=v) for k, v in self.pairs])


def _node_pairs(fig: NodeFigures) -> list[tuple[str, str]]:
    rejects = fig.rejects
    kv = [("rejects_total", str(sum(rejects.values())))]
    kv += [(f"rejects.{reason}", str(n)) for reason, n in sorted(rejects.items())]
    kv += [
        ("last_reject", fig.last_reject),
        ("errors_total", str(fig.errors)),
        ("latency[s]", number_text(fig.latency_s)),
        ("latency_max[s]", number_text(fig.latency_max_s)),
        ("input_age[s]", number_text(fig.input_age_s)),
        ("model", fig.model_name),
        ("joints", str(fig.joints)),
        ("contact_frame", fig.contact_frame),
        ("frame_id", fig.frame_id),
    ]
    return kv


def _combine(level: int, message: str, findings: Sequence[tuple[int, str]]) -> tuple[int, str]:
    for lvl, text in findings:
        level = worse_level(level, lvl)
        message = f"{message}; {text}" if message else text
    return level, message


# per parameter, in PARAMETER_NAMES order: value, std, excited and converged keys
_PARAMETER_KEYS = tuple((f"{n}[{u}]", f"{n}_std[{u}]", f"{n}_excited", f"{n}_converged")
                        for n, u in zip(PARAMETER_NAMES, PARAMETER_UNITS))


def status_fields(est, fig: NodeFigures, hardware_id: str) -> StatusFields:
    """The status for one estimate: the pipeline's verdict plus the node's own findings."""
    level, message = _combine(est.level, est.message, fig.findings)
    kv = [
        ("state", est.state),
        ("time[s]", number_text(est.time)),
        ("converged", _flag(est.converged)),
        ("in_contact", _flag(est.in_contact)),
        ("phase", est.phase),
        ("event", est.event),
    ]
    for keys, value, std, excited, converged in zip(
            _PARAMETER_KEYS, est.parameters.tolist(), est.parameter_std.tolist(),
            est.excited.tolist(), est.parameter_converged.tolist()):
        kv += [(keys[0], number_text(value)), (keys[1], number_text(std)),
               (keys[2], _flag(excited)), (keys[3], _flag(converged))]
    kv += [
        ("force_along[N]", number_text(est.force_along)),
        ("position_along[m]", number_text(est.position_along)),
        ("velocity_along[m/s]", number_text(est.velocity_along)),
        ("acceleration_along[m/s^2]", number_text(est.acceleration_along)),
        ("kinematics_lag[s]", number_text(est.kinematics_lag)),
        ("direction", " ".join(number_text(c) for c in est.direction.tolist())),
        ("nis", number_text(est.nis)),
        ("nis_average", number_text(est.nis_average)),
        ("nis_lower", number_text(est.nis_bounds[0])),
        ("nis_upper", number_text(est.nis_bounds[1])),
        ("measurement_std[N]", number_text(est.measurement_std)),
        ("bias_age[s]", number_text(est.bias_age)),
        ("input_rate[Hz]", number_text(est.rate_hz)),
        ("stamp_from_receive", _flag(est.stamp_from_receive)),
        ("observer_restarts", str(est.observer_restarts)),
        ("jacobian_condition", number_text(est.jacobian_condition)),
        ("contact_level", number_text(est.contact_level)),
    ]
    kv += _node_pairs(fig)
    return StatusFields(level, fig.node_name, message, hardware_id, kv)


def idle_fields(state: str, level: int, message: str, fig: NodeFigures,
                hardware_id: str) -> StatusFields:
    """A status when there is no estimate: waiting for a model or for input, or a model error."""
    level, message = _combine(level, message, fig.findings)
    kv = [("state", state), ("converged", "false")]
    kv += _node_pairs(fig)
    return StatusFields(level, fig.node_name, message, hardware_id, kv)


def status_message(est, fig: NodeFigures, hardware_id: str) -> DiagnosticStatus:
    """:func:`status_fields` as a diagnostic_msgs/DiagnosticStatus."""
    return status_fields(est, fig, hardware_id).message_object()


def idle_status(state: str, level: int, message: str, fig: NodeFigures,
                hardware_id: str) -> DiagnosticStatus:
    """:func:`idle_fields` as a diagnostic_msgs/DiagnosticStatus."""
    return idle_fields(state, level, message, fig, hardware_id).message_object()


def status_values(status: DiagnosticStatus) -> dict[str, str]:
    """The key-values of a status as a dict (for controllers and tests)."""
    return {kv.key: kv.value for kv in status.values}


# --- the frequent messages as CDR bytes -------------------------------------------------------
# rclpy publishes a bytes object as it is (Publisher.publish), and a raw subscription hands the
# callback the bytes received. Converting message objects to and from rclpy's C structures and
# serializing them costs more than everything else the node does per message outside the
# pipeline (test/benchmarks/bench_node_callback.py), so the node reads JointState and writes
# ~/wrench, ~/environment and ~/status as bytes. Encoding: plain little-endian CDR (XCDR1, what
# ROS 2's default middleware sends): a 4-byte encapsulation header, then the fields in order,
# each primitive aligned to its size counted from the end of the header, a string as uint32
# length (terminating NUL included), its UTF-8 bytes and a NUL, a sequence as uint32 count then
# its elements. Padding is zero. Each encoder checks its output once against rclpy's own
# deserializer and, should they ever disagree, hands out message objects instead (publish takes
# either), so a change of encoding costs speed, never correctness.

_CDR_LE = b"\x00\x01\x00\x00"          # encapsulation: plain CDR, little-endian
_U32 = struct.Struct("<I")
_ZEROS = bytes(8)


def _cdr_string(text: str) -> bytes:
    """A CDR string (starting 4-aligned), without padding after it."""
    data = text.encode()
    return _U32.pack(len(data) + 1) + data + b"\x00"


def _pad(chunk: bytes, size: int = 4) -> bytes:
    """``chunk`` (starting ``size``-aligned) followed by zeros up to a multiple of ``size``."""
    return chunk + _ZEROS[:-len(chunk) % size]


def _agrees(raw: bytes, reference) -> bool:
    """True when rclpy's deserializer reads ``raw`` back as a message equal to ``reference``."""
    try:
        return deserialize_message(raw, type(reference)) == reference
    except Exception:  # any failure to read it back means: do not use the encoder
        return False


class JointStateReader:
    """sensor_msgs/JointState CDR bytes -> (sec, nanosec, names, position, velocity, effort),
    read by the replay's decoder (:class:`~.bag.JointStateDecoder`: names decoded once per
    distinct name list, the arrays as aligned float64 copies (n,)). :meth:`read` returns None
    for bytes it does not handle (not little-endian plain CDR, or a layout that does not add
    up; counted in ``fallbacks``): the caller then deserializes them with rclpy. Values and
    lengths are not checked here: the pipeline's validator does that and counts what it
    rejects.
    """

    def __init__(self) -> None:
        self._decoder = JointStateDecoder(generic_fallback=False)

    @property
    def fallbacks(self) -> int:
        return self._decoder.fallbacks

    def read(self, buf: bytes):
        try:
            sec, nanosec, _, names, position, velocity, effort = self._decoder.fields(buf)
        except ValueError:
            return None
        return sec, nanosec, names, position, velocity, effort


class WrenchEncoder:
    """~/wrench (geometry_msgs/WrenchStamped) as CDR bytes for one frame_id: the stamp, then
    force (N) and torque (N·m) the robot applies, as :func:`wrench_message` fills them."""

    def __init__(self, frame_id: str):
        self.frame_id = frame_id
        # stamp at 0 (8 bytes), frame_id at 8, the six doubles 8-aligned after it
        frame = _cdr_string(frame_id)
        frame += _ZEROS[:-(8 + len(frame)) % 8]
        self._frame = frame
        self._pack = struct.Struct(f"<4siI{len(frame)}s6d").pack
        probe = WrenchStamped()
        probe.header.stamp.sec, probe.header.stamp.nanosec = 1234567890, 987654321
        probe.header.frame_id = frame_id
        values = (1.5, -2.25, 3e-300, -4e300, 0.1, -0.0)
        w = probe.wrench
        w.force.x, w.force.y, w.force.z, w.torque.x, w.torque.y, w.torque.z = values
        self.raw = True
        self.raw = _agrees(self.encode(1234567890, 987654321, values[:3], values[3:]), probe)

    def encode(self, sec: int, nanosec: int, force: Sequence[float],
               torque: Sequence[float]) -> bytes | WrenchStamped:
        """Stamp (sec, nanosec), force (3,) N and torque (3,) N·m as floats."""
        if self.raw:
            return self._pack(_CDR_LE, sec, nanosec, self._frame, *force, *torque)
        msg = WrenchStamped()
        msg.header.stamp.sec, msg.header.stamp.nanosec = sec, nanosec
        msg.header.frame_id = self.frame_id
        w = msg.wrench
        w.force.x, w.force.y, w.force.z = force
        w.torque.x, w.torque.y, w.torque.z = torque
        return msg


class EnvironmentEncoder:
    """~/environment (std_msgs/Float64MultiArray) as CDR bytes: the labelled layout of
    :func:`environment_message_template`, then the four values and their four standard
    deviations (see :func:`environment_message`)."""

    def __init__(self) -> None:
        template = environment_message_template()
        body = bytearray(_U32.pack(len(template.layout.dim)))
        for dim in template.layout.dim:
            body += _pad(_cdr_string(dim.label))
            body += _U32.pack(dim.size) + _U32.pack(dim.stride)
        body += _U32.pack(template.layout.data_offset)
        body += _U32.pack(8)                      # data: 8 doubles, 8-aligned
        body += _ZEROS[:-len(body) % 8]
        self._pack = struct.Struct(f"<{4 + len(body)}s8d").pack
        self._prefix = _CDR_LE + bytes(body)
        probe = environment_message_template()
        values = (1.5, -2.25, 3e-300, -4e300, 0.1, -0.0, 7.0, 1e-3)
        probe.data = array("d", values)
        self.raw = True
        self.raw = _agrees(self.encode(values[:4], values[4:]), probe)

    def encode(self, values: Sequence[float],
               stds: Sequence[float]) -> bytes | Float64MultiArray:
        """values (4,): mass kg, damping N·s/m, stiffness N/m, static force N; stds (4,)."""
        if self.raw:
            return self._pack(self._prefix, *values, *stds)
        msg = environment_message_template()
        msg.data = array("d", [*values, *stds])
        return msg


# zeros after a string's UTF-8 bytes: its NUL, then padding to 4, by (byte length mod 4)
_STRING_TAILS = (b"\x00" * 4, b"\x00" * 3, b"\x00" * 2, b"\x00")


class StatusEncoder:
    """~/status (diagnostic_msgs/DiagnosticStatus) as CDR bytes from :class:`StatusFields`."""

    def __init__(self) -> None:
        self._keys: dict[str, bytes] = {}   # key -> its padded CDR string (keys are few)
        probe = StatusFields(WARN, "ns/interaction_estimator", "a message · with UTF-8",
                             "hw", [("mass[kg]", "1.5"), ("damping[N·s/m]", "n/a"),
                                    ("last_reject", ""), ("k", "abcd"), ("kk", "abc")])
        self.raw = True
        self.raw = _agrees(self.encode(probe), probe.message_object())

    def encode(self, status: StatusFields) -> bytes | DiagnosticStatus:
        if not self.raw:
            return status.message_object()
        pairs = status.pairs
        parts = [_CDR_LE, bytes((status.level, 0, 0, 0)), _pad(_cdr_string(status.name)),
                 _pad(_cdr_string(status.message)), _pad(_cdr_string(status.hardware_id)),
                 _U32.pack(len(pairs))]
        keys, pack, tails = self._keys, _U32.pack, _STRING_TAILS
        for key, value in pairs:
            chunk = keys.get(key)
            if chunk is None:
                if len(keys) > 1000:  # bounded, whatever keys come
                    keys.clear()
                chunk = keys[key] = _pad(_cdr_string(key))
            data = value.encode()
            n = len(data)
            parts += (chunk, pack(n + 1), data, tails[n & 3])
        out = b"".join(parts)
        if pairs:  # no padding after the last string: only its NUL
            out = out[:len(out) - len(parts[-1]) + 1]
        return out
