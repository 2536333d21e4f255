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
from scipy.signal import savgol_coeffs

from .compiled import kernel


class Wrench(NamedTuple):
    """force (3,) N and torque (3,) N·m (zeros in force mode) the robot applies, world axes;
    condition: condition number of the Jacobian rows used (sigma_max / sigma_min)."""

    force: np.ndarray
    torque: np.ndarray
    condition: float


@kernel
def symmetric_eigen(A, w, V):
    """Eigenvalues w (m,) ascending and eigenvectors V (m, m) (columns) of the symmetric A
    (m, m), by the cyclic Jacobi method (Jacobi 1846; Golub and Van Loan, Matrix Computations,
    4th ed. 2013, sec. 8.5): rotations until the off-diagonal part is below the rounding level.
    On a positive definite matrix it finds even the smallest eigenvalue to high relative
    accuracy (Demmel and Veselic, SIAM J. Matrix Anal. Appl. 1992), which is what the condition
    number needs; for 3x3 it is a few dozen rotations, far cheaper than a LAPACK call's set-up.
    A is overwritten."""
    m = A.shape[0]
    for r in range(m):
        for c in range(m):
            V[r, c] = 1.0 if r == c else 0.0
    for _ in range(60):
        off = 0.0
        for p in range(m):
            for q in range(p + 1, m):
                off += A[p, q] * A[p, q]
        if off == 0.0:
            break
        for p in range(m - 1):
            for q in range(p + 1, m):
                apq = A[p, q]
                if apq == 0.0:
                    continue
                app, aqq = A[p, p], A[q, q]
                # negligible against both diagonal entries: set to zero (the classical test)
                if abs(apq) <= 1e-18 * math.sqrt(abs(app * aqq)):
                    A[p, q] = A[q, p] = 0.0
                    continue
                theta = (aqq - app) / (2.0 * apq)
                t = 1.0 / (abs(theta) + math.sqrt(theta * theta + 1.0))
                if theta < 0.0:
                    t = -t
                c = 1.0 / math.sqrt(t * t + 1.0)
                s = t * c
                for k in range(m):
                    akp, akq = A[k, p], A[k, q]
                    A[k, p] = c * akp - s * akq
                    A[k, q] = s * akp + c * akq
                for k in range(m):
                    apk, aqk = A[p, k], A[q, k]
                    A[p, k] = c * apk - s * aqk
                    A[q, k] = s * apk + c * aqk
                A[p, q] = A[q, p] = 0.0
                for k in range(m):
                    vkp, vkq = V[k, p], V[k, q]
                    V[k, p] = c * vkp - s * vkq
                    V[k, q] = s * vkp + c * vkq
    for r in range(m):
        w[r] = A[r, r]
    for i in range(1, m):   # insertion sort, ascending, vectors along
        j = i
        while j > 0 and w[j - 1] > w[j]:
            w[j - 1], w[j] = w[j], w[j - 1]
            for k in range(m):
                V[k, j - 1], V[k, j] = V[k, j], V[k, j - 1]
            j -= 1


@kernel
def wrench_solve(out, jacobian, external_torque, weights, full_wrench, damping2):
    """Weighted damped least squares: out[:m] = F = -(J W J^T + lambda^2 I)^-1 J W tau_ext
    (m = 6 with full_wrench, else 3; out (6,), its tail zeroed in force mode). Returns the
    condition number sqrt(w_max / w_min) of J W J^T (inf when singular).

    One symmetric eigendecomposition (:func:`symmetric_eigen`) gives both the solve and the
    condition number."""
    m = 6 if full_wrench else 3
    nv = external_torque.shape[0]
    A = np.empty((m, m))
    b = np.zeros(m)
    for r in range(m):
        for c in range(r, m):
            s = 0.0
            for j in range(nv):
                s += jacobian[r, j] * weights[j] * jacobian[c, j]
            A[r, c] = s
            A[c, r] = s
        for j in range(nv):
            b[r] += jacobian[r, j] * weights[j] * external_torque[j]
    w = np.empty(m)
    vecs = np.empty((m, m))
    symmetric_eigen(A, w, vecs)
    # F = -f_ext = -V diag(1/(w + lambda^2)) V^T J W tau_ext
    c = np.empty(m)
    for k in range(m):
        s = 0.0
        for r in range(m):
            s += vecs[r, k] * b[r]
        c[k] = s / (-damping2 - w[k])
    for r in range(m):
        s = 0.0
        for k in range(m):
            s += vecs[r, k] * c[k]
        out[r] = s
    for r in range(m, 6):
        out[r] = 0.0
    w_min, w_max = w[0], w[m - 1]
    return math.sqrt(w_max / w_min) if w_min > 0.0 else math.inf


class WrenchMap:
    """Maps external joint torque (nv,) N·m to the contact wrench by damped least squares."""

    def __init__(self, full_wrench: bool, damping: float):
        self.full_wrench = full_wrench
        self.damping2 = damping * damping
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
        tau = np.ascontiguousarray(external_torque, dtype=float)
        w = np.ones(len(tau)) if weights is None else np.ascontiguousarray(weights, float)
        out = np.empty(6)
        condition = wrench_solve(out, np.ascontiguousarray(jacobian, dtype=float), tau, w,
                                 self.full_wrench, self.damping2)
        if self.full_wrench:
            return Wrench(out[:3], out[3:], condition)
        return Wrench(out[:3], self.no_torque, condition)


# --- direction ------------------------------------------------------------------------------
DI_MODE = 0          # 0 world, 1 contact, 2 estimated
DI_U = 1             # 1..3: u, unit, world frame
DI_VECTOR = 4        # 4..6: the vector given, unit
DI_MOMENT = 7        # 7..15: forgetting sum of v v^T dt, m^2/s, row-major
DI_DISPLACEMENT = 16  # 16..18: forgetting sum of v dt, m
DI_TRAVEL = 19       # forgetting sum of |v| dt, m
DI_WINDOW = 20       # s
DI_COS_HYSTERESIS = 21
DI_MIN_TRAVEL = 22   # m
DIRECTION_SIZE = 23
DIRECTION_MODES = ("world", "contact", "estimated")


@kernel
def direction_update(sc, dt, rotation, point_velocity):
    """Update u (sc[DI_U:DI_U + 3]) after one sample: rotation (3, 3) of the contact frame,
    contact-point velocity (3,) m/s."""
    mode = sc[DI_MODE]
    if mode == 0.0:
        return
    if mode == 1.0:
        for r in range(3):
            sc[DI_U + r] = (rotation[r, 0] * sc[DI_VECTOR] + rotation[r, 1] * sc[DI_VECTOR + 1]
                            + rotation[r, 2] * sc[DI_VECTOR + 2])
        return
    keep = math.exp(-dt / sc[DI_WINDOW])
    v0, v1, v2 = point_velocity[0], point_velocity[1], point_velocity[2]
    moment = np.empty((3, 3))
    for r in range(3):
        for c in range(3):
            k = DI_MOMENT + 3 * r + c
            sc[k] = keep * sc[k] + dt * point_velocity[r] * point_velocity[c]
            moment[r, c] = sc[k]
    sc[DI_TRAVEL] = keep * sc[DI_TRAVEL] + dt * math.sqrt(v0 * v0 + v1 * v1 + v2 * v2)
    for r in range(3):
        sc[DI_DISPLACEMENT + r] = keep * sc[DI_DISPLACEMENT + r] + dt * point_velocity[r]
    if sc[DI_TRAVEL] >= sc[DI_MIN_TRAVEL]:
        w = np.empty(3)
        vecs = np.empty((3, 3))
        symmetric_eigen(moment, w, vecs)
        d0, d1, d2 = vecs[0, 2], vecs[1, 2], vecs[2, 2]
        u0, u1, u2 = sc[DI_U], sc[DI_U + 1], sc[DI_U + 2]
        du = d0 * u0 + d1 * u1 + d2 * u2
        # an axis, not an arrow: keep the sense u already has; where u is (nearly)
        # perpendicular to it, take the sense of the net motion in the window
        if abs(du) > 0.1:
            dref = du
        else:
            dref = (d0 * sc[DI_DISPLACEMENT] + d1 * sc[DI_DISPLACEMENT + 1]
                    + d2 * sc[DI_DISPLACEMENT + 2])
        if dref < 0.0:
            d0, d1, d2, du = -d0, -d1, -d2, -du
        if du < sc[DI_COS_HYSTERESIS]:
            sc[DI_U], sc[DI_U + 1], sc[DI_U + 2] = d0, d1, d2


class Direction:
    """The manipulation direction u (3,), unit, world frame.

    mode 'world': the vector as given; 'contact': the vector rotated by the contact frame's
    orientation; 'estimated': principal direction of the contact point's velocity over
    ``window`` s (exponential forgetting), switched only when it turns by more than
    ``hysteresis_deg`` and the point travelled at least ``min_travel`` m within the window; its
    sense is kept continuous from the vector given (motion back and forth does not flip it), or
    taken from the net motion where the vector given is perpendicular to the motion.
    ``sc`` (DIRECTION_SIZE,): a view into the Pipeline's storage, or None.
    """

    def __init__(self, mode: str, vector, window: float, hysteresis_deg: float,
                 min_travel: float, sc: np.ndarray | None = None):
        v = np.asarray(vector, float)
        self.mode = mode
        self.vector = v / np.linalg.norm(v)
        self._sc = np.zeros(DIRECTION_SIZE) if sc is None else sc
        s = self._sc
        s[DI_MODE] = DIRECTION_MODES.index(mode)
        s[DI_VECTOR:DI_VECTOR + 3] = self.vector
        s[DI_WINDOW] = window
        s[DI_COS_HYSTERESIS] = float(np.cos(np.radians(hysteresis_deg)))
        s[DI_MIN_TRAVEL] = min_travel
        self.reset()

    @property
    def u(self) -> np.ndarray:
        """(3,) the direction now, unit, world frame (a view: copy it to keep it)."""
        return self._sc[DI_U:DI_U + 3]

    @u.setter
    def u(self, value: np.ndarray) -> None:
        self._sc[DI_U:DI_U + 3] = value

    def reset(self) -> None:
        s = self._sc
        s[DI_U:DI_U + 3] = self.vector
        s[DI_MOMENT:DI_MOMENT + 9] = 0.0
        s[DI_DISPLACEMENT:DI_DISPLACEMENT + 3] = 0.0
        s[DI_TRAVEL] = 0.0

    def update(self, dt: float, rotation: np.ndarray, point_velocity: np.ndarray) -> np.ndarray:
        """Return u (3,) after one sample (rotation (3,3) of the contact frame, velocity (3,)
        m/s); a new array."""
        direction_update(self._sc, float(dt), np.ascontiguousarray(rotation, dtype=float),
                         np.ascontiguousarray(point_velocity, dtype=float))
        return self.u.copy()


# --- kinematics along u ---------------------------------------------------------------------
KI_I = 0             # ring index
KI_COUNT = 1         # samples pushed
KI_POSITION = 2      # running position along u, m
KI_FILTERED = 3      # 1: the alignment filter holds a row
KI_H = 4             # 4..7: the filtered regressor
KI_ACC = 8           # Savitzky-Golay x'' at the window centre, m/s^2
KI_VEL = 9           # Savitzky-Golay smoothed x' at the window centre, m/s
KI_GAIN = 10         # observer-matching filter gain, 1/s (NaN: none)
KI_N = 11            # window length, samples (odd)
KI_HALF = 12
KI_NOMINAL_DT = 13   # s
KI_READY = 14        # 1: built (the Pipeline builds it after its warm-up)
KINEMATICS_SIZE = 15
# buffer (6, 2n): rows t, v, x, f doubled (the window is always the contiguous slice [i, i + n)),
# then the derivative and smoothing coefficients in the first n columns of rows 4 and 5


@kernel
def kinematics_push(buf, sc, t, dx, velocity, force):
    """Add a sample: displacement dx along u since the last one (m), velocity (m/s), force
    along u (N)."""
    position = sc[KI_POSITION] + dx
    sc[KI_POSITION] = position
    i, n = int(sc[KI_I]), int(sc[KI_N])
    buf[0, i] = buf[0, i + n] = t
    buf[1, i] = buf[1, i + n] = velocity
    buf[2, i] = buf[2, i + n] = position
    buf[3, i] = buf[3, i + n] = force
    i += 1
    if i >= n:
        i = 0
    sc[KI_I] = i
    sc[KI_COUNT] += 1.0
    if sc[KI_COUNT] >= n:
        spacing = (buf[0, i + n - 1] - buf[0, i]) / (n - 1)
        d = 0.0
        v = 0.0
        for k in range(n):
            d += buf[4, k] * buf[1, i + k]
            v += buf[5, k] * buf[1, i + k]
        sc[KI_ACC] = d / spacing
        sc[KI_VEL] = v


@kernel
def kinematics_start_contact(buf, sc, origin):
    """Contact onset: x measured from ``origin`` (m, a past value of the running position)."""
    sc[KI_POSITION] -= origin
    for k in range(buf.shape[1]):
        buf[2, k] -= origin
    sc[KI_FILTERED] = 0.0


@kernel
def kinematics_aligned_row(buf, sc, dt, row):
    """row (6,) = h [x'', x', x, 1] at the window centre through the observer-matching
    first-order filter, the force f (N) and the time (s) at the window centre; False (row
    untouched) until the window is full."""
    n = int(sc[KI_N])
    if sc[KI_COUNT] < n:
        return False
    c = int(sc[KI_I]) + int(sc[KI_HALF])
    h0, h1, h2, h3 = sc[KI_ACC], sc[KI_VEL], buf[2, c], 1.0
    gain = sc[KI_GAIN]
    if sc[KI_FILTERED] != 0.0 and gain == gain:
        a = math.exp(-gain * dt)
        b = 1.0 - a
        h0 = a * sc[KI_H] + b * h0
        h1 = a * sc[KI_H + 1] + b * h1
        h2 = a * sc[KI_H + 2] + b * h2
        h3 = a * sc[KI_H + 3] + b
    sc[KI_H], sc[KI_H + 1], sc[KI_H + 2], sc[KI_H + 3] = h0, h1, h2, h3
    sc[KI_FILTERED] = 1.0
    row[0], row[1], row[2], row[3] = h0, h1, h2, h3
    # the force is the observer's output: already filtered once, so it is taken as it is
    row[4] = buf[3, c]
    row[5] = buf[0, c]
    return True


class AlongKinematics:
    """Position, velocity and acceleration along u, and the force along u, aligned in time.

    Acceleration: Savitzky-Golay derivative of the velocity over ``n`` samples (odd) at the window
    centre; sample spacing is the window's mean interval. To feed the environment filter, the
    values at the window centre are used (lag = half the window, ``lag`` s), and the regressor is
    passed through the same first-order filter as the momentum observer (``exp(-K dt)``), so that
    the filtered force and the filtered regressor obey the same linear model: the observer's lag
    is matched, not ignored (the model f = h . theta is linear with constant theta).
    ``observer_gain`` None: no matching filter (the Kalman-form observer does not lag slow forces).
    ``sc`` (KINEMATICS_SIZE,): a view into the Pipeline's storage, or None.
    """

    def __init__(self, window: float, polyorder: int, nominal_dt: float,
                 observer_gain: float | None, sc: np.ndarray | None = None):
        n = max(int(round(window / nominal_dt)) | 1, polyorder + 2 | 1)
        self.n = n
        self.half = n // 2
        self._sc = np.zeros(KINEMATICS_SIZE) if sc is None else sc
        self._buf = np.zeros((6, 2 * n))
        # savgol_coeffs with use='dot' gives weights for the window in time order
        self._buf[4, :n] = savgol_coeffs(n, polyorder, deriv=1, delta=1.0, use="dot")
        self._buf[5, :n] = savgol_coeffs(n, polyorder, deriv=0, use="dot")
        s = self._sc
        s[KI_GAIN] = math.nan if observer_gain is None else observer_gain
        s[KI_N], s[KI_HALF], s[KI_NOMINAL_DT] = n, self.half, nominal_dt
        s[KI_READY] = 1.0
        self.reset()

    @property
    def buffer(self) -> np.ndarray:
        """(6, 2n) the ring buffer and the coefficients (for the Pipeline's compiled step)."""
        return self._buf

    @property
    def lag(self) -> float:
        """Lag of the aligned values behind the newest sample, s (nominal spacing)."""
        return self.half * float(self._sc[KI_NOMINAL_DT])

    @property
    def position(self) -> float:
        """m, running position along u (from the contact onset once in contact)."""
        return float(self._sc[KI_POSITION])

    def reset(self) -> None:
        self._buf[:4] = 0.0
        s = self._sc
        s[KI_I] = s[KI_COUNT] = s[KI_POSITION] = s[KI_FILTERED] = 0.0
        s[KI_H:KI_H + 4] = 0.0
        s[KI_ACC] = s[KI_VEL] = 0.0

    def start_contact(self, origin: float) -> None:
        """Contact onset: x is measured from ``origin`` (m, a past value of the running
        position: where the contact began, before it was detected); the alignment filter
        restarts."""
        kinematics_start_contact(self._buf, self._sc, float(origin))

    def push(self, t: float, dx: float, velocity: float, force: float) -> None:
        """Add a sample: displacement dx along u since the last sample (m), velocity (m/s),
        force along u (N)."""
        kinematics_push(self._buf, self._sc, float(t), float(dx), float(velocity), float(force))

    @property
    def ready(self) -> bool:
        return self._sc[KI_COUNT] >= self.n

    def acceleration(self) -> float:
        """Savitzky-Golay acceleration at the window centre, m/s^2 (0 before the window fills)."""
        return float(self._sc[KI_ACC])

    def aligned_row(self, dt: float) -> tuple[tuple[float, float, float, float], float,
                                               float] | None:
        """Regressor h = [x'', x', x, 1] at the window centre passed through the
        observer-matching first-order filter, and the force f (N) at the window centre; returns
        (h: 4 floats, f, centre time s), or None until the window is full."""
        row = np.empty(6)
        if not kinematics_aligned_row(self._buf, self._sc, float(dt), row):
            return None
        h0, h1, h2, h3, f, tc = row.tolist()
        return (h0, h1, h2, h3), f, tc
