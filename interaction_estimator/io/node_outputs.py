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


