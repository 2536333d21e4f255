"""Conversions between ROS 2 messages and the pipeline's records; no node, no I/O.

JointState -> :class:`~interaction_estimator.samples.Sample`, and
:class:`~interaction_estimator.pipeline.Estimate` -> WrenchStamped, Float64MultiArray and
DiagnosticStatus. Kept apart from the node so that every field's meaning and unit is written down
in one place and a test can read the same definitions.

Time: a stamp is ``sec + nanosec * 1e-9`` seconds (float). A zero stamp means "not stamped": the
receive time is used instead and the sample is flagged (``stamp_from_receive``).

Status key-values are strings. Numbers are written with ``repr`` (shortest text that reads back
to the same float), so a controller can parse them without loss; a non-finite number is never
written: it becomes ``n/a``. Keys carry their unit in brackets, SI: ``mass[kg]``,
``bias_age[s]``.
"""
from __future__ import annotations

import math
from array import array
from dataclasses import dataclass, field
from typing import Iterable, Mapping, Sequence

import numpy as np
from builtin_interfaces.msg import Time as TimeMsg
from diagnostic_msgs.msg import DiagnosticStatus, KeyValue
from geometry_msgs.msg import WrenchStamped
from sensor_msgs.msg import JointState
from std_msgs.msg import Float64MultiArray, MultiArrayDimension

from .environment import PARAMETER_NAMES, PARAMETER_UNITS
from .health import ERROR, OK, STALE, WARN
from .samples import Sample

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


def outputs_finite(est) -> bool:
    """True when every number the wrench and environment messages would carry is finite.

    One sum per array: NaN or infinity anywhere makes it non-finite (a sum of huge finite
    values that overflows counts as non-finite too, which errs on the safe side)."""
    return math.isfinite(sum(est.force.tolist()) + sum(est.torque.tolist())
                         + sum(est.parameters.tolist()) + sum(est.parameter_std.tolist()))


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
    return "true" if bool(b) else "false"


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


def _node_key_values(fig: NodeFigures) -> list[KeyValue]:
    kv = [KeyValue(key="rejects_total", value=str(sum(fig.rejects.values())))]
    kv += [KeyValue(key=f"rejects.{reason}", value=str(n))
           for reason, n in sorted(fig.rejects.items())]
    kv += [
        KeyValue(key="last_reject", value=fig.last_reject),
        KeyValue(key="errors_total", value=str(fig.errors)),
        KeyValue(key="latency[s]", value=number_text(fig.latency_s)),
        KeyValue(key="latency_max[s]", value=number_text(fig.latency_max_s)),
        KeyValue(key="input_age[s]", value=number_text(fig.input_age_s)),
        KeyValue(key="model", value=fig.model_name),
        KeyValue(key="joints", value=str(fig.joints)),
        KeyValue(key="contact_frame", value=fig.contact_frame),
        KeyValue(key="frame_id", value=fig.frame_id),
    ]
    return kv


def _combine(level: int, message: str, findings: Sequence[tuple[int, str]]) -> tuple[int, str]:
    for lvl, text in findings:
        level = worse_level(level, lvl)
        message = f"{message}; {text}" if message else text
    return level, message


def status_message(est, fig: NodeFigures, hardware_id: str) -> DiagnosticStatus:
    """The status for one estimate: the pipeline's verdict plus the node's own findings."""
    level, message = _combine(est.level, est.message, fig.findings)
    kv = [
        KeyValue(key="state", value=est.state),
        KeyValue(key="time[s]", value=number_text(est.time)),
        KeyValue(key="converged", value=_flag(est.converged)),
        KeyValue(key="in_contact", value=_flag(est.in_contact)),
        KeyValue(key="phase", value=est.phase),
        KeyValue(key="event", value=est.event),
    ]
    for i, (name, unit) in enumerate(zip(PARAMETER_NAMES, PARAMETER_UNITS)):
        kv += [
            KeyValue(key=f"{name}[{unit}]", value=number_text(est.parameters[i])),
            KeyValue(key=f"{name}_std[{unit}]", value=number_text(est.parameter_std[i])),
            KeyValue(key=f"{name}_excited", value=_flag(est.excited[i])),
            KeyValue(key=f"{name}_converged", value=_flag(est.parameter_converged[i])),
        ]
    u = est.direction
    kv += [
        KeyValue(key="force_along[N]", value=number_text(est.force_along)),
        KeyValue(key="position_along[m]", value=number_text(est.position_along)),
        KeyValue(key="velocity_along[m/s]", value=number_text(est.velocity_along)),
        KeyValue(key="acceleration_along[m/s^2]", value=number_text(est.acceleration_along)),
        KeyValue(key="kinematics_lag[s]", value=number_text(est.kinematics_lag)),
        KeyValue(key="direction", value=" ".join(number_text(c) for c in u)),
        KeyValue(key="nis", value=number_text(est.nis)),
        KeyValue(key="nis_average", value=number_text(est.nis_average)),
        KeyValue(key="nis_lower", value=number_text(est.nis_bounds[0])),
        KeyValue(key="nis_upper", value=number_text(est.nis_bounds[1])),
        KeyValue(key="measurement_std[N]", value=number_text(est.measurement_std)),
        KeyValue(key="bias_age[s]", value=number_text(est.bias_age)),
        KeyValue(key="input_rate[Hz]", value=number_text(est.rate_hz)),
        KeyValue(key="stamp_from_receive", value=_flag(est.stamp_from_receive)),
        KeyValue(key="observer_restarts", value=str(est.observer_restarts)),
        KeyValue(key="jacobian_condition", value=number_text(est.jacobian_condition)),
        KeyValue(key="contact_level", value=number_text(est.contact_level)),
    ]
    kv += _node_key_values(fig)
    return DiagnosticStatus(level=bytes([level]), name=fig.node_name, message=message,
                            hardware_id=hardware_id, values=kv)


def idle_status(state: str, level: int, message: str, fig: NodeFigures,
                hardware_id: str) -> DiagnosticStatus:
    """A status when there is no estimate: waiting for a model or for input, or a model error."""
    level, message = _combine(level, message, fig.findings)
    kv = [KeyValue(key="state", value=state), KeyValue(key="converged", value="false")]
    kv += _node_key_values(fig)
    return DiagnosticStatus(level=bytes([level]), name=fig.node_name, message=message,
                            hardware_id=hardware_id, values=kv)


def status_values(status: DiagnosticStatus) -> dict[str, str]:
    """The key-values of a status as a dict (for controllers and tests)."""
    return {kv.key: kv.value for kv in status.values}
