"""Generalized momentum observer: the external joint torque from the robot's momentum.

Momentum observer (De Luca and Mattone, ICRA 2005; Haddadin, De Luca and Albu-Schaeffer,
"Robot collisions: a survey on detection, isolation, and identification", IEEE T-RO 2017):
with p = M(q) q' and p' = tau + C^T(q, q') q' - g(q) + tau_ext, the residual
``r = K_O (p - p0 - integral(tau + C^T q' - g + r))`` obeys ``r' = K_O (tau_ext - r)``.

First-order form, discretized exactly under irregular sample intervals: over one interval dt the
mean of ``tau_ext`` is ``(p_k - p_{k-1}) / dt - mean(tau + C^T q' - g)`` (the momentum change is
exact; the known terms are averaged by the trapezoid rule), and the first-order law is
integrated exactly for that mean held over the interval: ``r_k = a r_{k-1} + (1 - a) u_k`` with
``a = exp(-K_O dt)``. A constant external torque thus gives ``r = tau_ext (1 - exp(-K_O t))``
at every stamp, whatever the spacing of the stamps.

Choosing K_O: the residual lags tau_ext by about 1/K_O s, and velocity noise of standard
deviation sigma_v enters it as about ``K_O * M_ii * sigma_v`` N·m on joint i (the momentum M q'
passes velocity noise straight through), effort noise as about ``sigma_tau * sqrt(K_O dt / 2)``.

Kalman form: see :class:`KalmanMomentumObserver`.

Records: :data:`PARAMS` (configuration), :data:`STATE` (what the observer carries from sample
to sample), :data:`JOINT_PARAMS` and :data:`JOINTS` ((nv,) arrays). :func:`observer_step` is the
per-sample arithmetic; the classes own their records when used alone, and the Pipeline steps the
same function on the same records.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .compiled import kernel
from .records import B1, F8, I1, I8, record

FORM_FIRST_ORDER, FORM_KALMAN = 0, 1

PARAMS = record(
    "momentum observer parameters",
    ("form", I1, "", "FORM_FIRST_ORDER or FORM_KALMAN"),
    ("max_gap_s", F8, "s", "a longer interval between samples restarts the observer"),
    ("velocity_noise", F8, "rad/s or m/s", "std of the measured joint velocities (Kalman form)"),
    ("effort_noise", F8, "N·m or N", "std of the measured efforts (Kalman form)"),
    ("settle_steps", I8, "", "covariance steps to its steady state after a (re)start"),
)
STATE = record(
    "momentum observer state",
    ("started", B1, "", "a sample has been seen since the last reset"),
    ("last_time_s", F8, "s", "stamp of the last step"),
    ("restarts", I8, "", "restarts after gaps longer than max_gap_s"),
    ("shared", B1, "", "one bandwidth on every joint: one covariance serves all joints"),
    ("settle_pending", B1, "", "run the shared covariance to its steady state at the next step"),
    ("bandwidth6", F8, "(rad/s)^6", "the shared bandwidth to the sixth power"),
    ("shared_cov", F8, (3, 3), "(units of R_i)", "shared covariance divided by R_i"),
)
JOINT_PARAMS = record(
    "momentum observer, per joint",
    ("gain", F8, "1/s (first order) or rad/s (Kalman)", "K_O, or the Kalman form's bandwidth"),
)
JOINTS = record(
    "momentum observer state, per joint",
    ("momentum", F8, "N·m·s or N·s", "estimated (Kalman) or last measured momentum p"),
    ("torque", F8, "N·m or N", "external torque estimate r (the residual)"),
    ("torque_rate", F8, "N·m/s or N/s", "its rate (Kalman form)"),
    ("beta_prev", F8, "N·m or N", "tau + C^T q' - g at the last step"),
    ("cov", F8, (3, 3), "", "covariance of (p, r, r') (Kalman form, one bandwidth per joint)"),
)


@kernel
def shared_gain(s, dt, mean_r, effort_noise):
    """One predict-update of the shared covariance (units of R_i); returns the gains."""
    c = s.shared_cov
    p00, p01, p02 = c[0, 0], c[0, 1], c[0, 2]
    p11, p12, p22 = c[1, 1], c[1, 2], c[2, 2]
    a, b = dt, 0.5 * dt * dt
    r00 = p00 + a * p01 + b * p02
    r01 = p01 + a * p11 + b * p12
    r02 = p02 + a * p12 + b * p22
    r11 = p11 + a * p12
    r12 = p12 + a * p22
    q = a * s.bandwidth6
    a2 = a * a
    a3 = a2 * a
    en = effort_noise * a
    n00 = r00 + a * r01 + b * r02 + q * a3 * a2 / 20.0 + en * en / mean_r
    n01 = r01 + a * r02 + q * a2 * a2 / 8.0
    n02 = r02 + q * a3 / 6.0
    n11 = r11 + a * r12 + q * a3 / 3.0
    n12 = r12 + q * a2 / 2.0
    n22 = p22 + q * a
    sv = n00 + 1.0
    k0, k1, k2 = n00 / sv, n01 / sv, n02 / sv
    c[0, 0] = n00 - k0 * n00
    c[0, 1] = c[1, 0] = n01 - k0 * n01
    c[0, 2] = c[2, 0] = n02 - k0 * n02
    c[1, 1] = n11 - k1 * n01
    c[1, 2] = c[2, 1] = n12 - k1 * n02
    c[2, 2] = n22 - k2 * n02
    return k0, k1, k2


@kernel
def _kalman_start(p, s, jp, js, t, momentum, beta, M):
    """(Re)start the Kalman form at t: momentum measured, the last residual kept (warm start
    after a gap), a wide prior on the external torque and its rate."""
    n = momentum.shape[0]
    vn2 = p.velocity_noise * p.velocity_noise
    same = True
    for i in range(n):
        if jp[i].gain != jp[0].gain:
            same = False
    d1 = 0.0
    d2 = 0.0
    for i in range(n):
        r_var = 1e-12
        for j in range(M.shape[1]):
            r_var += vn2 * M[i, j] * M[i, j]
        joint = js[i]
        joint.momentum = momentum[i]
        joint.torque_rate = 0.0
        joint.beta_prev = beta[i]
        scale = max(abs(joint.torque), 10.0)    # N·m: tau_ext unknown at start
        cov = joint.cov
        for a in range(3):
            for b in range(3):
                cov[a, b] = 0.0
        cov[0, 0] = r_var
        cov[1, 1] = scale * scale
        cov[2, 2] = (scale * jp[i].gain) ** 2
        d1 = max(d1, cov[1, 1] / r_var)
        d2 = max(d2, cov[2, 2] / r_var)
    s.last_time_s = t
    s.started = True
    s.settle_pending = True
    if same and n > 0:   # covariance in units of R_i, shared by the joints
        s.shared = True
        for a in range(3):
            for b in range(3):
                s.shared_cov[a, b] = 0.0
        s.shared_cov[0, 0] = 1.0
        s.shared_cov[1, 1] = d1
        s.shared_cov[2, 2] = d2
        s.bandwidth6 = jp[0].gain ** 6
    else:
        s.shared = False


@kernel
def _first_order_step(p, s, jp, js, t, momentum, beta):
    n = momentum.shape[0]
    restarted = False
    if s.started:
        dt = t - s.last_time_s
        if dt > p.max_gap_s or dt <= 0.0:
            s.restarts += 1
            restarted = True
        else:
            for i in range(n):
                joint = js[i]
                a = math.exp(-jp[i].gain * dt)
                mean_ext = (momentum[i] - joint.momentum) / dt - 0.5 * (beta[i] + joint.beta_prev)
                joint.torque = a * joint.torque + (1.0 - a) * mean_ext
    s.last_time_s = t
    s.started = True
    for i in range(n):
        js[i].momentum = momentum[i]
        js[i].beta_prev = beta[i]
    return restarted


@kernel
def _kalman_shared_step(p, s, js, dt, momentum, beta, M):
    """One bandwidth on every joint: the covariance divided by R_i is the same for all joints
    (Q and R both scale with R_i), so one 3x3 recursion gives every joint's gain. Effort noise
    enters with the joints' mean R; it is small next to the velocity noise through M."""
    n = momentum.shape[0]
    total = 0.0
    for i in range(n):
        for j in range(M.shape[1]):
            total += M[i, j] * M[i, j]
    mean_r = p.velocity_noise * p.velocity_noise * total / n + 1e-12
    if s.settle_pending:
        # first interval after a (re)start: the covariance recursion to its steady state for
        # this interval first, so that the start does not read velocity noise as a large
        # external torque (a cold, wide prior did: hundreds of newtons for a few ms)
        for _ in range(p.settle_steps):
            shared_gain(s, dt, mean_r, p.effort_noise)
        s.settle_pending = False
    k0, k1, k2 = shared_gain(s, dt, mean_r, p.effort_noise)
    a, b, c = dt, 0.5 * dt * dt, 0.5 * dt
    for j in range(n):
        # predict: p- = p + dt d + dt^2/2 e + dt/2 (beta_prev + beta), d- = d + dt e, e- = e;
        # update with the momentum measured
        joint = js[j]
        e = joint.torque_rate
        pm = joint.momentum + a * joint.torque + b * e + c * (joint.beta_prev + beta[j])
        dm = joint.torque + a * e
        innov = momentum[j] - pm
        joint.momentum = pm + k0 * innov
        joint.torque = dm + k1 * innov
        joint.torque_rate = e + k2 * innov
        joint.beta_prev = beta[j]


@kernel
def _kalman_joint_step(p, jp, js, dt, momentum, beta, M):
    """One filter per joint, each with its own bandwidth."""
    n = momentum.shape[0]
    vn2 = p.velocity_noise * p.velocity_noise
    en2 = (p.effort_noise * dt) ** 2
    dt2 = dt * dt
    dt3 = dt2 * dt
    q00, q01, q02 = dt3 * dt2 / 20.0, dt2 * dt2 / 8.0, dt3 / 6.0
    q11, q12, q22 = dt3 / 3.0, dt2 / 2.0, dt
    h = 0.5 * dt2
    for i in range(n):
        joint = js[i]
        r_var = 1e-12
        for j in range(M.shape[1]):
            r_var += vn2 * M[i, j] * M[i, j]
        x0 = (joint.momentum + dt * (joint.torque + 0.5 * (beta[i] + joint.beta_prev))
              + h * joint.torque_rate)
        x1 = joint.torque + dt * joint.torque_rate
        x2 = joint.torque_rate
        # F P F^T with F = [[1, dt, dt^2/2], [0, 1, dt], [0, 0, 1]]
        P = joint.cov
        p00, p01, p02 = P[0, 0], P[0, 1], P[0, 2]
        p11, p12, p22 = P[1, 1], P[1, 2], P[2, 2]
        f00 = p00 + dt * p01 + h * p02
        f01 = p01 + dt * p11 + h * p12
        f02 = p02 + dt * p12 + h * p22
        f11 = p11 + dt * p12
        f12 = p12 + dt * p22
        w = r_var * dt * jp[i].gain ** 6
        n00 = f00 + dt * f01 + h * f02 + w * q00 + en2
        n01 = f01 + dt * f02 + w * q01
        n02 = f02 + w * q02
        n11 = f11 + dt * f12 + w * q11
        n12 = f12 + w * q12
        n22 = p22 + w * q22
        sv = n00 + r_var
        k0, k1, k2 = n00 / sv, n01 / sv, n02 / sv
        innov = momentum[i] - x0
        joint.momentum = x0 + k0 * innov
        joint.torque = x1 + k1 * innov
        joint.torque_rate = x2 + k2 * innov
        joint.beta_prev = beta[i]
        P[0, 0] = n00 - k0 * n00
        P[0, 1] = P[1, 0] = n01 - k0 * n01
        P[0, 2] = P[2, 0] = n02 - k0 * n02
        P[1, 1] = n11 - k1 * n01
        P[1, 2] = P[2, 1] = n12 - k1 * n02
        P[2, 2] = n22 - k2 * n02


@kernel
def observer_step(p, s, jp, js, t, momentum, beta, M):
    """Advance the observer (either form) to t (s). p, s: PARAMS and STATE records; jp, js:
    (nv,) JOINT_PARAMS and JOINTS; momentum p = M q' (nv,) N·m·s, beta = tau + C^T q' - g (nv,)
    N·m, M (nv, nv) the mass matrix (Kalman form). The external-torque estimate is
    ``js.torque`` afterwards. Returns True when the observer restarted after a gap longer than
    max_gap_s (or a stamp not after the last)."""
    if p.form == FORM_FIRST_ORDER:
        return _first_order_step(p, s, jp, js, t, momentum, beta)
    if not s.started:
        _kalman_start(p, s, jp, js, t, momentum, beta, M)
        return False
    dt = t - s.last_time_s
    if dt > p.max_gap_s or dt <= 0.0:
        s.restarts += 1
        _kalman_start(p, s, jp, js, t, momentum, beta, M)
        return True
    if s.shared:
        _kalman_shared_step(p, s, js, dt, momentum, beta, M)
    else:
        _kalman_joint_step(p, jp, js, dt, momentum, beta, M)
    s.last_time_s = t
    return False


@kernel
def observer_reset(s, js):
    """Back to not started (the residual, momentum and covariances cleared)."""
    s.started = False
    s.shared = False
    s.settle_pending = False
    for a in range(3):
        for b in range(3):
            s.shared_cov[a, b] = 0.0
    for i in range(js.shape[0]):
        joint = js[i]
        joint.momentum = 0.0
        joint.torque = 0.0
        joint.torque_rate = 0.0
        joint.beta_prev = 0.0
        for a in range(3):
            for b in range(3):
                joint.cov[a, b] = 0.0


class ObserverRecords(NamedTuple):
    """The observer's records, as the compiled step takes them."""

    params: np.ndarray        # (1,) PARAMS
    state: np.ndarray         # (1,) STATE
    joint_params: np.ndarray  # (nv,) JOINT_PARAMS
    joints: np.ndarray        # (nv,) JOINTS


def new_records(nv: int) -> ObserverRecords:
    return ObserverRecords(PARAMS.one(), STATE.one(), JOINT_PARAMS.many(nv), JOINTS.many(nv))


class _ObserverBase:
    """Both forms: records (:attr:`records`: the observer's own, or views into the Pipeline's
    storage when it passes them), gain, restart on gaps."""

    _form = FORM_FIRST_ORDER

    def __init__(self, gain: np.ndarray, max_gap: float, records: ObserverRecords | None = None):
        gain = np.asarray(gain, dtype=float)
        self.records = new_records(len(gain)) if records is None else records
        self.records.params[0]["form"] = self._form
        self.records.joint_params["gain"] = gain
        self.max_gap = max_gap

    @property
    def gain(self) -> np.ndarray:
        """(nv,) per-joint gain (first order: K_O 1/s; Kalman form: bandwidth rad/s), a copy."""
        return self.records.joint_params["gain"].copy()

    @gain.setter
    def gain(self, value: np.ndarray) -> None:
        value = np.asarray(value, dtype=float)
        if value.shape != self.records.joint_params.shape:
            raise ValueError(f"observer gain has {value.size} entries; expected "
                             f"{self.records.joint_params.size} (one per joint)")
        self.records.joint_params["gain"] = value

    @property
    def max_gap(self) -> float:
        """s: a longer gap between samples restarts the observer."""
        return float(self.records.params[0]["max_gap_s"])

    @max_gap.setter
    def max_gap(self, value: float) -> None:
        self.records.params[0]["max_gap_s"] = value

    @property
    def restarts(self) -> int:
        return int(self.records.state[0]["restarts"])

    @property
    def residual(self) -> np.ndarray:
        """(nv,) the external-torque estimate, N·m (a copy)."""
        return self.records.joints["torque"].copy()

    def reset(self) -> None:
        observer_reset(self.records.state[0], self.records.joints)

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
        r = self.records
        restarted = observer_step(r.params[0], r.state[0], r.joint_params, r.joints, float(t),
                                  momentum, beta, M)
        return self.residual, bool(restarted)


class MomentumObserver(_ObserverBase):
    """First-order generalized-momentum residual with per-joint gain K_O (1/s), shape (nv,)."""

    _form = FORM_FIRST_ORDER

    def __init__(self, gain: np.ndarray, max_gap: float, records: ObserverRecords | None = None):
        super().__init__(gain, max_gap, records)
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
                 max_gap: float, settle_steps: int = 500, records: ObserverRecords | None = None):
        super().__init__(bandwidth, max_gap, records)
        self.velocity_noise, self.effort_noise = velocity_noise, effort_noise
        self.records.params[0]["settle_steps"] = int(settle_steps)
        self.reset()

    @property
    def velocity_noise(self) -> float:
        """rad/s, standard deviation of the measured joint velocities."""
        return float(self.records.params[0]["velocity_noise"])

    @velocity_noise.setter
    def velocity_noise(self, value: float) -> None:
        self.records.params[0]["velocity_noise"] = value

    @property
    def effort_noise(self) -> float:
        """N·m, standard deviation of the measured efforts."""
        return float(self.records.params[0]["effort_noise"])

    @effort_noise.setter
    def effort_noise(self, value: float) -> None:
        self.records.params[0]["effort_noise"] = value

    @property
    def settle_steps(self) -> int:
        return int(self.records.params[0]["settle_steps"])
