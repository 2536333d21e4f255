"""Health: one verdict per sample from the figures of every stage.

Levels follow diagnostic_msgs/DiagnosticStatus: OK 0, WARN 1, ERROR 2, STALE 3. The verdict is a
single line a person can read; ``state`` is a short fixed word a controller can switch on:
``learning_bias``, ``free_motion``, ``in_contact``, ``converged``, ``contact_lost``.

The level, the state and the findings are decided by :func:`health_verdict`, compiled, which the
Pipeline's per-sample step calls; :meth:`Health.message` words them for a person (only the node
and the per-sample path need the text). The in-contact wording, which depends only on which
parameters are excited and converged, is built once per pattern and kept.
"""
from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from .compiled import kernel
from .records import F8, record

OK, WARN, ERROR, STALE = 0, 1, 2, 3
LEVEL_NAMES = {OK: "OK", WARN: "WARN", ERROR: "ERROR", STALE: "STALE"}
# The Pipeline's phases (the contact monitor's view of the sample)
PHASE_LEARNING, PHASE_FREE, PHASE_CONTACT = 0, 1, 2
PHASES = ("learning_bias", "free", "contact")
# The state words, by code
STATE_LEARNING, STATE_FREE, STATE_IN_CONTACT, STATE_CONVERGED, STATE_LOST = range(5)
STATES = ("learning_bias", "free_motion", "in_contact", "converged", "contact_lost")
# Findings that lower the trust in the numbers (bits)
FINDING_SINGULAR = 1     # the contact Jacobian is near a singularity
FINDING_REJECTS = 2      # samples were rejected over the last second
FINDING_LOW_RATE = 4     # the input rate is below health.min_rate
FINDING_NO_STAMPS = 8    # stamps are zero: the receive time is used
FINDING_NIS = 16         # the innovations are inconsistent (in contact only)
FINDING_PATH = 32        # the contact path does not fit the mechanism asked for
FINDING_ODOMETRY = 64    # a moving base's odometry stale, refused or too slow (base.py words it)
FINDING_IMU = 128        # the same for its IMU

PARAMS = record(
    "health parameters",
    ("condition_limit", F8, "", "Jacobian condition number above which the wrench is suspect"),
    ("min_rate_hz", F8, "Hz", "input rate below which the status warns (0: not checked)"),
    ("stale_after_s", F8, "s", "time after a contact ended beyond which estimates are STALE"),
)


@kernel
def health_verdict(p, phase, since_contact_end, all_converged, nis_average, nis_lo, nis_hi,
                   filter_samples, jacobian_condition, recent_rejects, rate_hz,
                   stamp_from_receive):
    """(level, state code, findings bits) of one sample. p: PARAMS record; phase: PHASE_*;
    since_contact_end s (inf: never in contact); all_converged: every parameter converged;
    nis_average and its interval [nis_lo, nis_hi]; filter_samples: updates since the filter's
    last reset; jacobian_condition; recent_rejects: samples rejected over the last second;
    rate_hz: input rate from the stamps; stamp_from_receive: the stamp is the receive time."""
    condition_limit, min_rate_hz, stale_after = p.condition_limit, p.min_rate_hz, p.stale_after_s
    bits = 0
    if jacobian_condition > condition_limit:
        bits |= FINDING_SINGULAR
    if recent_rejects > 0:
        bits |= FINDING_REJECTS
    if min_rate_hz > 0.0 and 0.0 < rate_hz < min_rate_hz:
        bits |= FINDING_LOW_RATE
    if stamp_from_receive:
        bits |= FINDING_NO_STAMPS
    contact = phase == PHASE_CONTACT
    if contact and filter_samples > 0 and not (nis_lo <= nis_average <= nis_hi):
        bits |= FINDING_NIS
    level = WARN if bits else OK
    if contact:
        state = STATE_CONVERGED if all_converged else STATE_IN_CONTACT
    elif phase == PHASE_LEARNING:
        level, state = WARN, STATE_LEARNING
    elif math.isfinite(since_contact_end):
        level = STALE if since_contact_end > stale_after else WARN
        state = STATE_LOST
    else:
        state = STATE_FREE
    return level, state, bits


class Health:
    """Words the verdict of :func:`health_verdict` for a person. condition_limit: Jacobian
    condition number above which the wrench is suspect; min_rate_hz: input rate below which a
    warning is raised (0: none); stale_after s: time after a contact ended beyond which the held
    object estimates are STALE; parameter_names: the object model's parameters."""

    def __init__(self, condition_limit: float, min_rate_hz: float, stale_after: float,
                 parameter_names: Sequence[str] = ("mass", "damping", "stiffness",
                                                   "static_force"),
                 params: np.ndarray | None = None):
        self.params = PARAMS.one() if params is None else params
        p = self.params[0]
        p["condition_limit"], p["min_rate_hz"], p["stale_after_s"] = (condition_limit,
                                                                      min_rate_hz, stale_after)
        self.parameter_names = tuple(parameter_names)
        self._contact_words: dict[tuple[tuple[bool, ...], tuple[bool, ...]], str] = {}

    condition_limit = property(lambda self: float(self.params[0]["condition_limit"]))
    min_rate_hz = property(lambda self: float(self.params[0]["min_rate_hz"]))
    stale_after = property(lambda self: float(self.params[0]["stale_after_s"]))

    def _in_contact(self, excited: tuple[bool, ...], converged: tuple[bool, ...]) -> str:
        key = (excited, converged)
        words = self._contact_words.get(key)
        if words is None:
            names = self.parameter_names
            if all(converged):
                words = f"in contact, all {len(names)} parameters converged"
            else:
                idle = [p for p, x in zip(names, excited, strict=True) if not x]
                pending = [p for p, x, c in zip(names, excited, converged, strict=True)
                           if x and not c]
                parts = []
                if pending:
                    parts.append("converging: " + ", ".join(pending))
                if idle:
                    parts.append("not excited by the motion: " + ", ".join(idle))
                words = "in contact, " + "; ".join(parts) if parts else "in contact"
            self._contact_words[key] = words
        return words

    def message(self, state: int, findings: int, startup_remaining: float,
                since_contact_end: float, excited: tuple[bool, ...],
                converged: tuple[bool, ...], nis_average: float, nis_lo: float,
                nis_hi: float, jacobian_condition: float, recent_rejects: int,
                rate_hz: float) -> str:
        """The verdict in words: the state's sentence, then each finding. Arguments as for
        :func:`health_verdict`; state and findings as it returned them; excited and converged:
        the parameters' flags; startup_remaining s of bias learning left."""
        warnings = ""
        if findings & FINDING_SINGULAR:
            warnings += (f"; contact Jacobian near singular (condition {jacobian_condition:.0f}"
                         f" > {self.condition_limit:.0f})")
        if findings & FINDING_REJECTS:
            warnings += f"; {recent_rejects} samples rejected in the last second"
        if findings & FINDING_LOW_RATE:
            warnings += f"; input rate {rate_hz:.0f} Hz below {self.min_rate_hz:.0f} Hz"
        if findings & FINDING_NO_STAMPS:
            warnings += "; stamps are zero: receive time used"
        if findings & FINDING_NIS:
            warnings += (f"; innovations inconsistent (NIS {nis_average:.2f} outside "
                         f"[{nis_lo:.2f}, {nis_hi:.2f}])")
        if state == STATE_IN_CONTACT or state == STATE_CONVERGED:
            return self._in_contact(excited, converged) + warnings
        if state == STATE_LEARNING:
            return (f"learning torque bias, {startup_remaining:.1f} s left: keep the robot "
                    "clear of contact" + warnings)
        if state == STATE_LOST:
            return (f"contact lost {since_contact_end:.1f} s ago: object estimates held "
                    "from the last contact" + warnings)
        return "free motion, no contact yet: wrench valid, no object estimate" + warnings
