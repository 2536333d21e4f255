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

import math
from typing import NamedTuple

import numpy as np
from scipy.linalg.lapack import dsyev
from scipy.signal import savgol_coeffs


class Wrench(NamedTuple):
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
        self._minus_damping2 = -self.damping2
        self.no_torque = np.zeros(3)   # the torque of force mode (read-only, shared)
        self.no_torque.setflags(write=False)

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
        w, vecs, _ = dsyev(jw.dot(jac.T))
        w_min, w_max = float(w[0]), float(w[-1])
        np.subtract(self._minus_damping2, w, out=w)   # -(w + lambda^2): the sign of F below
        # F = -f_ext = -V diag(1/(w + lambda^2)) V^T J W tau_ext
        force = vecs.dot(jw.dot(external_torque).dot(vecs) / w)
        condition = math.sqrt(w_max / w_min) if w_min > 0.0 else math.inf
        if self.full_wrench:
            return Wrench(force[:3], force[3:], condition)
        return Wrench(force, self.no_torque, condition)


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
        self._coeffs = np.vstack((self._deriv, self._smooth))  # both in one product
        self.gain = observer_gain
        self.nominal_dt = nominal_dt
        self.reset()

    @property
    def lag(self) -> float:
        """Lag of the aligned values behind the newest sample, s (nominal spacing)."""
        return self.half * self.nominal_dt

    def reset(self) -> None:
        n = self.n
        # one doubled ring buffer, rows t, v, x, f: the window is always the contiguous slice
        # [i, i + n) of every row
        self._buf = np.zeros((4, 2 * n))
        self._rows = tuple(self._buf)   # row views t, v, x, f
        self._i = 0
        self._count = 0
        self.position = 0.0
        self._filtered: tuple[float, float, float, float] | None = None
        self._acc = 0.0        # Savitzky-Golay x'' at the window centre, m/s^2
        self._vel = 0.0        # Savitzky-Golay smoothed x' at the window centre, m/s

    def start_contact(self, origin: float) -> None:
        """Contact onset: x is measured from ``origin`` (m, a past value of the running
        position: where the contact began, before it was detected); the alignment filter
        restarts."""
        self.position -= origin
        self._buf[2] -= origin
        self._filtered = None

    def push(self, t: float, dx: float, velocity: float, force: float) -> None:
        """Add a sample: displacement dx along u since the last sample (m), velocity (m/s),
        force along u (N)."""
        position = self.position = self.position + dx
        i, n = self._i, self.n
        # scalar stores into the rows (views of the one buffer): cheaper than a column store
        bt, bv, bx, bf = self._rows
        bt[i] = bt[i + n] = t
        bv[i] = bv[i + n] = velocity
        bx[i] = bx[i + n] = position
        bf[i] = bf[i + n] = force
        i += 1
        self._i = i if i < n else 0
        self._count += 1
        if self._count >= n:
            i = self._i
            spacing = float(bt[i + n - 1] - bt[i]) / (n - 1)   # a float, not numpy.float64:
            d, v = self._coeffs.dot(bv[i:i + n]).tolist()           # the filter's scalar math
            self._acc, self._vel = d / spacing, v

    @property
    def ready(self) -> bool:
        return self._count >= self.n

    def acceleration(self) -> float:
        """Savitzky-Golay acceleration at the window centre, m/s^2 (0 before the window fills)."""
        return self._acc

    def aligned_row(self, dt: float) -> tuple[tuple[float, float, float, float], float,
                                               float] | None:
        """Regressor h = [x'', x', x, 1] at the window centre passed through the
        observer-matching first-order filter, and the force f (N) at the window centre; returns
        (h: 4 floats, f, centre time s), or None until the window is full."""
        if self._count < self.n:
            return None
        c = self._i + self.half
        bt, _, bx, bf = self._rows
        row = (self._acc, self._vel, float(bx[c]), 1.0)
        if self._filtered is not None and self.gain is not None:
            a = math.exp(-self.gain * dt)
            b = 1.0 - a
            h0, h1, h2, h3 = self._filtered
            row = (a * h0 + b * row[0], a * h1 + b * row[1], a * h2 + b * row[2], a * h3 + b)
        self._filtered = row
        # the force is the observer's output: already filtered once, so it is taken as it is
        return row, float(bf[c]), float(bt[c])
