"""Models of the object the robot handles: their parameters, units and measurement rows.

A model declares its parameters' names and units, which of them are kept non-negative, and how a
measurement row (regressor h, measured force f) is built from the kinematics at the window
centre; the environment filter (:mod:`.environment`) estimates ``theta`` in ``f = h . theta``
whatever its length, and health, outputs and files follow the names declared here.

``along_direction`` (the default): along the manipulation direction u,
``f = mass x'' + damping x' + stiffness x + static_force`` (kg, N·s/m, N/m, N), h = [x'', x', x,
1].

``revolute`` and ``prismatic`` (a hinge, a slider): the same four parameters and row along the
mechanism's own path, u and x taken from its geometry (:mod:`.mechanism`): for a hinge u is the
tangent of the arc at the grasp and x the arc length from the contact onset, so the parameters
are the hinge's as felt at the grasp (mass = I / r^2, damping = c / r^2, stiffness = k / r^2,
static force = tau0 / r, with I kg·m², c N·m·s/rad, k N·m/rad, tau0 N·m and r the grasp radius,
m); for a slider u is its axis.

``cartesian``: ``F = M x'' + D x' + K x + f_s`` in the world frame (3 channels per sample), x the
contact point's displacement from the contact onset, M, D, K symmetric 3x3 (kg, N·s/m, N/m) and
f_s a 3-vector (N): 21 parameters. Symmetry is kept by the parametrisation (six entries per
matrix: xx, xy, xz, yy, yz, zz; the regressor of an off-diagonal entry has the partner
component in each of its two channels); positive semidefiniteness by projecting each reported
matrix onto the semidefinite cone, the nearest semidefinite matrix in the Frobenius norm
(eigenvalues clipped at zero; Higham, "Computing a nearest symmetric positive semidefinite
matrix", Linear Algebra Appl. 103, 1988), as the filter projects a negative mass onto its bound:
the unconstrained estimate is kept for the next update (:func:`project_semidefinite`).

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
from .settings import Settings, SettingsError
from .wrench import symmetric_eigen

MODEL_ALONG_DIRECTION, MODEL_CARTESIAN, MODEL_REVOLUTE, MODEL_PRISMATIC = 0, 1, 2, 3


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

    @property
    def mechanism(self) -> bool:
        """The model's direction and position come from a fitted mechanism (revolute,
        prismatic)."""
        return self.code in (MODEL_REVOLUTE, MODEL_PRISMATIC)

    def prior(self, s: Settings) -> tuple[list[float], list[float]]:
        """(mean, std) of the prior, one per parameter in the model's units, from the
        settings: ``filter.initial_mean`` and ``filter.initial_std`` for the models of four
        parameters, the ``cartesian.*`` settings for ``cartesian``."""
        if self.code != MODEL_CARTESIAN:
            along_mean, along_std = list(s["filter.initial_mean"]), list(s["filter.initial_std"])
            if len(along_mean) != self.size:  # a defect, not user input
                raise AssertionError(f"{self.name}: prior of {len(along_mean)} parameters")
            return along_mean, along_std
        diagonal = s["cartesian.initial_diagonal"]
        spread = s["cartesian.initial_std"]
        mean: list[float] = []
        std: list[float] = []
        for k in range(3):   # mass, damping, stiffness: xx xy xz yy yz zz
            for a, b in _PAIRS:
                mean.append(diagonal[k] if a == b else 0.0)
                std.append(spread[k])
        mean += list(s["cartesian.initial_static_force"])
        std += [spread[3]] * 3
        return mean, std


ALONG_DIRECTION = ObjectModel(
    "along_direction", MODEL_ALONG_DIRECTION,
    ("mass", "damping", "stiffness", "static_force"),
    ("kg", "N·s/m", "N/m", "N"),
    ("h[0] (x'', m/s^2)", "h[1] (x', m/s)", "h[2] (x, m)", "h[3] (constant 1)"),
    (True, True, True, False),
)
_PAIRS = ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2))   # xx xy xz yy yz zz
_AXES = "xyz"


def _matrix_names(prefix: str) -> tuple[str, ...]:
    return tuple(f"{prefix}_{_AXES[a]}{_AXES[b]}" for a, b in _PAIRS)


CARTESIAN = ObjectModel(
    "cartesian", MODEL_CARTESIAN,
    _matrix_names("mass") + _matrix_names("damping") + _matrix_names("stiffness")
    + ("static_force_x", "static_force_y", "static_force_z"),
    ("kg",) * 6 + ("N·s/m",) * 6 + ("N/m",) * 6 + ("N",) * 3,
    tuple(f"{kind} {_AXES[a]}{_AXES[b]} (partner component of {symbol}, {unit})"
          for kind, symbol, unit in (("mass", "x''", "m/s^2"), ("damping", "x'", "m/s"),
                                     ("stiffness", "x", "m"))
          for a, b in _PAIRS) + tuple(f"static force {c} (1 in channel {c})" for c in _AXES),
    (False,) * 21,   # semidefiniteness by projection (project_semidefinite), not by bounds
    channels=3,
)
REVOLUTE = ObjectModel(
    "revolute", MODEL_REVOLUTE, ALONG_DIRECTION.parameter_names,
    ALONG_DIRECTION.parameter_units,
    ("h[0] (tangential acceleration, m/s^2)", "h[1] (tangential velocity, m/s)",
     "h[2] (arc length from the contact onset, m)", "h[3] (constant 1)"),
    ALONG_DIRECTION.nonnegative,
)
PRISMATIC = ObjectModel(
    "prismatic", MODEL_PRISMATIC, ALONG_DIRECTION.parameter_names,
    ALONG_DIRECTION.parameter_units,
    ("h[0] (x'' along the axis, m/s^2)", "h[1] (x' along the axis, m/s)",
     "h[2] (x along the axis from the contact onset, m)", "h[3] (constant 1)"),
    ALONG_DIRECTION.nonnegative,
)
MODELS = {m.name: m for m in (ALONG_DIRECTION, CARTESIAN, REVOLUTE, PRISMATIC)}


def model_named(name: str) -> ObjectModel:
    """The model of an ``environment.model`` value (SettingsError for an unknown name)."""
    try:
        return MODELS[name]
    except KeyError:
        raise SettingsError(f"environment.model: {name!r} is not a model; expected one of "
                            + ", ".join(repr(n) for n in MODELS)) from None

MATCH_NONE, MATCH_FIRST_ORDER, MATCH_KALMAN = 0, 1, 2
SETTLE_STEPS = 500   # covariance steps to the steady state at the start of the Kalman match

PARAMS = record(
    "object model parameters",
    ("kind", I1, "", "MODEL_* code"),
    ("matching", I1, "", "MATCH_NONE, MATCH_FIRST_ORDER or MATCH_KALMAN"),
    ("matching_gain", F8, "1/s or rad/s", "the observer's mean K_O, or its bandwidth"),
    ("semidefinite", B1, "", "cartesian: report semidefinite matrices (filter.nonnegative)"),
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
    if p.kind != MODEL_CARTESIAN:
        raw[0, 0], raw[0, 1], raw[0, 2], raw[0, 3] = acceleration, velocity, position, 1.0
    matched_row(p, s, rows, dt, raw)


@kernel
def cartesian_row(p, s, rows, dt, acceleration, velocity, position):
    """Fill ``rows.regressor`` (3, 21) of the cartesian model from the contact point's
    acceleration (3,) m/s^2, velocity (3,) m/s and displacement from the contact onset (3,) m
    (world frame, window centre), through the matching filter: channel c of ``M w`` for the
    symmetric M with entries (xx, xy, xz, yy, yz, zz) has w's partner component in each entry
    of row c, so symmetry holds by construction."""
    raw = np.zeros((3, 21))
    _symmetric_columns(raw, 0, acceleration)
    _symmetric_columns(raw, 6, velocity)
    _symmetric_columns(raw, 12, position)
    for c in range(3):
        raw[c, 18 + c] = 1.0
    matched_row(p, s, rows, dt, raw)


_PAIR_A = (0, 0, 0, 1, 1, 2)   # _PAIRS' first and second indices, as compiled constants
_PAIR_B = (0, 1, 2, 1, 2, 2)


@kernel
def _symmetric_columns(raw, base, w):
    """Columns base..base + 5 of raw (3, m): the regressor of a symmetric 3x3 matrix's entries
    (xx, xy, xz, yy, yz, zz) acting on w (3,)."""
    for k in range(6):
        a, b = _PAIR_A[k], _PAIR_B[k]
        raw[a, base + k] = w[b]
        if a != b:
            raw[b, base + k] = w[a]


@kernel
def project_semidefinite(values, first):
    """The symmetric 3x3 matrix whose entries (xx, xy, xz, yy, yz, zz) are values[first:first
    + 6], replaced in place by its nearest positive semidefinite matrix in the Frobenius norm:
    eigenvalues clipped at zero (Higham, Linear Algebra Appl. 103, 1988). Returns True when it
    changed."""
    A = np.empty((3, 3))
    for k in range(6):
        a, b = _PAIR_A[k], _PAIR_B[k]
        A[a, b] = A[b, a] = values[first + k]
    w = np.empty(3)
    V = np.empty((3, 3))
    symmetric_eigen(A, w, V)
    if w[0] >= 0.0:
        return False
    for k in range(6):
        a, b = _PAIR_A[k], _PAIR_B[k]
        total = 0.0
        for e in range(3):
            if w[e] > 0.0:
                total += w[e] * V[a, e] * V[b, e]
        values[first + k] = total
    return True


@kernel
def matched_row(p, s, rows, dt, raw):
    """``rows.regressor`` (p, m) from the raw regressor ``raw`` (p, m) through the matching
    filter of the observer's dynamics (see the module docstring), dt s since the last row."""
    channels, m = rows.shape[0], rows.shape[1]
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
                records: ModelRecords | None = None, semidefinite: bool = True) -> ModelRecords:
    """Records of ``model`` (or ``records``, views into the Pipeline's storage, configured);
    ``matching``: MATCH_*, with the observer's gain (1/s, first order) or bandwidth (rad/s,
    Kalman form); ``semidefinite``: the cartesian model's matrices are reported projected onto
    the semidefinite cone (the setting filter.nonnegative)."""
    r = (ModelRecords(PARAMS.one(), STATE.one(),
                      ROW.many(model.channels * model.size).reshape(model.channels, model.size))
         if records is None else records)
    p = r.params[0]
    p["kind"] = model.code
    p["matching"] = matching
    p["matching_gain"] = matching_gain
    p["semidefinite"] = semidefinite
    s = r.state[0]
    if s["bandwidth6"] != matching_gain ** 6:
        s["bandwidth6"] = matching_gain ** 6
        s["settled"] = False
        s["shared_cov"] = np.diag([1.0, 1e6, 1e6])
    return r
