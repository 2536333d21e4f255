"""Generalized momentum observer, torque-bias and friction compensation, contact monitor.

Momentum observer (De Luca and Mattone, ICRA 2005; Haddadin, De Luca and Albu-Schaeffer,
"Robot collisions: a survey on detection, isolation, and identification", IEEE T-RO 2017):
with p = M(q) q' and p' = tau + C^T(q, q') q' - g(q) + tau_ext, the residual
``r = K_O (p - p0 - integral(tau + C^T q' - g + r))`` obeys ``r' = K_O (tau_ext - r)``.

Discretization (exact under irregular sample intervals): over one interval dt the mean of
``tau_ext`` is ``(p_k - p_{k-1}) / dt - mean(tau + C^T q' - g)`` (the momentum change is exact; the
known terms are averaged by the trapezoid rule), and the first-order law is integrated exactly
for that mean held over the interval: ``r_k = a r_{k-1} + (1 - a) u_k`` with
``a = exp(-K_O dt)``. A constant external torque thus gives ``r = tau_ext (1 - exp(-K_O t))`` at
every stamp, whatever the spacing of the stamps.

Choosing K_O: the residual lags tau_ext by about 1/K_O s, and velocity noise of standard deviation
sigma_v enters it as about ``K_O * M_ii * sigma_v`` N·m on joint i (the momentum M q' passes
velocity noise straight through), effort noise as about ``sigma_tau * sqrt(K_O dt / 2)``.

Storage: every stage keeps its state in float arrays (layouts below), and its per-sample
arithmetic is a compiled function of those arrays (:mod:`.compiled`). A class used on its own owns
its arrays; the Pipeline hands each stage views into its own storage and steps all of them in
one compiled call (:mod:`.pipeline_step`), with these same functions.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .compiled import kernel

NAN = math.nan

# --- observer scalar state (float array of OBSERVER_SIZE) ------------------------------------
OB_T = 0            # time of the last step, s (NaN: not started)
OB_RESTARTS = 1     # restarts after gaps
OB_MAX_GAP = 2      # s
OB_FORM = 3         # 0 first order, 1 Kalman form
OB_SHARED = 4       # 1: one bandwidth on every joint, the shared-covariance path
OB_SETTLE = 5       # 1: run the shared covariance to its steady state at the next step
OB_W6 = 6           # bandwidth^6, (rad/s)^6 (shared path)
OB_VN = 7           # velocity noise, rad/s
OB_EN = 8           # effort noise, N·m
OB_SH = 9           # 9..14: shared covariance in units of R_i (p00, p01, p02, p11, p12, p22)
OB_SETTLE_STEPS = 15
OBSERVER_SIZE = 16
# per-joint rows of the observer: Z (6, nv) = p, d, e, beta_prev, spare, spare, then the gain
OBSERVER_ROWS = 7   # rows 0..5: Z, row 6: gain (1/s or rad/s)

FORM_FIRST_ORDER, FORM_KALMAN = 0.0, 1.0


@kernel
def _shared_gain(sc, dt, mean_r):
    """One predict-update of the shared covariance (units of R_i); returns the gains."""
    p00, p01, p02 = sc[OB_SH], sc[OB_SH + 1], sc[OB_SH + 2]
    p11, p12, p22 = sc[OB_SH + 3], sc[OB_SH + 4], sc[OB_SH + 5]
    a, b = dt, 0.5 * dt * dt
    r00 = p00 + a * p01 + b * p02
    r01 = p01 + a * p11 + b * p12
    r02 = p02 + a * p12 + b * p22
    r11 = p11 + a * p12
    r12 = p12 + a * p22
    q = a * sc[OB_W6]
    a2 = a * a
    a3 = a2 * a
    en = sc[OB_EN] * a
    n00 = r00 + a * r01 + b * r02 + q * a3 * a2 / 20.0 + en * en / mean_r
    n01 = r01 + a * r02 + q * a2 * a2 / 8.0
    n02 = r02 + q * a3 / 6.0
    n11 = r11 + a * r12 + q * a3 / 3.0
    n12 = r12 + q * a2 / 2.0
    n22 = p22 + q * a
    s = n00 + 1.0
    k0, k1, k2 = n00 / s, n01 / s, n02 / s
    sc[OB_SH] = n00 - k0 * n00
    sc[OB_SH + 1] = n01 - k0 * n01
    sc[OB_SH + 2] = n02 - k0 * n02
    sc[OB_SH + 3] = n11 - k1 * n01
    sc[OB_SH + 4] = n12 - k1 * n02
    sc[OB_SH + 5] = n22 - k2 * n02
    return k0, k1, k2


@kernel
def _kalman_start(Z, P, sc, gain, t, momentum, beta, M):
    """(Re)start the Kalman form at t: momentum measured, the last residual kept (warm start
    after a gap), a wide prior on the external torque and its rate."""
    n = momentum.shape[0]
    vn2 = sc[OB_VN] * sc[OB_VN]
    same = True
    for i in range(n):
        if gain[i] != gain[0]:
            same = False
    d1 = 0.0
    d2 = 0.0
    for i in range(n):
        r_var = 1e-12
        for j in range(M.shape[1]):
            r_var += vn2 * M[i, j] * M[i, j]
        Z[0, i] = momentum[i]
        Z[2, i] = 0.0
        Z[3, i] = beta[i]
        scale = max(abs(Z[1, i]), 10.0)    # N·m: tau_ext unknown at start
        for a in range(3):
            for b in range(3):
                P[i, a, b] = 0.0
        P[i, 0, 0] = r_var
        P[i, 1, 1] = scale * scale
        P[i, 2, 2] = (scale * gain[i]) ** 2
        d1 = max(d1, P[i, 1, 1] / r_var)
        d2 = max(d2, P[i, 2, 2] / r_var)
    sc[OB_T] = t
    sc[OB_SETTLE] = 1.0
    if same and n > 0:   # covariance in units of R_i, shared by the joints
        sc[OB_SHARED] = 1.0
        sc[OB_SH:OB_SH + 6] = 0.0
        sc[OB_SH] = 1.0
        sc[OB_SH + 3] = d1
        sc[OB_SH + 5] = d2
        sc[OB_W6] = gain[0] ** 6
    else:
        sc[OB_SHARED] = 0.0


@kernel
def observer_step(Z, P, sc, gain, t, momentum, beta, M):
    """Advance the observer (either form) to t (s). momentum p (nv,) N·m·s, beta = tau + C^T q'
    - g (nv,) N·m, M (nv, nv). The external-torque estimate is Z[1] (nv,) N·m afterwards.
    Returns 1 when the observer restarted after a gap longer than max_gap (or a stamp not
    after the last), else 0."""
    n = momentum.shape[0]
    t_prev = sc[OB_T]
    started = t_prev == t_prev
    dt = t - t_prev
    if sc[OB_FORM] == FORM_FIRST_ORDER:
        restarted = 0
        if started:
            if dt > sc[OB_MAX_GAP] or dt <= 0.0:
                sc[OB_RESTARTS] += 1.0
                restarted = 1
            else:
                for i in range(n):
                    a = math.exp(-gain[i] * dt)
                    mean_ext = (momentum[i] - Z[0, i]) / dt - 0.5 * (beta[i] + Z[3, i])
                    Z[1, i] = a * Z[1, i] + (1.0 - a) * mean_ext
        sc[OB_T] = t
        for i in range(n):
            Z[0, i] = momentum[i]
            Z[3, i] = beta[i]
        return restarted

    if not started:
        _kalman_start(Z, P, sc, gain, t, momentum, beta, M)
        return 0
    if dt > sc[OB_MAX_GAP] or dt <= 0.0:
        sc[OB_RESTARTS] += 1.0
        _kalman_start(Z, P, sc, gain, t, momentum, beta, M)
        return 1
    vn2 = sc[OB_VN] * sc[OB_VN]
    if sc[OB_SHARED] != 0.0:
        # Fast path for one bandwidth on every joint: the covariance divided by R_i is the same
        # for all joints (Q and R both scale with R_i), so one 3x3 recursion gives every joint's
        # gain. Effort noise enters with the joints' mean R; it is small next to the velocity
        # noise through M.
        total = 0.0
        for i in range(n):
            for j in range(M.shape[1]):
                total += M[i, j] * M[i, j]
        mean_r = vn2 * total / n + 1e-12
        if sc[OB_SETTLE] != 0.0:
            # first interval after a (re)start: the covariance recursion to its steady state for
            # this interval first, so that the start does not read velocity noise as a large
            # external torque (a cold, wide prior did: hundreds of newtons for a few ms)
            for _ in range(int(sc[OB_SETTLE_STEPS])):
                _shared_gain(sc, dt, mean_r)
            sc[OB_SETTLE] = 0.0
        k0, k1, k2 = _shared_gain(sc, dt, mean_r)
        a, b, c = dt, 0.5 * dt * dt, 0.5 * dt
        for j in range(n):
            # predict: p- = p + dt d + dt^2/2 e + dt/2 (beta_prev + beta), d- = d + dt e, e- = e;
            # update with the momentum measured
            e = Z[2, j]
            pm = Z[0, j] + a * Z[1, j] + b * e + c * (Z[3, j] + beta[j])
            dm = Z[1, j] + a * e
            innov = momentum[j] - pm
            Z[0, j] = pm + k0 * innov
            Z[1, j] = dm + k1 * innov
            Z[2, j] = e + k2 * innov
            Z[3, j] = beta[j]
        sc[OB_T] = t
        return 0
    # one filter per joint, each with its own bandwidth
    en2 = (sc[OB_EN] * dt) ** 2
    dt2 = dt * dt
    dt3 = dt2 * dt
    q00, q01, q02 = dt3 * dt2 / 20.0, dt2 * dt2 / 8.0, dt3 / 6.0
    q11, q12, q22 = dt3 / 3.0, dt2 / 2.0, dt
    h = 0.5 * dt2
    for i in range(n):
        r_var = 1e-12
        for j in range(M.shape[1]):
            r_var += vn2 * M[i, j] * M[i, j]
        x0 = Z[0, i] + dt * (Z[1, i] + 0.5 * (beta[i] + Z[3, i])) + h * Z[2, i]
        x1 = Z[1, i] + dt * Z[2, i]
        x2 = Z[2, i]
        # F P F^T with F = [[1, dt, dt^2/2], [0, 1, dt], [0, 0, 1]]
        p00, p01, p02 = P[i, 0, 0], P[i, 0, 1], P[i, 0, 2]
        p11, p12, p22 = P[i, 1, 1], P[i, 1, 2], P[i, 2, 2]
        f00 = p00 + dt * p01 + h * p02
        f01 = p01 + dt * p11 + h * p12
        f02 = p02 + dt * p12 + h * p22
        f11 = p11 + dt * p12
        f12 = p12 + dt * p22
        w = r_var * dt * gain[i] ** 6
        n00 = f00 + dt * f01 + h * f02 + w * q00 + en2
        n01 = f01 + dt * f02 + w * q01
        n02 = f02 + w * q02
        n11 = f11 + dt * f12 + w * q11
        n12 = f12 + w * q12
        n22 = p22 + w * q22
        s = n00 + r_var
        k0, k1, k2 = n00 / s, n01 / s, n02 / s
        innov = momentum[i] - x0
        Z[0, i] = x0 + k0 * innov
        Z[1, i] = x1 + k1 * innov
        Z[2, i] = x2 + k2 * innov
        Z[3, i] = beta[i]
        P[i, 0, 0] = n00 - k0 * n00
        P[i, 0, 1] = P[i, 1, 0] = n01 - k0 * n01
        P[i, 0, 2] = P[i, 2, 0] = n02 - k0 * n02
        P[i, 1, 1] = n11 - k1 * n01
        P[i, 1, 2] = P[i, 2, 1] = n12 - k1 * n02
        P[i, 2, 2] = n22 - k2 * n02
    sc[OB_T] = t
    return 0


class _ObserverBase:
    """Storage shared by both forms: scalar state ``sc``, rows ``Z`` (6, nv) and the gain, the
    per-joint covariances ``P`` (nv, 3, 3) of the Kalman form. The Pipeline passes views into its
    own storage (``sc``, ``rows``, ``cov``); used alone, the observer owns them."""

    _form = FORM_FIRST_ORDER

    def __init__(self, gain: np.ndarray, max_gap: float, sc: np.ndarray | None = None,
                 rows: np.ndarray | None = None, cov: np.ndarray | None = None):
        gain = np.asarray(gain, dtype=float)
        self._bound = sc is not None
        self._sc = np.zeros(OBSERVER_SIZE) if sc is None else sc
        self._sc[:] = 0.0
        self._sc[OB_FORM] = self._form
        self._allocate(len(gain), rows, cov)
        self._rows[6] = gain
        self.max_gap = max_gap

    def _allocate(self, n: int, rows: np.ndarray | None = None,
                  cov: np.ndarray | None = None) -> None:
        self._rows = np.zeros((OBSERVER_ROWS, n)) if rows is None else rows
        self._P = np.zeros((n, 3, 3)) if cov is None else cov

    @property
    def gain(self) -> np.ndarray:
        """(nv,) per-joint gain (first order: K_O 1/s; Kalman form: bandwidth rad/s)."""
        return self._rows[6]

    @gain.setter
    def gain(self, value: np.ndarray) -> None:
        value = np.asarray(value, dtype=float)
        if value.shape != self._rows[6].shape:
            if self._bound:
                raise ValueError(f"observer gain has {value.size} entries; expected "
                                 f"{self._rows.shape[1]} (one per joint)")
            self._allocate(value.size)
        self._rows[6] = value

    @property
    def max_gap(self) -> float:
        """s: a longer gap between samples restarts the observer."""
        return float(self._sc[OB_MAX_GAP])

    @max_gap.setter
    def max_gap(self, value: float) -> None:
        self._sc[OB_MAX_GAP] = value

    @property
    def restarts(self) -> int:
        return int(self._sc[OB_RESTARTS])

    @property
    def residual(self) -> np.ndarray:
        """(nv,) the external-torque estimate, N·m (a copy)."""
        return self._rows[1].copy()

    def reset(self) -> None:
        self._rows[:6] = 0.0
        self._P[:] = 0.0
        sc = self._sc
        sc[OB_T] = NAN
        sc[OB_SHARED] = sc[OB_SETTLE] = 0.0
        sc[OB_SH:OB_SH + 6] = 0.0

    def step(self, t: float, momentum: np.ndarray, beta: np.ndarray,
             mass_matrix: np.ndarray | None = None) -> tuple[np.ndarray, bool]:
        """Advance to time t (s). momentum: p = M q' (nv,), N·m·s. beta: tau + C^T q' - g
        (nv,), N·m, the known part of p'. mass_matrix (nv, nv): M(q) (Kalman form; unused by the
        first-order form). Returns (residual r (nv,) N·m, restarted). After a gap longer than
        max_gap the observer restarts but keeps the last residual as its starting value."""
        momentum = np.ascontiguousarray(momentum, dtype=float)
        beta = np.ascontiguousarray(beta, dtype=float)
        M = (np.zeros((len(momentum), len(momentum))) if mass_matrix is None
             else np.ascontiguousarray(mass_matrix, dtype=float))
        restarted = observer_step(self._rows[:6], self._P, self._sc, self._rows[6], float(t),
                                  momentum, beta, M)
        return self._rows[1].copy(), bool(restarted)


class MomentumObserver(_ObserverBase):
    """First-order generalized-momentum residual with per-joint gain K_O (1/s), shape (nv,)."""

    _form = FORM_FIRST_ORDER

    def __init__(self, gain: np.ndarray, max_gap: float, **storage):
        super().__init__(gain, max_gap, **storage)
        self.reset()


class KalmanMomentumObserver(_ObserverBase):
    """Kalman-filter form of the momentum observer, with a disturbance model (one filter per joint).

    State per joint i: momentum p_i, external torque d_i and its rate e_i, with
    ``p' = beta + d``, ``d' = e``, ``e' = w`` (w white: the external torque as a doubly
    integrated random walk, the disturbance-observer form of Haddadin, De Luca and
    Albu-Schaeffer, IEEE T-RO 2017, Sec. on Kalman-based observers; state-augmentation for an
    unknown input as in Bar-Shalom, Li and Kirubarajan 2001, ch. 6). The measurement is the
    momentum ``M(q) q'`` from the measured velocity, noise variance
    ``R_i = sigma_v^2 sum_j M_ij^2`` (velocity noise through the mass matrix); effort noise
    ``sigma_tau`` enters p as process noise. The transition matrix and the process covariance are
    the closed forms for the actual interval dt, so irregular stamps are handled exactly.

    ``bandwidth`` w (rad/s) sets the jerk intensity to ``q_i = R_i dt w^6``, which places the
    steady-state poles near w (a third-order Butterworth-like pattern): the estimate follows
    changes of tau_ext up to about w/(2 pi) Hz with no lag for ramps, and velocity noise is rolled
    off above w, much more than in the first-order form (whose noise gain stays K_O at high
    frequency). With one bandwidth on every joint the covariance divided by R_i is shared by
    the joints and computed once (see :func:`observer_step`).
    """

    _form = FORM_KALMAN

    def __init__(self, bandwidth: np.ndarray, velocity_noise: float, effort_noise: float,
                 max_gap: float, settle_steps: int = 500, **storage):
        super().__init__(bandwidth, max_gap, **storage)
        self.velocity_noise, self.effort_noise = velocity_noise, effort_noise
        self._sc[OB_SETTLE_STEPS] = int(settle_steps)
        self.reset()

    @property
    def velocity_noise(self) -> float:
        """rad/s, standard deviation of the measured joint velocities."""
        return float(self._sc[OB_VN])

    @velocity_noise.setter
    def velocity_noise(self, value: float) -> None:
        self._sc[OB_VN] = value

    @property
    def effort_noise(self) -> float:
        """N·m, standard deviation of the measured efforts."""
        return float(self._sc[OB_EN])

    @effort_noise.setter
    def effort_noise(self, value: float) -> None:
        self._sc[OB_EN] = value

    @property
    def settle_steps(self) -> int:
        return int(self._sc[OB_SETTLE_STEPS])


# --- friction -------------------------------------------------------------------------------

@kernel
def friction_torque(out, v, viscous, coulomb, eps):
    """out (nv,) = tau_f = f_v v + f_c tanh(v / eps), N·m, at joint velocity v (nv,) rad/s."""
    for i in range(out.shape[0]):
        out[i] = viscous[i] * v[i] + coulomb[i] * math.tanh(v[i] / eps)


class FrictionModel:
    """Joint friction ``tau_f = f_v q' + f_c tanh(q' / eps)`` (N·m), for motor-side efforts.

    Viscous plus Coulomb friction with a smooth sign (a common smooth approximation, e.g.
    Olsson et al., "Friction models and friction compensation", Eur. J. Control 1998).
    """

    def __init__(self, viscous: np.ndarray, coulomb: np.ndarray, eps: float, enabled: bool):
        self.viscous = np.asarray(viscous, float)
        self.coulomb = np.asarray(coulomb, float)
        self.eps = float(eps)
        self.enabled = bool(enabled) and bool(np.any(self.viscous) or np.any(self.coulomb))

    def torque(self, velocity: np.ndarray) -> np.ndarray | float:
        """Friction torque (nv,) N·m at joint velocity (nv,) rad/s; 0.0 when disabled."""
        if not self.enabled:
            return 0.0
        out = np.empty(len(self.viscous))
        friction_torque(out, np.ascontiguousarray(velocity, dtype=float), self.viscous,
                        self.coulomb, self.eps)
        return out


# --- torque bias ----------------------------------------------------------------------------
BI_LAST = 0          # time last learned, s (NaN: never)
BI_TC = 1            # time constant, s
BI_MAX_RATE = 2      # N·m/s
BI_LIMIT = 3         # N·m
BI_LEARN = 4         # 1: learn
BIAS_SIZE = 5


@kernel
def bias_update(value, sc, t, dt, raw):
    """Move the bias value (nv,) N·m toward -raw (the residual computed without bias)."""
    if sc[BI_LEARN] == 0.0 or dt <= 0.0:
        return
    alpha = 1.0 - math.exp(-dt / sc[BI_TC])
    rate = sc[BI_MAX_RATE] * dt
    limit = sc[BI_LIMIT]
    for i in range(value.shape[0]):
        step = -alpha * (raw[i] + value[i])
        if step > rate:
            step = rate
        elif step < -rate:
            step = -rate
        b = value[i] + step
        if b > limit:
            b = limit
        elif b < -limit:
            b = -limit
        value[i] = b
    sc[BI_LAST] = t


class BiasEstimator:
    """Per-joint torque-sensor bias b (N·m), learned while the robot moves freely.

    In free motion the residual computed without bias settles at -b, so b is a first-order
    low-pass (time constant T s) of -r_raw, its change limited to max_rate N·m/s and its size to
    +/- limit N·m. ``age`` is the time since the bias was last learned, s.
    ``sc`` (BIAS_SIZE,) and ``value`` (nv,): views into the Pipeline's storage, or None.
    """

    def __init__(self, initial: np.ndarray, time_constant: float, max_rate: float,
                 limit: float, learn: bool, sc: np.ndarray | None = None,
                 value: np.ndarray | None = None):
        self.initial = np.asarray(initial, float)
        self._sc = np.zeros(BIAS_SIZE) if sc is None else sc
        self.value = np.zeros(len(self.initial)) if value is None else value
        self._sc[BI_TC], self._sc[BI_MAX_RATE], self._sc[BI_LIMIT] = (time_constant, max_rate,
                                                                      limit)
        self._sc[BI_LEARN] = bool(learn)
        self.reset()

    time_constant = property(lambda self: float(self._sc[BI_TC]))
    max_rate = property(lambda self: float(self._sc[BI_MAX_RATE]))
    limit = property(lambda self: float(self._sc[BI_LIMIT]))
    learn = property(lambda self: bool(self._sc[BI_LEARN]))

    @property
    def last_learned(self) -> float | None:
        """s, when the bias was last learned (None: never)."""
        t = float(self._sc[BI_LAST])
        return None if math.isnan(t) else t

    @last_learned.setter
    def last_learned(self, t: float | None) -> None:
        self._sc[BI_LAST] = NAN if t is None else t

    def reset(self) -> None:
        self.value[:] = np.clip(self.initial, -self.limit, self.limit)
        self._sc[BI_LAST] = NAN

    def update(self, t: float, dt: float, raw_residual: np.ndarray) -> None:
        """Move b toward -raw_residual (raw_residual (nv,) N·m, computed without bias)."""
        bias_update(self.value, self._sc, float(t), float(dt),
                    np.ascontiguousarray(raw_residual, dtype=float))

    def age(self, t: float) -> float:
        """s since the bias was last learned (inf when never)."""
        last = self._sc[BI_LAST]
        return math.inf if last != last else t - float(last)


# --- contact monitor ------------------------------------------------------------------------
CM_IN_CONTACT = 0    # 1 in contact
CM_PENDING = 1       # time a level crossing began, s (NaN: none)
CM_ENTER = 2
CM_EXIT = 3
CM_HOLD = 4          # s
CM_FLOOR = 5         # N·m
CM_NOISE_TC = 6      # s
CM_RELEASE = 7       # s
CM_WEIGHTS_OK = 8    # 1: the weights row is up to date
CONTACT_SIZE = 9
# per-joint rows: noise variance N·m^2, 1 / (nv sigma^2), weights, quiet mean-square sum
CONTACT_ROWS = 4
EVENT_NONE, EVENT_BEGIN, EVENT_END = 0, 1, 2
_EVENT_WORDS = ("", "contact_begin", "contact_end")


@kernel
def contact_step(rows, sc, t, residual):
    """Hysteresis on the residual level; returns (level, event code)."""
    inv = rows[1]
    s = 0.0
    for i in range(residual.shape[0]):
        s += residual[i] * residual[i] * inv[i]
    level = math.sqrt(s)
    in_contact = sc[CM_IN_CONTACT] != 0.0
    crossing = level < sc[CM_EXIT] if in_contact else level > sc[CM_ENTER]
    event = EVENT_NONE
    if crossing:
        if sc[CM_PENDING] != sc[CM_PENDING]:
            sc[CM_PENDING] = t
        if t - sc[CM_PENDING] >= (sc[CM_RELEASE] if in_contact else sc[CM_HOLD]):
            sc[CM_IN_CONTACT] = 0.0 if in_contact else 1.0
            event = EVENT_END if in_contact else EVENT_BEGIN
            sc[CM_PENDING] = math.nan
    else:
        sc[CM_PENDING] = math.nan
    return level, event


@kernel
def contact_set_var(rows, sc):
    """After a change of the noise variances (row 0): floor, inverse and weights marked stale."""
    var, inv = rows[0], rows[1]
    n = var.shape[0]
    floor2 = sc[CM_FLOOR] * sc[CM_FLOOR]
    for i in range(n):
        if not var[i] >= floor2:
            var[i] = floor2
        inv[i] = 1.0 / (var[i] * n)
    sc[CM_WEIGHTS_OK] = 0.0


@kernel
def contact_learn_power(rows, sc, dt, mean_square):
    """Learn from the mean square (nv,) N·m^2 of the free-motion residual over dt s."""
    alpha = 1.0 - math.exp(-dt / sc[CM_NOISE_TC])
    var = rows[0]
    for i in range(var.shape[0]):
        var[i] += alpha * (mean_square[i] - var[i])
    contact_set_var(rows, sc)


@kernel
def contact_weights(rows, sc):
    """Per-joint weights 1/sigma_i^2 normalized to mean 1, in row 2 (rebuilt when stale)."""
    if sc[CM_WEIGHTS_OK] == 0.0:
        var, w = rows[0], rows[2]
        n = var.shape[0]
        total = 0.0
        for i in range(n):
            total += 1.0 / var[i]
        for i in range(n):
            w[i] = (1.0 / var[i]) * (n / total)
        sc[CM_WEIGHTS_OK] = 1.0
    return rows[2]


class ContactState(NamedTuple):
    in_contact: bool
    level: float   # residual RMS over joints in units of its free-motion noise (dimensionless)
    event: str     # "", "contact_begin" or "contact_end"


class ContactMonitor:
    """Free motion vs contact, by hysteresis on the residual relative to its noise level.

    level = sqrt(mean_i (r_i / sigma_i)^2) with sigma_i the residual's noise level learned in
    free motion (exponential average of r_i^2, floored at noise_floor N·m). Contact begins when
    level > enter_level for hold_time s, ends when level < exit_level for release_time s.
    ``sc`` (CONTACT_SIZE,) and ``rows`` (CONTACT_ROWS, nv): views into the Pipeline's storage,
    or None.
    """

    def __init__(self, nv: int, enter_level: float, exit_level: float, hold_time: float,
                 noise_floor: float, noise_time_constant: float, release_time: float = 0.0,
                 sc: np.ndarray | None = None, rows: np.ndarray | None = None):
        self.nv = nv
        self._sc = np.zeros(CONTACT_SIZE) if sc is None else sc
        self._rows = np.zeros((CONTACT_ROWS, nv)) if rows is None else rows
        s = self._sc
        s[CM_ENTER], s[CM_EXIT], s[CM_HOLD] = enter_level, exit_level, hold_time
        s[CM_FLOOR], s[CM_NOISE_TC], s[CM_RELEASE] = (noise_floor, noise_time_constant,
                                                      release_time)
        self.reset()

    enter_level = property(lambda self: float(self._sc[CM_ENTER]))
    exit_level = property(lambda self: float(self._sc[CM_EXIT]))
    hold_time = property(lambda self: float(self._sc[CM_HOLD]))
    noise_floor = property(lambda self: float(self._sc[CM_FLOOR]))
    release_time = property(lambda self: float(self._sc[CM_RELEASE]))
    noise_time_constant = property(lambda self: float(self._sc[CM_NOISE_TC]))

    def reset(self) -> None:
        self._rows[0] = self.noise_floor ** 2
        contact_set_var(self._rows, self._sc)
        self._sc[CM_IN_CONTACT] = 0.0
        self._sc[CM_PENDING] = NAN

    @property
    def in_contact(self) -> bool:
        return bool(self._sc[CM_IN_CONTACT])

    @in_contact.setter
    def in_contact(self, value: bool) -> None:
        self._sc[CM_IN_CONTACT] = bool(value)

    @property
    def pending(self) -> bool:
        """True while a level crossing waits out hold_time (a state change may be coming)."""
        return not math.isnan(self._sc[CM_PENDING])

    @property
    def noise_var(self) -> np.ndarray:
        """(nv,) the residual's free-motion noise variances, N·m^2 (a copy)."""
        return self._rows[0].copy()

    def set_noise_var(self, var: np.ndarray) -> None:
        """Set the per-joint residual noise variances (nv,) N·m^2 (floored at noise_floor^2)."""
        self._rows[0] = np.asarray(var, float)
        contact_set_var(self._rows, self._sc)

    @property
    def noise_std(self) -> np.ndarray:
        return np.sqrt(self._rows[0])

    def learn_noise(self, dt: float, residual: np.ndarray) -> None:
        """Learn from one free-motion residual (nv,) N·m, dt s after the last."""
        self.learn_power(dt, np.asarray(residual, float) ** 2)

    def learn_power(self, dt: float, mean_square: np.ndarray) -> None:
        """Learn from the mean square (nv,) N·m^2 of the free-motion residual over dt s."""
        contact_learn_power(self._rows, self._sc, float(dt),
                            np.ascontiguousarray(mean_square, dtype=float))

    @property
    def weights(self) -> np.ndarray:
        """Per-joint weights 1/sigma_i^2 normalized to mean 1 (nv,), for the wrench map."""
        return contact_weights(self._rows, self._sc).copy()

    def step(self, t: float, residual: np.ndarray) -> ContactState:
        level, event = contact_step(self._rows, self._sc, float(t),
                                    np.ascontiguousarray(residual, dtype=float))
        return ContactState(self.in_contact, level, _EVENT_WORDS[event])
