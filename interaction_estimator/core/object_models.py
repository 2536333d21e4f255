"""Models of the object the robot handles: their parameters, units and measurement rows.

A model declares its parameters' names and units, which of them are kept non-negative, and how a
measurement row (regressor h, measured force f) is built from the kinematics at the window
centre; the environment filter (:mod:`.environment`) estimates ``theta`` in ``f = h . theta``
whatever its length, and health, outputs and files follow the names declared here.

``along_direction`` (the default): along the manipulation direction u,
``f = mass x'' + damping x' + stiffness x + static_force`` (kg, N·s/m, N/m, N), h = [x'', x', x,
1].

The measurement row may pass through a first-order filter matched to the momentum observer's
lag (first-order form: ``exp(-K_O dt)``): the filtered force and the filtered regressor then obey
the same linear model (f = h . theta is linear with constant theta), so the observer's lag is
matched, not ignored. The Kalman-form observer does not lag slow forces: no filter.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .compiled import kernel
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

PARAMS = record(
    "object model parameters",
    ("kind", I1, "", "MODEL_* code"),
    ("matching", B1, "", "pass the row through the observer-matching first-order filter"),
    ("matching_gain", F8, "1/s", "that filter's gain (the observer's mean K_O)"),
)
STATE = record(
    "object model state",
    ("filtered", B1, "", "the matching filter holds a row (cleared at contact onset)"),
)
ROW = record(
    "measurement row entry, per parameter",
    ("regressor", F8, "(parameter-dependent)", "h_i of the row, after the matching filter"),
)


@kernel
def measurement_row(p, s, row, dt, acceleration, velocity, position):
    """Fill ``row.regressor`` (m,) from the kinematics at the window centre (x'' m/s^2, x' m/s,
    x m), through the matching filter when it is on (dt s since the last row)."""
    if p.kind == MODEL_ALONG_DIRECTION:
        h0, h1, h2, h3 = acceleration, velocity, position, 1.0
        if s.filtered and p.matching:
            a = math.exp(-p.matching_gain * dt)
            b = 1.0 - a
            h0 = a * row[0].regressor + b * h0
            h1 = a * row[1].regressor + b * h1
            h2 = a * row[2].regressor + b * h2
            h3 = a * row[3].regressor + b
        row[0].regressor = h0
        row[1].regressor = h1
        row[2].regressor = h2
        row[3].regressor = h3
    s.filtered = True


class ModelRecords(NamedTuple):
    params: np.ndarray   # (1,) PARAMS
    state: np.ndarray    # (1,) STATE
    row: np.ndarray      # (m,) ROW


def new_records(model: ObjectModel, matching_gain: float | None,
                records: ModelRecords | None = None) -> ModelRecords:
    """Records of ``model`` (or ``records``, views into the Pipeline's storage, configured);
    ``matching_gain`` 1/s, or None for no matching filter."""
    r = ModelRecords(PARAMS.one(), STATE.one(), ROW.many(model.size)) if records is None \
        else records
    p = r.params[0]
    p["kind"] = model.code
    p["matching"] = matching_gain is not None
    p["matching_gain"] = 0.0 if matching_gain is None else matching_gain
    return r
