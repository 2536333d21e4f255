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
from .compiled import kernel

OK, WARN, ERROR, STALE = 0, 1, 2, 3
LEVEL_NAMES = {OK: "OK", WARN: "WARN", ERROR: "ERROR", STALE: "STALE"}
PARAMETERS = ("mass", "damping", "stiffness", "static_force")
# The parameters' flags as one int (FilterStep.pattern): bit i set when parameter i (mass,
# damping, stiffness, static_force) is excited, bit i + 4 when it has converged.
ALL_CONVERGED = 0b1111 << 4
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


@kernel
def health_verdict(phase, since_contact_end, pattern, nis_average, nis_lo, nis_hi,
                   filter_samples, jacobian_condition, recent_rejects, rate_hz,
                   stamp_from_receive, condition_limit, min_rate_hz, stale_after):
    """(level, state code, findings bits) of one sample. phase: PHASE_*; since_contact_end s
    (inf: never in contact); pattern: the parameters' excited and converged flags as bits (see
    ALL_CONVERGED); nis_average and its interval [nis_lo, nis_hi]; filter_samples: updates since
    the filter's last reset; jacobian_condition; recent_rejects: samples rejected over the last
    second; rate_hz: input rate from the stamps; stamp_from_receive: 1 when stamps are zero.
    condition_limit, min_rate_hz (0: no rate check), stale_after s: the settings."""
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
        state = (STATE_CONVERGED if pattern & ALL_CONVERGED == ALL_CONVERGED
                 else STATE_IN_CONTACT)
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
    object estimates are STALE."""

    def __init__(self, condition_limit: float, min_rate_hz: float, stale_after: float):
        self.condition_limit = condition_limit
        self.min_rate_hz = min_rate_hz
        self.stale_after = stale_after
        self._contact_words: dict[int, str] = {}

    def _in_contact(self, pattern: int) -> str:
        words = self._contact_words.get(pattern)
        if words is None:
            if pattern & ALL_CONVERGED == ALL_CONVERGED:
                words = "in contact, all four parameters converged"
            else:
                idle = [p for i, p in enumerate(PARAMETERS) if not pattern >> i & 1]
                pending = [p for i, p in enumerate(PARAMETERS)
                           if pattern >> i & 1 and not pattern >> (i + 4) & 1]
                parts = []
                if pending:
                    parts.append("converging: " + ", ".join(pending))
                if idle:
                    parts.append("not excited by the motion: " + ", ".join(idle))
                words = "in contact, " + "; ".join(parts) if parts else "in contact"
            self._contact_words[pattern] = words
        return words

    def message(self, state: int, findings: int, startup_remaining: float,
                since_contact_end: float, pattern: int, nis_average: float, nis_lo: float,
                nis_hi: float, jacobian_condition: float, recent_rejects: int,
                rate_hz: float) -> str:
        """The verdict in words: the state's sentence, then each finding. Arguments as for
        :func:`health_verdict`; state and findings as it returned them; startup_remaining s of
        bias learning left."""
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
            return self._in_contact(pattern) + warnings
        if state == STATE_LEARNING:
            return (f"learning torque bias, {startup_remaining:.1f} s left: keep the robot "
                    "clear of contact" + warnings)
        if state == STATE_LOST:
            return (f"contact lost {since_contact_end:.1f} s ago: object estimates held "
                    "from the last contact" + warnings)
        return "free motion, no contact yet: wrench valid, no object estimate" + warnings
