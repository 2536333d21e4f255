"""The manipulation direction u (unit, world frame) and the contact point's motion along it.

u is fixed in the world or the contact frame, or estimated as the principal direction of the
contact point's motion over a window: the dominant eigenvector of the velocity second-moment
matrix with exponential forgetting (time constant in s), switched with hysteresis.
"""
from __future__ import annotations

import math

import numpy as np

from .compiled import kernel
from .records import F8, I1, record
from .wrench import symmetric_eigen

MODE_WORLD, MODE_CONTACT, MODE_ESTIMATED = 0, 1, 2
MODES = ("world", "contact", "estimated")

PARAMS = record(
    "direction parameters",
    ("mode", I1, "", "MODE_WORLD, MODE_CONTACT or MODE_ESTIMATED"),
    ("vector", F8, (3,), "", "the direction given (unit): world or contact frame"),
    ("window_s", F8, "s", "forgetting time of the motion statistics (estimated mode)"),
    ("cos_hysteresis", F8, "", "cos of the angle u must turn by before it switches"),
    ("min_travel_m", F8, "m", "travel within the window below which u is kept"),
)
STATE = record(
    "direction state",
    ("u", F8, (3,), "", "the direction now, unit, world frame"),
    ("moment", F8, (3, 3), "m^2/s", "forgetting sum of v v^T dt"),
    ("displacement", F8, (3,), "m", "forgetting sum of v dt"),
    ("travel_m", F8, "m", "forgetting sum of |v| dt"),
)


@kernel
def direction_update(p, s, dt, rotation, point_velocity):
    """Update s.u after one sample: rotation (3, 3) of the contact frame, contact-point velocity
    (3,) m/s, dt s since the last sample."""
    if p.mode == MODE_WORLD:
        return
    if p.mode == MODE_CONTACT:
        vec = p.vector
        for r in range(3):
            s.u[r] = rotation[r, 0] * vec[0] + rotation[r, 1] * vec[1] + rotation[r, 2] * vec[2]
        return
    keep = math.exp(-dt / p.window_s)
    v0, v1, v2 = point_velocity[0], point_velocity[1], point_velocity[2]
    moment = np.empty((3, 3))
    for r in range(3):
        for c in range(3):
            s.moment[r, c] = keep * s.moment[r, c] + dt * point_velocity[r] * point_velocity[c]
            moment[r, c] = s.moment[r, c]
    s.travel_m = keep * s.travel_m + dt * math.sqrt(v0 * v0 + v1 * v1 + v2 * v2)
    for r in range(3):
        s.displacement[r] = keep * s.displacement[r] + dt * point_velocity[r]
    if s.travel_m >= p.min_travel_m:
        w = np.empty(3)
        vecs = np.empty((3, 3))
        symmetric_eigen(moment, w, vecs)
        d0, d1, d2 = vecs[0, 2], vecs[1, 2], vecs[2, 2]
        u = s.u
        du = d0 * u[0] + d1 * u[1] + d2 * u[2]
        # an axis, not an arrow: keep the sense u already has; where u is (nearly)
        # perpendicular to it, take the sense of the net motion in the window
        if abs(du) > 0.1:
            dref = du
        else:
            disp = s.displacement
            dref = d0 * disp[0] + d1 * disp[1] + d2 * disp[2]
        if dref < 0.0:
            d0, d1, d2, du = -d0, -d1, -d2, -du
        if du < p.cos_hysteresis:
            u[0], u[1], u[2] = d0, d1, d2


@kernel
def direction_reset(p, s):
    for r in range(3):
        s.u[r] = p.vector[r]
        s.displacement[r] = 0.0
        for c in range(3):
            s.moment[r, c] = 0.0
    s.travel_m = 0.0


class Direction:
    """The manipulation direction u (3,), unit, world frame.

    mode 'world': the vector as given; 'contact': the vector rotated by the contact frame's
    orientation; 'estimated': principal direction of the contact point's velocity over
    ``window`` s (exponential forgetting), switched only when it turns by more than
    ``hysteresis_deg`` and the point travelled at least ``min_travel`` m within the window; its
    sense is kept continuous from the vector given (motion back and forth does not flip it), or
    taken from the net motion where the vector given is perpendicular to the motion.
    """

    def __init__(self, mode: str, vector, window: float, hysteresis_deg: float,
                 min_travel: float, params: np.ndarray | None = None,
                 state: np.ndarray | None = None):
        v = np.asarray(vector, float)
        self.params = PARAMS.one() if params is None else params
        self.state = STATE.one() if state is None else state
        self.configure(mode, v, window, hysteresis_deg, min_travel)
        self.reset()

    def configure(self, mode: str, vector, window: float, hysteresis_deg: float,
                  min_travel: float) -> None:
        """New settings; the direction now and its statistics are kept."""
        v = np.asarray(vector, float)
        p = self.params[0]
        p["mode"] = MODES.index(mode)
        p["vector"] = v / np.linalg.norm(v)
        p["window_s"] = window
        p["cos_hysteresis"] = float(np.cos(np.radians(hysteresis_deg)))
        p["min_travel_m"] = min_travel

    @property
    def mode(self) -> str:
        return MODES[int(self.params[0]["mode"])]

    @property
    def vector(self) -> np.ndarray:
        """(3,) the unit vector given, a copy."""
        return self.params[0]["vector"].copy()

    @property
    def u(self) -> np.ndarray:
        """(3,) the direction now, unit, world frame (a copy)."""
        return self.state[0]["u"].copy()

    @u.setter
    def u(self, value: np.ndarray) -> None:
        self.state[0]["u"] = value

    def reset(self) -> None:
        direction_reset(self.params[0], self.state[0])

    def update(self, dt: float, rotation: np.ndarray, point_velocity: np.ndarray) -> np.ndarray:
        """Return u (3,) after one sample (rotation (3,3) of the contact frame, velocity (3,)
        m/s); a new array."""
        direction_update(self.params[0], self.state[0], float(dt),
                         np.ascontiguousarray(rotation, dtype=float),
                         np.ascontiguousarray(point_velocity, dtype=float))
        return self.u
