"""Kinematics along the direction u: position, velocity, acceleration and force, aligned in time.

Along u: position x (the sum of u . dp from the contact onset, i.e. arc length for a curved
path), velocity u . (J q'), acceleration by a Savitzky-Golay differentiator of the velocity
(Savitzky and Golay, Anal. Chem. 1964; coefficients from scipy.signal.savgol_coeffs) evaluated
at the window's centre, which lags by half the window: the values handed to the environment
model are all taken at that centre, so that x'', x', x and the force belong to one instant.

Records: :data:`PARAMS`, :data:`STATE`, the ring buffer (2n,) :data:`RING` (every sample
written twice, so the window is always the contiguous slice [index, index + n)) and the (n,)
:data:`COEFFICIENTS`. The window length n (samples, odd) comes from the window in seconds and
the nominal sample interval, which the Pipeline learns from the first intervals.

The models that are not along one direction (cartesian, revolute, prismatic) need the contact
point's motion in 3-D: :data:`SPATIAL_STATE` and the ring :data:`SPATIAL_RING` hold the point
(m), its velocity (m/s) and the force (N), world frame, with the same window, coefficients and
alignment: :func:`spatial_push` and :func:`spatial_centre` give x, x' (smoothed) and x''
(Savitzky-Golay derivative of the velocity) as 3-vectors at the window centre.
"""
from __future__ import annotations

import math

import numpy as np

from .compiled import kernel
from .records import B1, F8, I8, record

PARAMS = record(
    "kinematics parameters",
    ("ready", B1, "", "built: the nominal interval is known"),
    ("n", I8, "samples", "window length (odd)"),
    ("half", I8, "samples", "n // 2: the lag of the window centre"),
    ("nominal_dt_s", F8, "s", "nominal sample interval"),
)
STATE = record(
    "kinematics state",
    ("index", I8, "", "ring index of the oldest sample in the window"),
    ("count", I8, "", "samples pushed since the last reset"),
    ("position_m", F8, "m", "running position along u (from the contact onset in contact)"),
    ("acceleration", F8, "m/s^2", "Savitzky-Golay x'' at the window centre"),
    ("velocity", F8, "m/s", "Savitzky-Golay smoothed x' at the window centre"),
)
RING = record(
    "kinematics ring buffer entry",
    ("time_s", F8, "s", "stamp"),
    ("velocity", F8, "m/s", "velocity along u"),
    ("position", F8, "m", "position along u"),
    ("force", F8, "N", "force along u"),
)
COEFFICIENTS = record(
    "Savitzky-Golay coefficients",
    ("derivative", F8, "1/sample", "first derivative at the centre, unit spacing"),
    ("smoothing", F8, "", "smoothed value at the centre"),
)


@kernel
def kinematics_push(p, s, ring, coef, t, dx, velocity, force):
    """Add a sample: displacement dx along u since the last one (m), velocity (m/s), force
    along u (N)."""
    position = s.position_m + dx
    s.position_m = position
    i, n = s.index, p.n
    for k in (i, i + n):
        entry = ring[k]
        entry.time_s = t
        entry.velocity = velocity
        entry.position = position
        entry.force = force
    i += 1
    if i >= n:
        i = 0
    s.index = i
    s.count += 1
    if s.count >= n:
        spacing = (ring[i + n - 1].time_s - ring[i].time_s) / (n - 1)
        d = 0.0
        v = 0.0
        for k in range(n):
            d += coef[k].derivative * ring[i + k].velocity
            v += coef[k].smoothing * ring[i + k].velocity
        s.acceleration = d / spacing
        s.velocity = v


@kernel
def kinematics_start_contact(s, ring, origin):
    """Contact onset: x measured from ``origin`` (m, a past value of the running position)."""
    s.position_m -= origin
    for k in range(ring.shape[0]):
        ring[k].position -= origin


@kernel
def kinematics_centre(p, s, ring):
    """(full, x'' m/s^2, x' m/s, x m, force N, time s) at the window centre; full is False (and
    the rest zeros) until the window is full."""
    if s.count < p.n:
        return False, 0.0, 0.0, 0.0, 0.0, 0.0
    c = ring[s.index + p.half]
    return True, s.acceleration, s.velocity, c.position, c.force, c.time_s


@kernel
def kinematics_reset(s, ring):
    s.index = 0
    s.count = 0
    s.position_m = 0.0
    s.acceleration = 0.0
    s.velocity = 0.0
    for k in range(ring.shape[0]):
        ring[k].time_s = 0.0
        ring[k].velocity = 0.0
        ring[k].position = 0.0
        ring[k].force = 0.0


def savgol_weights(n: int, polyorder: int, deriv: int) -> np.ndarray:
    """Savitzky-Golay weights (window n, odd; unit spacing) of the ``deriv``-th derivative at
    the window's centre, in time order: the least-squares polynomial fit of the window,
    differentiated (Savitzky and Golay, Anal. Chem. 1964). The same numbers as
    scipy.signal.savgol_coeffs(n, polyorder, deriv, use='dot') (tested), computed with numpy so
    that building a Pipeline does not import scipy.signal (about 0.3 s here)."""
    offsets = np.arange(n, dtype=float) - n // 2
    vander = offsets[:, None] ** np.arange(polyorder + 1)[None, :]
    # the fit's coefficients c = pinv(V) y; the derivative at 0 is deriv! c[deriv]
    return np.linalg.pinv(vander)[deriv] * math.factorial(deriv)


SPATIAL_STATE = record(
    "kinematics state, 3-D",
    ("index", I8, "", "ring index of the oldest sample in the window"),
    ("count", I8, "", "samples pushed since the last reset"),
    ("onset", F8, (3,), "m", "contact point where the contact began, world frame"),
    ("acceleration", F8, (3,), "m/s^2", "Savitzky-Golay x'' at the window centre"),
    ("velocity", F8, (3,), "m/s", "Savitzky-Golay smoothed x' at the window centre"),
)
SPATIAL_RING = record(
    "kinematics ring buffer entry, 3-D",
    ("time_s", F8, "s", "stamp"),
    ("point", F8, (3,), "m", "contact point, world frame"),
    ("velocity", F8, (3,), "m/s", "its velocity"),
    ("force", F8, (3,), "N", "force the robot applies, world frame"),
)


@kernel
def spatial_push(p, s, ring, coef, t, point, velocity, force):
    """Add a sample: contact point (3,) m, its velocity (3,) m/s and the force (3,) N, world
    frame."""
    i, n = s.index, p.n
    for k in (i, i + n):
        entry = ring[k]
        entry.time_s = t
        for r in range(3):
            entry.point[r] = point[r]
            entry.velocity[r] = velocity[r]
            entry.force[r] = force[r]
    i += 1
    if i >= n:
        i = 0
    s.index = i
    s.count += 1
    if s.count >= n:
        spacing = (ring[i + n - 1].time_s - ring[i].time_s) / (n - 1)
        for r in range(3):
            d = 0.0
            v = 0.0
            for k in range(n):
                d += coef[k].derivative * ring[i + k].velocity[r]
                v += coef[k].smoothing * ring[i + k].velocity[r]
            s.acceleration[r] = d / spacing
            s.velocity[r] = v


@kernel
def spatial_centre(p, s):
    """(full, index): the ring index of the window centre (its time, point m and force N),
    where s.velocity (m/s) and s.acceleration (m/s^2) hold; full is False until the window is
    full."""
    if s.count < p.n:
        return False, 0
    return True, s.index + p.half


@kernel
def spatial_reset(s, ring):
    s.index = 0
    s.count = 0
    for r in range(3):
        s.acceleration[r] = 0.0
        s.velocity[r] = 0.0
    for k in range(ring.shape[0]):
        e = ring[k]
        e.time_s = 0.0
        for r in range(3):
            e.point[r] = 0.0
            e.velocity[r] = 0.0
            e.force[r] = 0.0


def window_samples(window: float, polyorder: int, nominal_dt: float) -> int:
    """The window length in samples (odd) for ``window`` s at ``nominal_dt`` s."""
    return max(int(round(window / nominal_dt)) | 1, polyorder + 2 | 1)


class AlongKinematics:
    """Position, velocity and acceleration along u, and the force along u, aligned in time.

    Acceleration: Savitzky-Golay derivative of the velocity over ``n`` samples (odd) at the window
    centre; sample spacing is the window's mean interval. To feed the environment filter, the
    values at the window centre are used (lag = half the window, :attr:`lag` s).
    """

    def __init__(self, window: float, polyorder: int, nominal_dt: float,
                 params: np.ndarray | None = None, state: np.ndarray | None = None):
        n = window_samples(window, polyorder, nominal_dt)
        self.n, self.half = n, n // 2
        self.params = PARAMS.one() if params is None else params
        self.state = STATE.one() if state is None else state
        self.ring, self.coefficients = RING.many(2 * n), COEFFICIENTS.many(n)
        self.coefficients["derivative"] = savgol_weights(n, polyorder, 1)
        self.coefficients["smoothing"] = savgol_weights(n, polyorder, 0)
        p = self.params[0]
        p["ready"], p["n"], p["half"], p["nominal_dt_s"] = True, n, self.half, nominal_dt
        self.reset()

    @property
    def lag(self) -> float:
        """Lag of the aligned values behind the newest sample, s (nominal spacing)."""
        return self.half * float(self.params[0]["nominal_dt_s"])

    @property
    def position(self) -> float:
        """m, running position along u (from the contact onset once in contact)."""
        return float(self.state[0]["position_m"])

    def reset(self) -> None:
        kinematics_reset(self.state[0], self.ring)

    def start_contact(self, origin: float) -> None:
        """Contact onset: x is measured from ``origin`` (m, a past value of the running
        position: where the contact began, before it was detected)."""
        kinematics_start_contact(self.state[0], self.ring, float(origin))

    def push(self, t: float, dx: float, velocity: float, force: float) -> None:
        """Add a sample: displacement dx along u since the last sample (m), velocity (m/s),
        force along u (N)."""
        kinematics_push(self.params[0], self.state[0], self.ring, self.coefficients, float(t),
                        float(dx), float(velocity), float(force))

    @property
    def ready(self) -> bool:
        return bool(self.state[0]["count"] >= self.n)

    def acceleration(self) -> float:
        """Savitzky-Golay acceleration at the window centre, m/s^2 (0 before the window fills)."""
        return float(self.state[0]["acceleration"])

    def centre(self) -> tuple[float, float, float, float, float] | None:
        """(x'' m/s^2, x' m/s, x m, force N, time s) at the window centre, or None until the
        window is full."""
        full, acc, vel, pos, force, t = kinematics_centre(self.params[0], self.state[0],
                                                          self.ring)
        return (acc, vel, pos, force, t) if full else None


def placeholder() -> tuple[np.ndarray, np.ndarray]:
    """The ring and coefficients before the nominal interval is known (not ready)."""
    return RING.many(2), COEFFICIENTS.many(1)


def spatial_placeholder() -> np.ndarray:
    """The 3-D ring where it is not used (the along-direction model) or not yet sized."""
    return SPATIAL_RING.many(2)
