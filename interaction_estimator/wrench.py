"""WrenchMap (external joint torque -> contact wrench) and Projection (along the direction u).

Wrench: ``tau_ext = J^T F_ext``; the damped least-squares solution (Nakamura and Hanafusa,
ASME J. Dyn. Syst. 1986; Wampler, IEEE SMC 1986) ``F_ext = (J J^T + lambda^2 I)^-1 J tau_ext``.
The package reports ``F = -F_ext``, the force (and torque) the robot applies to the environment,
in world axes at the contact point.

Projection: u fixed in the world or contact frame, or estimated as the principal direction of the
contact point's motion over a window (the dominant eigenvector of the velocity second-moment
matrix, with hysteresis). Along u: position x (integral of u . dp from contact onset, i.e. arc
length for a curved path), velocity u . (J q'), acceleration by a Savitzky-Golay differentiator
(Savitzky and Golay, Anal. Chem. 1964; coefficients from scipy.signal.savgol_coeffs) evaluated at
the window's centre, which lags by half the window.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg.lapack import dsyev
from scipy.signal import savgol_coeffs


@dataclass(frozen=True)
class Wrench:
    """force (3,) N and torque (3,) N·m (zeros in force mode) the robot applies, world axes;
    condition: condition number of the Jacobian rows used (sigma_max / sigma_min)."""

    force: np.ndarray
    torque: np.ndarray
    condition: float


class WrenchMap:
    """Maps external joint torque (nv,) N·m to the contact wrench by damped least squares."""

    def __init__(self, full_wrench: bool, damping: float):
        self.full_wrench = full_wrench
        self.damping2 = damping * damping
        self._zero3 = np.zeros(3)

    def solve(self, jacobian: np.ndarray, external_torque: np.ndarray,
              weights: np.ndarray | None = None) -> Wrench:
        """jacobian (6, nv) world-aligned; external_torque (nv,) N·m acting on the robot.

        weights (nv,), optional: per-joint weights W (inverse noise variances, normalized to
        mean 1), giving the weighted damped least-squares solution
        ``(J W J^T + lambda^2 I)^-1 J W tau_ext`` (Gauss-Markov: noisy joints, such as a heavy
        mobile base's, count less).
        """
        jac = jacobian if self.full_wrench else jacobian[:3]
        jw = jac if weights is None else jac * weights
        # LAPACK's symmetric eigensolver called directly: numpy.linalg.eigh costs ~10x more in
        # Python overhead for a 3x3 matrix; one decomposition gives the solve and the condition.
        w, vecs, _ = dsyev(jw @ jac.T)
        f_ext = vecs @ ((vecs.T @ (jw @ external_torque)) / (w + self.damping2))
        condition = float(np.sqrt(w[-1] / w[0])) if w[0] > 0.0 else float("inf")
        if self.full_wrench:
            return Wrench(-f_ext[:3], -f_ext[3:], condition)
        return Wrench(-f_ext, self._zero3, condition)


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
                 min_travel: float):
        v = np.asarray(vector, float)
        self.mode = mode
        self.vector = v / np.linalg.norm(v)
        self.window = window
        self.cos_hysteresis = float(np.cos(np.radians(hysteresis_deg)))
        self.min_travel = min_travel
        self.reset()

    def reset(self) -> None:
        self.u = self.vector.copy()
        self._moment = np.zeros((3, 3))   # forgetting sum of v v^T dt, m^2/s
        self._travel = 0.0                # forgetting sum of |v| dt, m
        self._displacement = np.zeros(3)  # forgetting sum of v dt, m

    def update(self, dt: float, rotation: np.ndarray, point_velocity: np.ndarray) -> np.ndarray:
        """Return u after one sample (rotation (3,3) of the contact frame, velocity (3,) m/s)."""
        if self.mode == "world":
            return self.u
        if self.mode == "contact":
            self.u = rotation @ self.vector
            return self.u
        keep = np.exp(-dt / self.window)
        self._moment = keep * self._moment + dt * np.outer(point_velocity, point_velocity)
        self._travel = keep * self._travel + dt * float(np.linalg.norm(point_velocity))
        self._displacement = keep * self._displacement + dt * point_velocity
        if self._travel >= self.min_travel:
            w, vecs = np.linalg.eigh(self._moment)
            d = vecs[:, -1]
            # an axis, not an arrow: keep the sense u already has; where u is (nearly)
            # perpendicular to it, take the sense of the net motion in the window
            ref = self.u if abs(d @ self.u) > 0.1 else self._displacement
            if d @ ref < 0.0:
                d = -d
            if d @ self.u < self.cos_hysteresis:
                self.u = d
        return self.u


class AlongKinematics:
    """Position, velocity and acceleration along u, and the force along u, aligned in time.

    Acceleration: Savitzky-Golay derivative of the velocity over ``n`` samples (odd) at the window
    centre; sample spacing is the window's mean interval. To feed the environment filter, the
    values at the window centre are used (lag = half the window, ``lag`` s), and the regressor is
    passed through the same first-order filter as the momentum observer (``exp(-K dt)``), so that
    the filtered force and the filtered regressor obey the same linear model: the observer's lag
    is matched, not ignored (the model f = h . theta is linear with constant theta).
    ``observer_gain`` None: no matching filter (the Kalman-form observer does not lag slow forces).
    """

    def __init__(self, window: float, polyorder: int, nominal_dt: float,
                 observer_gain: float | None):
        n = max(int(round(window / nominal_dt)) | 1, polyorder + 2 | 1)
        self.n = n
        self.half = n // 2
        self.polyorder = polyorder
        # savgol_coeffs with use='dot' gives weights for the window in time order.
        self._deriv = savgol_coeffs(n, polyorder, deriv=1, delta=1.0, use="dot")
        self._smooth = savgol_coeffs(n, polyorder, deriv=0, use="dot")
        self.gain = observer_gain
        self.nominal_dt = nominal_dt
        self.reset()

    @property
    def lag(self) -> float:
        """Lag of the aligned values behind the newest sample, s (nominal spacing)."""
        return self.half * self.nominal_dt

    def reset(self) -> None:
        n = self.n
        # doubled ring buffers: the window is always the contiguous slice [i, i + n)
        self._t = np.zeros(2 * n)
        self._v = np.zeros(2 * n)
        self._x = np.zeros(2 * n)
        self._f = np.zeros(2 * n)
        self._i = 0
        self._count = 0
        self.position = 0.0
        self._filtered: np.ndarray | None = None

    def start_contact(self, origin: float) -> None:
        """Contact onset: x is measured from ``origin`` (m, a past value of the running
        position: where the contact began, before it was detected); the alignment filter
        restarts."""
        self.position -= origin
        self._x -= origin
        self._filtered = None

    def push(self, t: float, dx: float, velocity: float, force: float) -> None:
        """Add a sample: displacement dx along u since the last sample (m), velocity (m/s),
        force along u (N)."""
        self.position += dx
        i, n = self._i, self.n
        for buf, value in ((self._t, t), (self._v, velocity), (self._x, self.position),
                           (self._f, force)):
            buf[i] = value
            buf[i + n] = value
        self._i = (i + 1) % n
        self._count += 1

    @property
    def ready(self) -> bool:
        return self._count >= self.n

    def acceleration(self) -> float:
        """Savitzky-Golay acceleration at the window centre, m/s^2 (0 before the window fills)."""
        if not self.ready:
            return 0.0
        s = slice(self._i, self._i + self.n)
        t = self._t[s]
        spacing = (t[-1] - t[0]) / (self.n - 1)
        return float(self._deriv @ self._v[s]) / spacing

    def aligned_row(self, dt: float) -> tuple[np.ndarray, float, float] | None:
        """Regressor h = [x'', x', x, 1] at the window centre passed through the
        observer-matching first-order filter, and the force f (N) at the window centre; returns
        (h (4,), f, centre time s), or None until the window is full."""
        if not self.ready:
            return None
        s = slice(self._i, self._i + self.n)
        t = self._t[s]
        spacing = (t[-1] - t[0]) / (self.n - 1)
        c = self._i + self.half
        row = np.array([float(self._deriv @ self._v[s]) / spacing,
                        float(self._smooth @ self._v[s]), self._x[c], 1.0])
        if self._filtered is None or self.gain is None:
            self._filtered = row
        else:
            a = np.exp(-self.gain * dt)
            self._filtered = a * self._filtered + (1.0 - a) * row
        # the force is the observer's output: already filtered once, so it is taken as it is
        return self._filtered.copy(), float(self._f[c]), float(self._t[c])
