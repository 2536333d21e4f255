"""Contact monitor: free motion vs contact, and the residual's free-motion noise level.

level = sqrt(mean_i (r_i / sigma_i)^2) with sigma_i the residual's noise level learned in free
motion (exponential average of r_i^2 over time, floored at a noise floor N·m). Contact begins
when level > enter_level for hold time, or earlier when the evidence of a contact building up
grows past a threshold: a one-sided CUSUM (Page, Biometrika 1954; Basseville and Nikiforov,
Detection of Abrupt Changes, 1993) of level^2 - exit_level^2 integrated over time, so that it is
the same at any sample rate. Contact ends when level < exit_level for release time
(hysteresis). A second, more sensitive CUSUM (drift 2, where the free-motion mean of level^2 is
1) locates the likely onset: the last time it was zero. The bias and noise learned in free
motion are kept in snapshots; when a contact is declared, what was learned since its likely
onset is taken back (:func:`take_back`). The noise level is learned from the mean square of the
residual over short intervals of quiet samples (:func:`gather_quiet`, :func:`learn_quiet`); its
time constant is in seconds, so one update per interval learns what one per sample would, and
the per-joint weights of the wrench map (1/sigma_i^2, normalized to mean 1) change only then.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .compiled import kernel
from .records import B1, F8, I8, record

EVENT_NONE, EVENT_BEGIN, EVENT_END = 0, 1, 2
SNAPSHOTS = 64          # bias and noise kept this many times back, one per snapshot interval
ONSET_DRIFT = 2.0       # level^2 drift of the onset-locating CUSUM (free-motion mean: 1)
NOISE_RISE_SLOWER = 10.0  # the learned noise rises this many times slower than it falls
_EVENT_WORDS = ("", "contact_begin", "contact_end")

PARAMS = record(
    "contact monitor parameters",
    ("enter_level", F8, "", "contact begins above this normalized residual level"),
    ("exit_level", F8, "", "contact ends below this level"),
    ("hold_s", F8, "s", "the level must stay above enter_level this long"),
    ("release_s", F8, "s", "the level must stay below exit_level this long"),
    ("noise_floor", F8, "N·m", "smallest residual noise level assumed per joint"),
    ("noise_time_constant_s", F8, "s", "time constant of noise learning"),
    ("learn_interval_s", F8, "s", "quiet samples gathered per noise-learning update"),
    ("evidence", F8, "s", "contact begins when the time integral of level^2 - exit_level^2"
     " (CUSUM) exceeds this (0: off)"),
    ("snapshot_interval_s", F8, "s", "interval of the bias and noise snapshots"),
)
STATE = record(
    "contact monitor state",
    ("in_contact", B1, "", "in contact now"),
    ("pending", B1, "", "a level crossing is waiting out its hold or release time"),
    ("pending_since_s", F8, "s", "when that crossing began"),
    ("weights_valid", B1, "", "the joints' weights are up to date with their noise"),
    ("quiet_duration_s", F8, "s", "duration of the quiet samples gathered for noise learning"),
    ("quiet_count", I8, "", "their number"),
    ("evidence_g", F8, "s", "CUSUM of level^2 - exit_level^2 over time"),
    ("onset_g", F8, "s", "CUSUM of level^2 - 2 over time (locates the onset)"),
    ("onset_s", F8, "s", "last time onset_g was zero: the likely start of a contact"),
    ("snapshot_index", I8, "", "next snapshot slot"),
    ("snapshot_count", I8, "", "snapshots held"),
    ("last_snapshot_s", F8, "s", "time of the last snapshot"),
    ("snapshot_time_s", F8, (SNAPSHOTS,), "s", "time of each snapshot"),
)
JOINTS = record(
    "contact monitor, per joint",
    ("noise_var", F8, "N·m^2", "the residual's free-motion noise variance sigma_i^2"),
    ("inv_var", F8, "1/N·m^2", "1 / (nv sigma_i^2), for the level"),
    ("weight", F8, "", "1/sigma_i^2 normalized to mean 1, for the wrench map"),
    ("quiet_sum", F8, "N·m^2", "sum of r_i^2 over the quiet samples gathered"),
    ("bias_snapshot", F8, (SNAPSHOTS,), "N·m", "the bias at each snapshot"),
    ("noise_snapshot", F8, (SNAPSHOTS,), "N·m^2", "the noise variance at each snapshot"),
)


@kernel
def contact_step(p, s, joints, t, dt, residual):
    """Hysteresis on the residual level, and out of contact the evidence of a contact building
    up (a CUSUM of level^2 over time, Page 1954); returns (level, EVENT_* code)."""
    total = 0.0
    for i in range(residual.shape[0]):
        total += residual[i] * residual[i] * joints[i].inv_var
    level = math.sqrt(total)
    event = EVENT_NONE
    if not s.in_contact:
        square = level * level
        s.evidence_g = max(0.0, s.evidence_g + (square - p.exit_level * p.exit_level) * dt)
        s.onset_g = max(0.0, s.onset_g + (square - ONSET_DRIFT) * dt)
        if s.onset_g == 0.0:
            s.onset_s = t
        if p.evidence > 0.0 and s.evidence_g > p.evidence:
            s.in_contact = True
            s.pending = False
            s.evidence_g = s.onset_g = 0.0
            return level, EVENT_BEGIN
    crossing = level < p.exit_level if s.in_contact else level > p.enter_level
    if crossing:
        if not s.pending:
            s.pending = True
            s.pending_since_s = t
        if t - s.pending_since_s >= (p.release_s if s.in_contact else p.hold_s):
            event = EVENT_END if s.in_contact else EVENT_BEGIN
            s.in_contact = not s.in_contact
            s.pending = False
            s.evidence_g = s.onset_g = 0.0
            s.onset_s = t
    else:
        s.pending = False
    return level, event


@kernel
def set_noise(p, s, joints):
    """After a change of the noise variances: floor, inverse, and the weights marked stale."""
    n = joints.shape[0]
    floor2 = p.noise_floor * p.noise_floor
    for i in range(n):
        joint = joints[i]
        if not joint.noise_var >= floor2:
            joint.noise_var = floor2
        joint.inv_var = 1.0 / (joint.noise_var * n)
    s.weights_valid = False


@kernel
def learn_power(p, s, joints, dt, mean_square, cautious=False):
    """Learn from the mean square (nv,) N·m^2 of the free-motion residual over dt s;
    ``cautious`` (free motion after the start-up phase): rises are learned slower."""
    alpha = 1.0 - math.exp(-dt / p.noise_time_constant_s)
    # upward 10 times slower: a residual creeping up may be a contact building up, and must not
    # raise the yardstick it is judged by as fast as it grows
    rise = (1.0 - math.exp(-dt / (NOISE_RISE_SLOWER * p.noise_time_constant_s)) if cautious
            else alpha)
    for i in range(joints.shape[0]):
        step = mean_square[i] - joints[i].noise_var
        joints[i].noise_var += (rise if step > 0.0 else alpha) * step
    set_noise(p, s, joints)


@kernel
def weights(s, joints):
    """Per-joint weights 1/sigma_i^2 normalized to mean 1, in ``joints.weight`` (rebuilt when
    stale)."""
    if not s.weights_valid:
        n = joints.shape[0]
        total = 0.0
        for i in range(n):
            total += 1.0 / joints[i].noise_var
        for i in range(n):
            joints[i].weight = (1.0 / joints[i].noise_var) * (n / total)
        s.weights_valid = True


@kernel
def gather_quiet(s, joints, dt, residual):
    """Add one quiet sample to the noise-learning sums; returns the duration gathered, s."""
    for i in range(joints.shape[0]):
        joints[i].quiet_sum += residual[i] * residual[i]
    s.quiet_count += 1
    s.quiet_duration_s += dt
    return s.quiet_duration_s


@kernel
def learn_quiet(p, s, joints, speed, scratch, cautious):
    """The noise level from the quiet samples gathered since the last call (learned ``speed``
    times faster than their duration says); the gathered sums cleared. scratch: (nv,)."""
    count = s.quiet_count
    for i in range(joints.shape[0]):
        scratch[i] = joints[i].quiet_sum / count
    learn_power(p, s, joints, s.quiet_duration_s * speed, scratch, cautious)
    for i in range(joints.shape[0]):
        joints[i].quiet_sum = 0.0
    s.quiet_duration_s = 0.0
    s.quiet_count = 0


@kernel
def snapshot(p, s, joints, bias, t):
    """Every snapshot interval in free motion: keep the bias (bias records, (nv,)) and the
    noise variances, so that what was learned after a contact's likely onset can be taken
    back once the contact is declared (:func:`take_back`)."""
    if s.snapshot_count > 0 and t - s.last_snapshot_s < p.snapshot_interval_s:
        return
    k = s.snapshot_index
    s.snapshot_time_s[k] = t
    for i in range(joints.shape[0]):
        joints[i].bias_snapshot[k] = bias[i].value
        joints[i].noise_snapshot[k] = joints[i].noise_var
    s.snapshot_index = (k + 1) % SNAPSHOTS
    if s.snapshot_count < SNAPSHOTS:
        s.snapshot_count += 1
    s.last_snapshot_s = t


@kernel
def take_back(p, s, joints, bias, onset):
    """At a contact's begin: the bias and noise back to the newest snapshot taken at or before
    ``onset`` s (none: nothing changes). Returns True when something was taken back."""
    best = -1
    for n in range(s.snapshot_count):
        k = (s.snapshot_index - 1 - n) % SNAPSHOTS
        if s.snapshot_time_s[k] <= onset:
            best = k
            break
    if best < 0:
        return False
    for i in range(joints.shape[0]):
        bias[i].value = joints[i].bias_snapshot[best]
        joints[i].noise_var = joints[i].noise_snapshot[best]
    set_noise(p, s, joints)
    return True


@kernel
def contact_reset(p, s, joints):
    for i in range(joints.shape[0]):
        joints[i].noise_var = p.noise_floor * p.noise_floor
        joints[i].quiet_sum = 0.0
    set_noise(p, s, joints)
    s.in_contact = False
    s.pending = False
    s.quiet_duration_s = 0.0
    s.quiet_count = 0
    s.evidence_g = s.onset_g = 0.0
    s.snapshot_index = s.snapshot_count = 0


class ContactRecords(NamedTuple):
    params: np.ndarray   # (1,) PARAMS
    state: np.ndarray    # (1,) STATE
    joints: np.ndarray   # (nv,) JOINTS


class ContactState(NamedTuple):
    in_contact: bool
    level: float   # residual RMS over joints in units of its free-motion noise (dimensionless)
    event: str     # "", "contact_begin" or "contact_end"


class ContactMonitor:
    """Free motion vs contact, by hysteresis on the residual relative to its noise level (see
    the module docstring). Levels are dimensionless; times in s; noise floor N·m."""

    def __init__(self, nv: int, enter_level: float, exit_level: float, hold_time: float,
                 noise_floor: float, noise_time_constant: float, release_time: float = 0.0,
                 learn_interval: float = 0.01, evidence: float = 0.0,
                 records: ContactRecords | None = None):
        self.nv = nv
        self.records = (ContactRecords(PARAMS.one(), STATE.one(), JOINTS.many(nv))
                        if records is None else records)
        self._set(enter_level, exit_level, hold_time, noise_floor, noise_time_constant,
                  release_time, learn_interval, evidence)
        self.reset()

    def _set(self, enter_level: float, exit_level: float, hold_time: float, noise_floor: float,
             noise_time_constant: float, release_time: float, learn_interval: float,
             evidence: float = 0.0, snapshot_interval: float = 0.02) -> None:
        p = self.records.params[0]
        p["evidence"], p["snapshot_interval_s"] = evidence, snapshot_interval
        p["enter_level"], p["exit_level"], p["hold_s"] = enter_level, exit_level, hold_time
        p["noise_floor"], p["noise_time_constant_s"] = noise_floor, noise_time_constant
        p["release_s"], p["learn_interval_s"] = release_time, learn_interval

    def configure(self, enter_level: float, exit_level: float, hold_time: float,
                  noise_floor: float, noise_time_constant: float, release_time: float = 0.0,
                  learn_interval: float = 0.01, evidence: float = 0.0) -> None:
        """New settings while running: the learned noise (floored at the new noise floor), the
        contact state and the quiet samples gathered are kept; a pending crossing is dropped."""
        self._set(enter_level, exit_level, hold_time, noise_floor, noise_time_constant,
                  release_time, learn_interval, evidence)
        r = self.records
        set_noise(r.params[0], r.state[0], r.joints)
        r.state[0]["pending"] = False

    def _p(self, name: str) -> float:
        return float(self.records.params[0][name])

    enter_level = property(lambda self: self._p("enter_level"))
    exit_level = property(lambda self: self._p("exit_level"))
    hold_time = property(lambda self: self._p("hold_s"))
    noise_floor = property(lambda self: self._p("noise_floor"))
    release_time = property(lambda self: self._p("release_s"))
    noise_time_constant = property(lambda self: self._p("noise_time_constant_s"))

    def reset(self) -> None:
        r = self.records
        contact_reset(r.params[0], r.state[0], r.joints)

    @property
    def in_contact(self) -> bool:
        return bool(self.records.state[0]["in_contact"])

    @in_contact.setter
    def in_contact(self, value: bool) -> None:
        self.records.state[0]["in_contact"] = bool(value)

    @property
    def pending(self) -> bool:
        """True while a level crossing waits out hold_time (a state change may be coming)."""
        return bool(self.records.state[0]["pending"])

    @property
    def noise_var(self) -> np.ndarray:
        """(nv,) the residual's free-motion noise variances, N·m^2 (a copy)."""
        return self.records.joints["noise_var"].copy()

    def set_noise_var(self, var: np.ndarray) -> None:
        """Set the per-joint residual noise variances (nv,) N·m^2 (floored at noise_floor^2)."""
        r = self.records
        r.joints["noise_var"] = np.asarray(var, float)
        set_noise(r.params[0], r.state[0], r.joints)

    @property
    def noise_std(self) -> np.ndarray:
        return np.sqrt(self.records.joints["noise_var"])

    def learn_noise(self, dt: float, residual: np.ndarray) -> None:
        """Learn from one free-motion residual (nv,) N·m, dt s after the last."""
        self.learn_power(dt, np.asarray(residual, float) ** 2)

    def learn_power(self, dt: float, mean_square: np.ndarray) -> None:
        """Learn from the mean square (nv,) N·m^2 of the free-motion residual over dt s."""
        r = self.records
        learn_power(r.params[0], r.state[0], r.joints, float(dt),
                    np.ascontiguousarray(mean_square, dtype=float))

    @property
    def weights(self) -> np.ndarray:
        """Per-joint weights 1/sigma_i^2 normalized to mean 1 (nv,), for the wrench map."""
        weights(self.records.state[0], self.records.joints)
        return self.records.joints["weight"].copy()

    def step(self, t: float, residual: np.ndarray, dt: float = 0.0) -> ContactState:
        """One residual (nv,) N·m at t s, dt s after the last (the evidence integrates over
        time: dt 0 leaves it unchanged)."""
        r = self.records
        level, event = contact_step(r.params[0], r.state[0], r.joints, float(t), float(dt),
                                    np.ascontiguousarray(residual, dtype=float))
        return ContactState(self.in_contact, level, _EVENT_WORDS[event])
