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
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np


class MomentumObserver:
    """First-order generalized-momentum residual with per-joint gain K_O (1/s), shape (nv,)."""

    def __init__(self, gain: np.ndarray, max_gap: float):
        self.gain = np.asarray(gain, dtype=float)
        self.max_gap = float(max_gap)
        self.restarts = 0
        self.reset()

    def reset(self) -> None:
        self.residual = np.zeros_like(self.gain)
        self._t: float | None = None
        self._p: np.ndarray | None = None
        self._beta: np.ndarray | None = None

    def step(self, t: float, momentum: np.ndarray, beta: np.ndarray,
             mass_matrix: np.ndarray | None = None) -> tuple[np.ndarray, bool]:
        """Advance to time t (s); ``mass_matrix`` is unused (same call as the Kalman form).

        momentum: p = M q' (nv,), N·m·s. beta: tau + C^T q' - g (nv,), N·m, the known part of p'.
        Returns (residual r (nv,) N·m, restarted). After a gap longer than max_gap the observer
        restarts its integral but keeps the last residual as its starting value (warm start).
        """
        restarted = False
        if self._t is not None:
            dt = t - self._t
            if dt > self.max_gap or dt <= 0.0:
                self.restarts += 1
                restarted = True
            else:
                a = np.exp(-self.gain * dt)
                mean_ext = (momentum - self._p) / dt - 0.5 * (beta + self._beta)
                self.residual = a * self.residual + (1.0 - a) * mean_ext
        self._t, self._p, self._beta = t, momentum, beta
        return self.residual, restarted


class KalmanMomentumObserver:
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
    frequency).
    """

    def __init__(self, bandwidth: np.ndarray, velocity_noise: float, effort_noise: float,
                 max_gap: float, settle_steps: int = 500):
        self.settle_steps = int(settle_steps)
        self.gain = np.asarray(bandwidth, dtype=float)
        self.velocity_noise, self.effort_noise = float(velocity_noise), float(effort_noise)
        self.max_gap = float(max_gap)
        self.restarts = 0
        self.reset()

    def reset(self) -> None:
        n = len(self.gain)
        self.residual = np.zeros(n)
        self._t: float | None = None
        self._x = np.zeros((n, 3))
        self._P = np.zeros((n, 3, 3))
        self._beta = np.zeros(n)
        self._shared: tuple[float, ...] | None = None
        self._settle = False
        self._w6 = 0.0
        self._Z = np.zeros((6, n))   # shared path: rows p, d, e, beta_prev, beta, momentum
        self._A = np.zeros((3, 6))
        self._A_flat = self._A.ravel()   # a view: A filled from 18 floats in one assignment

    def _step_shared(self, t: float, dt: float, momentum: np.ndarray, beta: np.ndarray,
                     mean_r: float) -> tuple[np.ndarray, bool]:
        """Fast path for one bandwidth on every joint: the covariance divided by R_i is the
        same for all joints (Q and R both scale with R_i), so one 3x3 recursion in plain floats
        gives every joint's gain. Effort noise enters with the joints' mean R; it is small next
        to the velocity noise through M.

        The state rows [p, d, e] of all joints, the previous and current beta and the momentum
        measurement sit in one (6, nv) buffer Z, and predict + update is one product
        ``[p, d, e]+ = A Z`` with A (3, 6) from dt and the gains:
        p- = p + dt d + dt^2/2 e + dt/2 (beta_prev + beta), d- = d + dt e, e- = e, then
        x+ = x- + k (momentum - p-)."""
        if self._settle:
            # first interval after a (re)start: run the covariance recursion to its steady
            # state for this interval first, so that the start does not read velocity noise as
            # a large external torque (a cold, wide prior did: hundreds of newtons for a few ms)
            for _ in range(self.settle_steps):
                self._shared_gain(dt, mean_r)
            self._settle = False
        k0, k1, k2 = self._shared_gain(dt, mean_r)
        a, b, c = dt, 0.5 * dt * dt, 0.5 * dt
        i0 = 1.0 - k0
        self._A_flat[:] = (i0, i0 * a, i0 * b, i0 * c, i0 * c, k0,
                           -k1, 1.0 - k1 * a, a - k1 * b, -k1 * c, -k1 * c, k1,
                           -k2, -k2 * a, 1.0 - k2 * b, -k2 * c, -k2 * c, k2)
        Z = self._Z
        Z[4] = beta
        Z[5] = momentum
        x = self._A.dot(Z)
        Z[:3] = x
        Z[3] = beta
        self._t = t
        self.residual = x[1]
        return self.residual, False

    def _shared_gain(self, dt: float, mean_r: float) -> tuple[float, float, float]:
        """One predict-update of the shared covariance (units of R_i); returns the gains."""
        p00, p01, p02, p11, p12, p22 = self._shared
        a, b = dt, 0.5 * dt * dt
        r00 = p00 + a * p01 + b * p02
        r01 = p01 + a * p11 + b * p12
        r02 = p02 + a * p12 + b * p22
        r11 = p11 + a * p12
        r12 = p12 + a * p22
        q = a * self._w6
        a2 = a * a
        a3 = a2 * a
        n00 = r00 + a * r01 + b * r02 + q * a3 * a2 / 20.0 + (self.effort_noise * a) ** 2 / mean_r
        n01 = r01 + a * r02 + q * a2 * a2 / 8.0
        n02 = r02 + q * a3 / 6.0
        n11 = r11 + a * r12 + q * a3 / 3.0
        n12 = r12 + q * a2 / 2.0
        n22 = p22 + q * a
        s = n00 + 1.0
        k0, k1, k2 = n00 / s, n01 / s, n02 / s
        self._shared = (n00 - k0 * n00, n01 - k0 * n01, n02 - k0 * n02, n11 - k1 * n01,
                        n12 - k1 * n02, n22 - k2 * n02)
        return k0, k1, k2

    def _start(self, t: float, momentum: np.ndarray, beta: np.ndarray, r_var: np.ndarray) -> None:
        self._x[:, 0] = momentum
        self._x[:, 1] = self.residual       # warm start after a gap
        self._x[:, 2] = 0.0
        self._P[:] = 0.0
        self._P[:, 0, 0] = r_var
        scale = np.maximum(np.abs(self.residual), 10.0)
        self._P[:, 1, 1] = scale**2                    # (N·m)^2: tau_ext unknown at start
        self._P[:, 2, 2] = (scale * self.gain) ** 2    # (N·m/s)^2
        self._t, self._beta = t, beta
        self._shared = None
        self._settle = True
        if np.all(self.gain == self.gain[0]):  # covariance in units of R_i, shared by joints
            d = self._P.diagonal(axis1=1, axis2=2) / r_var[:, None]
            self._shared = (1.0, 0.0, 0.0, float(d[:, 1].max()), 0.0, float(d[:, 2].max()))
            self._w6 = float(self.gain[0]) ** 6
            if self._Z.shape[1] != len(momentum):
                self._Z = np.zeros((6, len(momentum)))
            self._Z[:3] = self._x.T
            self._Z[3] = beta

    def step(self, t: float, momentum: np.ndarray, beta: np.ndarray,
             mass_matrix: np.ndarray) -> tuple[np.ndarray, bool]:
        """Advance to t (s); momentum p (nv,), beta = tau + C^T q' - g (nv,) N·m,
        mass_matrix (nv, nv). Returns (external torque estimate (nv,) N·m, restarted)."""
        if self._shared is not None and self._t is not None:
            dt = t - self._t
            if 0.0 < dt <= self.max_gap:
                mean_r = self.velocity_noise**2 * float(np.vdot(mass_matrix, mass_matrix)) / len(
                    momentum) + 1e-12
                return self._step_shared(t, dt, momentum, beta, mean_r)
        r_var = self.velocity_noise**2 * np.einsum("ij,ij->i", mass_matrix, mass_matrix) + 1e-12
        if self._t is None:
            self._start(t, momentum, beta, r_var)
            return self.residual, False
        dt = t - self._t
        if dt > self.max_gap or dt <= 0.0:
            self.restarts += 1
            self._start(t, momentum, beta, r_var)
            return self.residual, True
        x, P = self._x, self._P
        x[:, 0] += dt * (x[:, 1] + 0.5 * (beta + self._beta)) + 0.5 * dt * dt * x[:, 2]
        x[:, 1] += dt * x[:, 2]
        F = np.array([[1.0, dt, 0.5 * dt * dt], [0.0, 1.0, dt], [0.0, 0.0, 1.0]])
        dt2, dt3 = dt * dt, dt * dt * dt
        Qw = np.array([[dt3 * dt2 / 20, dt2 * dt2 / 8, dt3 / 6],
                       [dt2 * dt2 / 8, dt3 / 3, dt2 / 2],
                       [dt3 / 6, dt2 / 2, dt]])
        P = F @ P @ F.T + (r_var * dt * self.gain**6)[:, None, None] * Qw
        P[:, 0, 0] += (self.effort_noise * dt) ** 2
        S = P[:, 0, 0] + r_var
        K = P[:, :, 0] / S[:, None]
        x += K * (momentum - x[:, 0])[:, None]
        self._P = P - K[:, :, None] * P[:, 0, None, :]
        self._t, self._beta = t, beta
        self.residual = x[:, 1].copy()
        return self.residual, False


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
        return self.viscous * velocity + self.coulomb * np.tanh(velocity / self.eps)


class BiasEstimator:
    """Per-joint torque-sensor bias b (N·m), learned while the robot moves freely.

    In free motion the residual computed without bias settles at -b, so b is a first-order
    low-pass (time constant T s) of -r_raw, its change limited to max_rate N·m/s and its size to
    +/- limit N·m. ``age`` is the time since the bias was last learned, s.
    """

    def __init__(self, initial: np.ndarray, time_constant: float, max_rate: float,
                 limit: float, learn: bool):
        self.initial = np.asarray(initial, float)
        self.time_constant, self.max_rate, self.limit = time_constant, max_rate, limit
        self.learn = learn
        self.reset()

    def reset(self) -> None:
        self.value = np.clip(self.initial.copy(), -self.limit, self.limit)
        self.last_learned: float | None = None

    def update(self, t: float, dt: float, raw_residual: np.ndarray) -> None:
        """Move b toward -raw_residual (raw_residual (nv,) N·m, computed without bias)."""
        if not self.learn or dt <= 0.0:
            return
        alpha = 1.0 - math.exp(-dt / self.time_constant)
        step = (-alpha) * (raw_residual + self.value)
        limit = self.max_rate * dt
        # each clip only where a bound can bind: sum of squares < bound^2 means every element
        # is inside (one product instead of two element-wise passes; NaN skips, as it would
        # pass through the clip too)
        if step.dot(step) >= limit * limit:
            np.minimum(step, limit, out=step)
            np.maximum(step, -limit, out=step)
        step += self.value
        if step.dot(step) >= self.limit * self.limit:
            np.minimum(step, self.limit, out=step)
            np.maximum(step, -self.limit, out=step)
        self.value = step
        self.last_learned = t

    def age(self, t: float) -> float:
        """s since the bias was last learned (inf when never)."""
        return float("inf") if self.last_learned is None else t - self.last_learned


class ContactState(NamedTuple):
    in_contact: bool
    level: float   # residual RMS over joints in units of its free-motion noise (dimensionless)
    event: str     # "", "contact_begin" or "contact_end"


class ContactMonitor:
    """Free motion vs contact, by hysteresis on the residual relative to its noise level.

    level = sqrt(mean_i (r_i / sigma_i)^2) with sigma_i the residual's noise level learned in
    free motion (exponential average of r_i^2, floored at noise_floor N·m). Contact begins when
    level > enter_level for hold_time s, ends when level < exit_level for release_time s.
    """

    def __init__(self, nv: int, enter_level: float, exit_level: float, hold_time: float,
                 noise_floor: float, noise_time_constant: float, release_time: float = 0.0):
        self.enter_level, self.exit_level = enter_level, exit_level
        self.hold_time, self.noise_floor = hold_time, noise_floor
        self.release_time = release_time
        self.noise_time_constant = noise_time_constant
        self.nv = nv
        self.reset()

    def reset(self) -> None:
        self.noise_var = np.full(self.nv, self.noise_floor**2)
        self._weights: np.ndarray | None = None
        self._inv_var_nv = 1.0 / (self.noise_var * self.nv)  # 1 / (nv sigma_i^2)
        self.in_contact = False
        self._pending_since: float | None = None

    @property
    def pending(self) -> bool:
        """True while a level crossing waits out hold_time (a state change may be coming)."""
        return self._pending_since is not None

    def set_noise_var(self, var: np.ndarray) -> None:
        """Set the per-joint residual noise variances (nv,) N·m^2 (floored at noise_floor^2)."""
        self.noise_var = np.maximum(np.asarray(var, float), self.noise_floor**2)
        self._weights = None
        self._inv_var_nv = 1.0 / (self.noise_var * self.nv)

    @property
    def noise_std(self) -> np.ndarray:
        return np.sqrt(self.noise_var)

    def learn_noise(self, dt: float, residual: np.ndarray) -> None:
        """Learn from one free-motion residual (nv,) N·m, dt s after the last."""
        self.learn_power(dt, residual * residual)

    def learn_power(self, dt: float, mean_square: np.ndarray) -> None:
        """Learn from the mean square (nv,) N·m^2 of the free-motion residual over dt s."""
        alpha = 1.0 - math.exp(-dt / self.noise_time_constant)
        var = self.noise_var
        var += alpha * (mean_square - var)
        np.maximum(var, self.noise_floor**2, out=var)
        self._weights = None
        self._inv_var_nv = np.reciprocal(var * self.nv)   # 1 / (nv sigma_i^2)

    @property
    def weights(self) -> np.ndarray:
        """Per-joint weights 1/sigma_i^2 normalized to mean 1 (nv,), for the wrench map."""
        if self._weights is None:
            inv = np.reciprocal(self.noise_var)
            self._weights = inv * (len(inv) / inv.sum())
        return self._weights

    def step(self, t: float, residual: np.ndarray) -> ContactState:
        level = math.sqrt(residual.dot(residual * self._inv_var_nv))
        crossing = level < self.exit_level if self.in_contact else level > self.enter_level
        event = ""
        if crossing:
            if self._pending_since is None:
                self._pending_since = t
            if t - self._pending_since >= (self.release_time if self.in_contact
                                           else self.hold_time):
                self.in_contact = not self.in_contact
                event = "contact_begin" if self.in_contact else "contact_end"
                self._pending_since = None
        else:
            self._pending_since = None
        return ContactState(self.in_contact, level, event)
