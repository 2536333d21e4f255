"""Health: one verdict per sample from the figures of every stage.

Levels follow diagnostic_msgs/DiagnosticStatus: OK 0, WARN 1, ERROR 2, STALE 3. The verdict is a
single line a person can read; ``state`` is a short fixed word a controller can switch on:
``learning_bias``, ``free_motion``, ``in_contact``, ``converged``, ``contact_lost``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

OK, WARN, ERROR, STALE = 0, 1, 2, 3
LEVEL_NAMES = {OK: "OK", WARN: "WARN", ERROR: "ERROR", STALE: "STALE"}
PARAMETERS = ("mass", "damping", "stiffness", "static_force")


@dataclass(slots=True)
class HealthInputs:
    """What the stages report for one sample (units in names)."""

    time: float
    phase: str                    # learning_bias | free | contact
    startup_remaining: float      # s of bias learning left
    since_contact_end: float      # s since contact was lost (inf: never in contact)
    excited: np.ndarray           # (4,) bool
    converged: np.ndarray         # (4,) bool
    nis_average: float
    nis_bounds: tuple[float, float]
    filter_samples: int
    jacobian_condition: float
    condition_limit: float
    recent_rejects: int           # rejected samples over the last second
    rate_hz: float                # input rate estimated from stamps, Hz
    min_rate_hz: float
    stale_after: float            # s
    stamp_from_receive: bool


@dataclass(frozen=True)
class Verdict:
    level: int
    state: str
    message: str


def assess(h: HealthInputs) -> Verdict:
    """The worst applicable finding decides the level; the message names it."""
    warnings: list[str] = []
    if h.jacobian_condition > h.condition_limit:
        warnings.append(f"contact Jacobian near singular (condition {h.jacobian_condition:.0f} > "
                        f"{h.condition_limit:.0f})")
    if h.recent_rejects:
        warnings.append(f"{h.recent_rejects} samples rejected in the last second")
    if h.min_rate_hz > 0 and 0 < h.rate_hz < h.min_rate_hz:
        warnings.append(f"input rate {h.rate_hz:.0f} Hz below {h.min_rate_hz:.0f} Hz")
    if h.stamp_from_receive:
        warnings.append("stamps are zero: receive time used")

    if h.phase == "learning_bias":
        state = "learning_bias"
        base = (f"learning torque bias, {h.startup_remaining:.1f} s left: keep the robot clear "
                "of contact")
        return Verdict(WARN, state, "; ".join([base] + warnings))
    if h.phase == "free":
        if np.isfinite(h.since_contact_end):
            level = STALE if h.since_contact_end > h.stale_after else WARN
            msg = (f"contact lost {h.since_contact_end:.1f} s ago: object estimates held from "
                   "the last contact")
            return Verdict(max(level, WARN if warnings else OK), "contact_lost",
                           "; ".join([msg] + warnings))
        msg = "free motion, no contact yet: wrench valid, no object estimate"
        return Verdict(WARN if warnings else OK, "free_motion", "; ".join([msg] + warnings))

    lo, hi = h.nis_bounds
    if h.filter_samples > 0 and not (lo <= h.nis_average <= hi):
        warnings.append(f"innovations inconsistent (NIS {h.nis_average:.2f} outside "
                        f"[{lo:.2f}, {hi:.2f}])")
    if h.converged.all():
        state, msg = "converged", "in contact, all four parameters converged"
    else:
        state = "in_contact"
        idle = [p for p, e in zip(PARAMETERS, h.excited) if not e]
        pending = [p for p, c, e in zip(PARAMETERS, h.converged, h.excited) if e and not c]
        parts = []
        if pending:
            parts.append("converging: " + ", ".join(pending))
        if idle:
            parts.append("not excited by the motion: " + ", ".join(idle))
        msg = "in contact, " + "; ".join(parts) if parts else "in contact"
    return Verdict(WARN if warnings else OK, state, "; ".join([msg] + warnings))
