"""What the node's output messages hold, as plain data (no rclpy): the labelled layout of
``~/environment``, the numbers of ``~/wrench`` and ``~/environment``, and the key-values of
``~/status``. The node (:mod:`interaction_estimator.ros`) publishes them; the replay's output bag
writes the same through :mod:`.cdr`. Every field's meaning and unit is written down here once.

Status key-values are strings. Numbers are written with ``repr`` (shortest text that reads back
to the same float), so a controller can parse them without loss; a non-finite number is never
written: it becomes ``n/a``. Keys carry their unit in brackets, SI: ``mass[kg]``,
``bias_age[s]``.
"""
from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import NamedTuple

from ..core.environment import PARAMETER_NAMES, PARAMETER_UNITS
from ..core.health import ERROR, OK, STALE, WARN
from ..core.mechanism import GEOMETRY_WORDS
from ..core.object_models import CARTESIAN, MODELS
from .cdr import Float64MultiArrayEncoder

# Layout of ~/environment: data[row * 4 + column]; row 0 the values, row 1 their standard
# deviations; column i is parameter PARAMETER_NAMES[i] in PARAMETER_UNITS[i].
ENVIRONMENT_ROWS = ("value", "std")
ENVIRONMENT_ROW_LABEL = "row: value, std (standard deviation, same unit as the value)"
ENVIRONMENT_COLUMN_LABEL = "column: " + ", ".join(
    f"{n} [{u}]" for n, u in zip(PARAMETER_NAMES, PARAMETER_UNITS))
# the layout's dimensions as (label, size, stride): rows (stride 8), then the parameters
ENVIRONMENT_DIMS = ((ENVIRONMENT_ROW_LABEL, len(ENVIRONMENT_ROWS), 2 * len(PARAMETER_NAMES)),
                    (ENVIRONMENT_COLUMN_LABEL, len(PARAMETER_NAMES), len(PARAMETER_NAMES)))

_SEVERITY = {OK: 0, WARN: 1, STALE: 2, ERROR: 3}  # ERROR is the worst, then STALE


def worse_level(a: int, b: int) -> int:
    """The more severe of two DiagnosticStatus levels (OK < WARN < STALE < ERROR)."""
    return a if _SEVERITY.get(a, 3) >= _SEVERITY.get(b, 3) else b


def environment_encoder() -> Float64MultiArrayEncoder:
    """``~/environment`` as CDR bytes: ``encode(*values, *stds)`` (the four values, then their
    four standard deviations, in the units of :data:`ENVIRONMENT_COLUMN_LABEL`)."""
    return Float64MultiArrayEncoder(ENVIRONMENT_DIMS, 2 * len(PARAMETER_NAMES))


# Layout of ~/environment_cartesian (environment.model cartesian, in place of ~/environment):
# data[row * 21 + column]; row 0 the values, row 1 their standard deviations; column i the
# parameter CARTESIAN.parameter_names[i] (mass_xx ... stiffness_zz, static_force_x/y/z).
CARTESIAN_COLUMN_LABEL = "column: " + ", ".join(
    f"{n} [{u}]" for n, u in zip(CARTESIAN.parameter_names, CARTESIAN.parameter_units,
                                 strict=True))
CARTESIAN_DIMS = ((ENVIRONMENT_ROW_LABEL, 2, 2 * CARTESIAN.size),
                  (CARTESIAN_COLUMN_LABEL, CARTESIAN.size, CARTESIAN.size))


def cartesian_encoder() -> Float64MultiArrayEncoder:
    """``~/environment_cartesian`` as CDR bytes: ``encode(*values, *stds)`` (21 each)."""
    return Float64MultiArrayEncoder(CARTESIAN_DIMS, 2 * CARTESIAN.size)


# Layout of ~/mechanism (environment.model revolute or prismatic): one dimension, the fields
# below in order (name, unit); zeros where the mechanism has no such field (a slider's radius).
# geometry: the code of mechanism.GEOMETRY_WORDS (0 no_path ... 6 converged).
MECHANISM_FIELDS: tuple[tuple[str, str], ...] = (
    ("axis_x", "1"), ("axis_y", "1"), ("axis_z", "1"),
    ("axis_point_x", "m"), ("axis_point_y", "m"), ("axis_point_z", "m"),
    ("radius", "m"), ("radius_std", "m"), ("axis_std", "rad"), ("angle", "rad"),
    ("swept_arc", "rad"), ("travel", "m"), ("path_rms", "m"),
    ("converged", "0/1"), ("geometry", "code: " + ", ".join(
        f"{k} {w}" for k, w in enumerate(GEOMETRY_WORDS))),
    ("inertia", "kg·m²"), ("inertia_std", "kg·m²"),
    ("rotary_damping", "N·m·s/rad"), ("rotary_damping_std", "N·m·s/rad"),
    ("rotary_stiffness", "N·m/rad"), ("rotary_stiffness_std", "N·m/rad"),
    ("torque", "N·m"), ("torque_std", "N·m"),
)
MECHANISM_LABEL = "field: " + ", ".join(f"{n} [{u}]" for n, u in MECHANISM_FIELDS)
MECHANISM_DIMS = ((MECHANISM_LABEL, len(MECHANISM_FIELDS), len(MECHANISM_FIELDS)),)


def mechanism_encoder() -> Float64MultiArrayEncoder:
    """``~/mechanism`` as CDR bytes: ``encode(*mechanism_numbers(est))``."""
    return Float64MultiArrayEncoder(MECHANISM_DIMS, len(MECHANISM_FIELDS))


def rotary(est) -> list[tuple[str, str, float, float]]:
    """A hinge's own parameters from those at the grasp (name, unit, value, std): inertia
    mass r^2, damping r^2, stiffness r^2, static torque static_force r (std scaled alike, the
    radius taken as exact)."""
    r = est.radius
    values, stds = est.parameters.tolist(), est.parameter_std.tolist()
    return [(name, unit, values[i] * r ** power, stds[i] * r ** power)
            for i, (name, unit, power) in enumerate((
                ("inertia", "kg·m²", 2), ("rotary_damping", "N·m·s/rad", 2),
                ("rotary_stiffness", "N·m/rad", 2), ("torque", "N·m", 1)))]


def mechanism_numbers(est) -> list[float]:
    """The numbers of ``~/mechanism`` for an Estimate of a revolute or prismatic model, in
    :data:`MECHANISM_FIELDS` order."""
    hinge = est.model_name == "revolute"
    out = (est.axis.tolist() + est.axis_point.tolist()
           + [est.radius, est.radius_std, est.axis_std, est.angle, est.swept_arc, est.travel,
              est.path_rms, 1.0 if est.geometry_converged else 0.0, float(est.geometry)])
    for _, _, value, std in rotary(est):
        out += [value, std] if hinge else [0.0, 0.0]
    return out


def output_numbers(numbers: Sequence[float], m: int = 4
                   ) -> tuple[list[float], list[float], list[float], list[float]] | None:
    """The numbers the wrench and environment messages carry (force (3) N, torque (3) N·m,
    the m parameters, their m standard deviations: :meth:`.Pipeline.last_outputs`, or
    :func:`estimate_outputs`) split into those four lists; None when any of them is not finite.

    One sum: NaN or infinity anywhere makes it non-finite (a sum of huge finite values that
    overflows counts as non-finite too, which errs on the safe side)."""
    if math.isfinite(sum(numbers)):
        return numbers[0:3], numbers[3:6], numbers[6:6 + m], numbers[6 + m:6 + 2 * m]
    return None


def estimate_outputs(est) -> list[float]:
    """The 14 numbers of an Estimate that the output messages carry, in the order of
    :meth:`.Pipeline.last_outputs`."""
    return (est.force.tolist() + est.torque.tolist() + est.parameters.tolist()
            + est.parameter_std.tolist())


def outputs_finite(est) -> bool:
    """True when every number the wrench and environment messages would carry is finite
    (see :func:`output_numbers`)."""
    return output_numbers(estimate_outputs(est), len(est.parameters)) is not None


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


# per parameter, in the model's order: value, std, excited and converged keys
_PARAMETER_KEYS = {name: tuple((f"{n}[{u}]", f"{n}_std[{u}]", f"{n}_excited", f"{n}_converged")
                               for n, u in zip(m.parameter_names, m.parameter_units,
                                               strict=True))
                   for name, m in MODELS.items()}


def _mechanism_pairs(est) -> list[tuple[str, str]]:
    """The geometry (and a hinge's own parameters) as status key-values; the swept arc in
    degrees."""
    hinge = est.model_name == "revolute"
    kv = [("mechanism", est.model_name), ("geometry", GEOMETRY_WORDS[est.geometry]),
          ("geometry_converged", _flag(est.geometry_converged)),
          ("axis", " ".join(number_text(c) for c in est.axis.tolist())),
          ("travel[m]", number_text(est.travel)), ("path_rms[m]", number_text(est.path_rms))]
    if hinge:
        kv += [("axis_point[m]", " ".join(number_text(c) for c in est.axis_point.tolist())),
               ("radius[m]", number_text(est.radius)),
               ("radius_std[m]", number_text(est.radius_std)),
               ("axis_std[deg]", number_text(math.degrees(est.axis_std))),
               ("angle[rad]", number_text(est.angle)),
               ("swept_arc[deg]", number_text(math.degrees(est.swept_arc)))]
        for name, unit, value, std in rotary(est):
            kv += [(f"{name}[{unit}]", number_text(value)),
                   (f"{name}_std[{unit}]", number_text(std))]
    return kv


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
    model_name = getattr(est, "model_name", "along_direction")
    for keys, value, std, excited, converged in zip(
            _PARAMETER_KEYS[model_name], est.parameters.tolist(), est.parameter_std.tolist(),
            est.excited.tolist(), est.parameter_converged.tolist()):
        kv += [(keys[0], number_text(value)), (keys[1], number_text(std)),
               (keys[2], _flag(excited)), (keys[3], _flag(converged))]
    if model_name in ("revolute", "prismatic"):
        kv += _mechanism_pairs(est)
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


