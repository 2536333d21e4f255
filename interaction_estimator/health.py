"""Health: one verdict per sample from the figures of every stage.

Levels follow diagnostic_msgs/DiagnosticStatus: OK 0, WARN 1, ERROR 2, STALE 3. The verdict is a
single line a person can read; ``state`` is a short fixed word a controller can switch on:
``learning_bias``, ``free_motion``, ``in_contact``, ``converged``, ``contact_lost``.

The judge runs on every sample, so the common cases cost little: the in-contact wording, which
depends only on which parameters are excited and converged, is built once per pattern and kept.
"""
from __future__ import annotations

import math
from typing import NamedTuple

OK, WARN, ERROR, STALE = 0, 1, 2, 3
LEVEL_NAMES = {OK: "OK", WARN: "WARN", ERROR: "ERROR", STALE: "STALE"}
PARAMETERS = ("mass", "damping", "stiffness", "static_force")
# The parameters' flags as one int (FilterStep.pattern): bit i set when parameter i (mass,
# damping, stiffness, static_force) is excited, bit i + 4 when it has converged.
ALL_CONVERGED = 0b1111 << 4


class Verdict(NamedTuple):
    level: int
    state: str
    message: str


class Health:
    """Judges one sample. condition_limit: Jacobian condition number above which the wrench is
    suspect; min_rate_hz: input rate below which a warning is raised (0: none); stale_after s:
    time after a contact ended beyond which the held object estimates are STALE."""

    def __init__(self, condition_limit: float, min_rate_hz: float, stale_after: float):
        self.condition_limit = condition_limit
        self.min_rate_hz = min_rate_hz
        self.stale_after = stale_after
        self._contact_words: dict[int, tuple[str, str]] = {}

    def _in_contact(self, pattern: int) -> tuple[str, str]:
        words = self._contact_words.get(pattern)
        if words is None:
            if pattern & ALL_CONVERGED == ALL_CONVERGED:
                words = ("converged", "in contact, all four parameters converged")
            else:
                idle = [p for i, p in enumerate(PARAMETERS) if not pattern >> i & 1]
                pending = [p for i, p in enumerate(PARAMETERS)
                           if pattern >> i & 1 and not pattern >> (i + 4) & 1]
                parts = []
                if pending:
                    parts.append("converging: " + ", ".join(pending))
                if idle:
                    parts.append("not excited by the motion: " + ", ".join(idle))
                words = ("in_contact", "in contact, " + "; ".join(parts) if parts
                         else "in contact")
            self._contact_words[pattern] = words
        return words

    def _findings(self, phase: str, nis_average: float, nis_lo: float, nis_hi: float,
                  filter_samples: int, jacobian_condition: float, recent_rejects: int,
                  rate_hz: float, stamp_from_receive: bool) -> int:
        """What lowers the trust in the numbers, as bits (0: nothing): 1 the Jacobian is near a
        singularity, 2 samples were rejected, 4 the input rate is low, 8 stamps are zero,
        16 the innovations are inconsistent (in contact only)."""
        bits = 0
        if jacobian_condition > self.condition_limit:
            bits |= 1
        if recent_rejects:
            bits |= 2
        if self.min_rate_hz > 0 and 0 < rate_hz < self.min_rate_hz:
            bits |= 4
        if stamp_from_receive:
            bits |= 8
        if phase == "contact" and filter_samples > 0 and not (nis_lo <= nis_average <= nis_hi):
            bits |= 16
        return bits

    def level_state(self, phase: str, since_contact_end: float, pattern: int,
                    nis_average: float, nis_lo: float, nis_hi: float, filter_samples: int,
                    jacobian_condition: float, recent_rejects: int, rate_hz: float,
                    stamp_from_receive: bool) -> tuple[int, str]:
        """The level and the state word of :meth:`judge`, without composing the message."""
        return self._classify(phase, since_contact_end, pattern, self._findings(
            phase, nis_average, nis_lo, nis_hi, filter_samples, jacobian_condition,
            recent_rejects, rate_hz, stamp_from_receive))

    def _classify(self, phase: str, since_contact_end: float, pattern: int,
                  findings: int) -> tuple[int, str]:
        if phase == "contact":
            return WARN if findings else OK, self._in_contact(pattern)[0]
        if phase == "learning_bias":
            return WARN, "learning_bias"
        if math.isfinite(since_contact_end):
            return STALE if since_contact_end > self.stale_after else WARN, "contact_lost"
        return WARN if findings else OK, "free_motion"

    def judge(self, phase: str, startup_remaining: float, since_contact_end: float,
              pattern: int, nis_average: float, nis_lo: float, nis_hi: float,
              filter_samples: int, jacobian_condition: float, recent_rejects: int,
              rate_hz: float, stamp_from_receive: bool) -> Verdict:
        """The worst applicable finding decides the level; the message names it.

        phase: learning_bias | free | contact. startup_remaining s of bias learning left;
        since_contact_end s (inf: never in contact); pattern: the parameters' excited and
        converged flags as bits (see ALL_CONVERGED); nis_average and its interval [nis_lo, nis_hi];
        filter_samples: updates since the filter's last reset; recent_rejects: samples rejected
        over the last second; rate_hz: input rate from the stamps."""
        bits = self._findings(phase, nis_average, nis_lo, nis_hi, filter_samples,
                              jacobian_condition, recent_rejects, rate_hz, stamp_from_receive)
        level, state = self._classify(phase, since_contact_end, pattern, bits)
        warnings = ""
        if bits & 1:
            warnings += (f"; contact Jacobian near singular (condition {jacobian_condition:.0f}"
                         f" > {self.condition_limit:.0f})")
        if bits & 2:
            warnings += f"; {recent_rejects} samples rejected in the last second"
        if bits & 4:
            warnings += f"; input rate {rate_hz:.0f} Hz below {self.min_rate_hz:.0f} Hz"
        if bits & 8:
            warnings += "; stamps are zero: receive time used"
        if bits & 16:
            warnings += (f"; innovations inconsistent (NIS {nis_average:.2f} outside "
                         f"[{nis_lo:.2f}, {nis_hi:.2f}])")
        if phase == "contact":
            return Verdict(level, state, self._in_contact(pattern)[1] + warnings)
        if phase == "learning_bias":
            return Verdict(level, state,
                           f"learning torque bias, {startup_remaining:.1f} s left: keep the robot "
                           "clear of contact" + warnings)
        if state == "contact_lost":
            return Verdict(level, state,
                           f"contact lost {since_contact_end:.1f} s ago: object estimates held "
                           "from the last contact" + warnings)
        return Verdict(level, state,
                       "free motion, no contact yet: wrench valid, no object estimate" + warnings)
