"""Models of the object the robot handles: their parameters, units and measurement rows.

A model declares its parameters' names and units, which of them are kept non-negative, and how a
measurement row (regressor h, measured force f) is built from the kinematics at the window
centre; the environment filter (:mod:`.environment`) estimates ``theta`` in ``f = h . theta``
whatever its length, and health, outputs and files follow the names declared here.

``along_direction`` (the default): along the manipulation direction u,
``f = mass x'' + damping x' + stiffness x + static_force`` (kg, N·s/m, N/m, N), h = [x'', x', x,
1].

The measurement row passes through a filter matched to the momentum observer's dynamics: the
force is the observer's output, filtered by it, so the regressor is filtered by the same
dynamics (first-order form: ``exp(-K_O dt)``; Kalman form: the observer's own steady-state
filter, :func:`_kalman_match`). The filtered force and the filtered regressor then obey the same
linear model (f = h . theta is linear with constant theta), so the observer's lag and amplitude
response are matched, not ignored. Measured in the Monte-Carlo validation (seed 11, a 28 kg
load at 80 rad/s bandwidth): without the match the force's error correlated with the motion
added 5 % to the mass and 40 N/m to the stiffness.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .compiled import kernel
from .observer import shared_gain as observer_gain
from .records import B1, F8, I1, record

MODEL_ALONG_DIRECTION = 0


@dataclass(frozen=True)
class ObjectModel:
    """What a model declares: its name, its parameters' names, units and regressor labels, and
    which parameters are kept non-negative."""

    name: str
    code: int
    parameter_names: tuple[str, ...]
    parameter_units: tuple[str, ...]
    regressor_labels: tuple[str, ...]
    nonnegative: tuple[bool, ...]
    channels: int = 1   # rows per sample: 1 for a force along a direction, 3 for a vector

    @property
    def size(self) -> int:
        return len(self.parameter_names)


ALONG_DIRECTION = ObjectModel(
    "along_direction", MODEL_ALONG_DIRECTION,
    ("mass", "damping", "stiffness", "static_force"),
    ("kg", "N·s/m", "N/m", "N"),
    ("h[0] (x'', m/s^2)", "h[1] (x', m/s)", "h[2] (x, m)", "h[3] (constant 1)"),
    (True, True, True, False),
)
MODELS = {m.name: m for m in (ALONG_DIRECTION,)}

MATCH_NONE, MATCH_FIRST_ORDER, MATCH_KALMAN = 0, 1, 2
SETTLE_STEPS = 500   # covariance steps to the steady state at the start of the Kalman match

PARAMS = record(
    "object model parameters",
    ("kind", I1, "", "MODEL_* code"),
    ("matching", I1, "", "MATCH_NONE, MATCH_FIRST_ORDER or MATCH_KALMAN"),
    ("matching_gain", F8, "1/s or rad/s", "the observer's mean K_O, or its bandwidth"),
)
STATE = record(
    "object model state",
    ("filtered", B1, "", "the matching filter holds a row (cleared at contact onset)"),
    ("settled", B1, "", "the Kalman match's covariance is at its steady state"),
    ("bandwidth6", F8, "(rad/s)^6", "the Kalman match's bandwidth to the sixth power"),
    ("shared_cov", F8, (3, 3), "", "its covariance in units of the measurement variance"),
)
ROW = record(
    "measurement row entry, per channel and parameter",
    ("regressor", F8, "(parameter-dependent)", "h_i of the row, after the matching filter"),
    ("raw", F8, "(parameter-dependent)", "h_i before the filter, last row"),
    ("integral", F8, "(parameter-dependent)·s", "integral of h_i (the match's momentum)"),
    ("state", F8, (3,), "", "the Kalman match's (integral, h_i, rate) estimate"),
)


@kernel
def _kalman_match(p, s, rows, dt, raw):
    """The Kalman-form observer's response to a disturbance, applied to the regressor: each
    column h_i is run through the same filter as an external torque through the observer (its
    integral is the momentum it would add, the trapezoid rule as in the observer; the gains are
    the observer's steady-state gains for this interval and bandwidth, the effort-noise term
    left out). The observer is linear, so the filtered force and the filtered regressor obey
    the same linear model."""
    if not s.settled:
        for _ in range(SETTLE_STEPS):
            observer_gain(s, dt, 1.0, 0.0)
        s.settled = True
    k0, k1, k2 = observer_gain(s, dt, 1.0, 0.0)
    a, b = dt, 0.5 * dt * dt
    for c in range(rows.shape[0]):
        for i in range(rows.shape[1]):
            r = rows[c, i]
            _match_one(r, raw[c, i], s.filtered, dt, a, b, k0, k1, k2)


@kernel
def _match_one(r, raw, filtered, dt, a, b, k0, k1, k2):
    """One column of the Kalman match (see :func:`_kalman_match`)."""
    x = r.state
    if not filtered:
        r.integral = 0.0
        x[0], x[1], x[2] = 0.0, raw, 0.0
        r.raw = raw
        r.regressor = raw
    else:
        r.integral += 0.5 * dt * (raw + r.raw)
        r.raw = raw
        pm = x[0] + a * x[1] + b * x[2]
        dm = x[1] + a * x[2]
        innov = r.integral - pm
        x[0] = pm + k0 * innov
        x[1] = dm + k1 * innov
        x[2] = x[2] + k2 * innov
        r.regressor = x[1]


@kernel
def measurement_row(p, s, rows, dt, acceleration, velocity, position):
    """Fill ``rows.regressor`` (p, m) from the kinematics at the window centre (x'' m/s^2,
    x' m/s, x m), through the matching filter (dt s since the last row)."""
    channels, m = rows.shape[0], rows.shape[1]
    raw = np.zeros((channels, m))
    if p.kind == MODEL_ALONG_DIRECTION:
        raw[0, 0], raw[0, 1], raw[0, 2], raw[0, 3] = acceleration, velocity, position, 1.0
    if p.matching == MATCH_KALMAN:
        _kalman_match(p, s, rows, dt, raw)
    elif p.matching == MATCH_FIRST_ORDER and s.filtered:
        a = math.exp(-p.matching_gain * dt)
        bb = 1.0 - a
        for c in range(channels):
            for i in range(m):
                rows[c, i].regressor = a * rows[c, i].regressor + bb * raw[c, i]
    else:
        for c in range(channels):
            for i in range(m):
                rows[c, i].regressor = raw[c, i]
    s.filtered = True


class ModelRecords(NamedTuple):
    params: np.ndarray   # (1,) PARAMS
    state: np.ndarray    # (1,) STATE
    rows: np.ndarray     # (p, m) ROW


def new_records(model: ObjectModel, matching: int, matching_gain: float,
                records: ModelRecords | None = None) -> ModelRecords:
    """Records of ``model`` (or ``records``, views into the Pipeline's storage, configured);
    ``matching``: MATCH_*, with the observer's gain (1/s, first order) or bandwidth (rad/s,
    Kalman form)."""
    r = (ModelRecords(PARAMS.one(), STATE.one(),
                      ROW.many(model.channels * model.size).reshape(model.channels, model.size))
         if records is None else records)
    p = r.params[0]
    p["kind"] = model.code
    p["matching"] = matching
    p["matching_gain"] = matching_gain
    s = r.state[0]
    if s["bandwidth6"] != matching_gain ** 6:
        s["bandwidth6"] = matching_gain ** 6
        s["settled"] = False
        s["shared_cov"] = np.diag([1.0, 1e6, 1e6])
    return r
