"""Environment-parameter filter: an adaptive Kalman filter on the object's parameters.

Along the manipulation direction the object is modelled as

    f = mass * x'' + damping * x' + stiffness * x + static_force      (N)

with theta = [mass (kg), damping (N·s/m), stiffness (N/m), static_force (N)] and the regressor
row h = [x'' (m/s^2), x' (m/s), x (m), 1]. The parameters follow a random walk,
theta_k = theta_{k-1} + w_k with w_k ~ N(0, diag(process_std^2) * dt), and the measurement is
f_k = h_k theta_k + v_k with v_k ~ N(0, R). This is a linear Kalman filter with F = I and a
time-varying 1x4 measurement matrix h_k (Kalman 1960; the same equations as filterpy's
``KalmanFilter``, with the Joseph-form covariance update of Bucy and Joseph 1968).

On top of it (each one cited where it is implemented):

- measurement-noise adaptation, fading-memory Sage-Husa (Sage and Husa 1969) or covariance
  matching over a window (Mehra, IEEE TAC 1972), both in the residual form of Mohamed and
  Schwarz (J. Geodesy 1999) so that R stays positive, and floored;
- optional diagonal Sage-Husa process-noise adaptation, floored at zero;
- non-negative mass, damping and stiffness by projecting the estimate onto the constraint with
  the weight P^-1 (Simon and Chia 2002; Simon 2010);
- excitation monitoring: a parameter whose regressor is not excited is a "consider" parameter
  (Schmidt 1966): its uncertainty enters the innovation variance, but its gain is zero, so it
  keeps its prior;
- consistency by the normalized innovation squared (NIS) against two-sided chi-square bounds
  (Bar-Shalom, Li and Kirubarajan 2001), and change detection by a one-sided CUSUM of the NIS
  (Page 1954), which inflates the covariance.

Memory is bounded (fixed-size windows only). An update works on plain Python floats (4-vectors
and the 10 distinct entries of the symmetric 4x4 covariance, written out): that costs a few
microseconds, where numpy calls on such small arrays cost about a microsecond each. scipy is used
only when settings are applied.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .samples import SampleRejected
from .settings import Settings, SettingsError

PARAMETER_NAMES = ("mass", "damping", "stiffness", "static_force")
PARAMETER_UNITS = ("kg", "N·s/m", "N/m", "N")
REGRESSOR_NAMES = ("acceleration", "velocity", "position", "one")
REGRESSOR_UNITS = ("m/s^2", "m/s", "m", "1")
NIS_CONFIDENCE = 0.95  # two-sided probability of the NIS interval (Bar-Shalom et al. 2001)

_H_LABELS = ("h[0] (x'', m/s^2)", "h[1] (x', m/s)", "h[2] (x, m)", "h[3] (constant 1)")


def _flag_array(bits: int) -> np.ndarray:
    a = np.array([bool(bits >> i & 1) for i in range(4)])
    a.setflags(write=False)
    return a


# the (4,) bool arrays of every flag pattern, read-only and shared by the records that carry them
_FLAGS = tuple(_flag_array(bits) for bits in range(16))


class FilterStep(NamedTuple):
    """One record per update; all SI.

    theta (4,): estimate [kg, N·s/m, N/m, N]. std (4,): standard deviations, same units.
    innovation: f - h theta_prior, N. innovation_var: S = h P h^T + R, N^2.
    nis: innovation^2 / S. nis_average: mean NIS over the last filter.nis_window updates.
    nis_bounds: two-sided 95 % chi-square interval of that average (chi2(n)/n, n the number of
    updates averaged). measurement_var: R used at this step, N^2.
    excitation (4,): RMS of each regressor [x'' m/s^2, x' m/s, x m, 1] over the excitation window.
    excited (4,) bool: the parameter was updated at this step. converged (4,) bool: excited and
    std below filter.converged_std or filter.converged_rel_std * |theta|. Both read-only (shared).
    change: "" or why a change was declared at (or just before) this step.
    samples: updates since the last reset, this one included.
    pattern: the excited flags as bits 0-3 and the converged flags as bits 4-7 (for Health).
    """

    theta: np.ndarray
    std: np.ndarray
    innovation: float
    innovation_var: float
    nis: float
    nis_average: float
    nis_bounds: tuple[float, float]
    measurement_var: float
    excitation: np.ndarray
    excited: np.ndarray
    converged: np.ndarray
    change: str
    samples: int
    pattern: int = 0


class _WindowMean:
    """Mean of the last ``size`` floats: fixed-size ring buffer and a running sum.

    The sum is recomputed exactly (math.fsum) each time the buffer wraps, so rounding errors
    do not accumulate; cost O(1) amortized, memory O(size).
    """

    __slots__ = ("size", "buf", "index", "count", "total")

    def __init__(self, size: int):
        self.size = int(size)
        self.buf = [0.0] * self.size
        self.index = 0
        self.count = 0
        self.total = 0.0

    def push(self, value: float) -> float:
        """Add ``value``; return the mean of the window."""
        i = self.index
        self.total += value - self.buf[i]
        self.buf[i] = value
        i += 1
        if self.count < self.size:
            self.count += 1
        if i == self.size:
            i = 0
            self.total = math.fsum(self.buf)
        self.index = i
        return self.total / self.count


class _Config:
    """The filter.* settings as numbers and arrays, checked for cross-setting rules."""

    def __init__(self, s: Settings):
        self.initial_mean = np.array(s["filter.initial_mean"], dtype=float)
        self.initial_std = np.array(s["filter.initial_std"], dtype=float)
        self.process_var = np.array(s["filter.process_std"], dtype=float) ** 2
        self.measurement_var = float(s["filter.measurement_std"]) ** 2
        self.measurement_var_floor = float(s["filter.measurement_std_floor"]) ** 2
        self.noise_adaptation = s["filter.noise_adaptation"]
        self.fading = float(s["filter.fading_factor"])
        self.matching_window = int(s["filter.matching_window"])
        self.process_adaptation = s["filter.process_adaptation"]
        self.nis_window = int(s["filter.nis_window"])
        self.change_threshold = float(s["filter.change_threshold"])
        self.change_drift = float(s["filter.change_drift"])
        self.change_inflation = float(s["filter.change_inflation"])
        self.excitation_window = float(s["filter.excitation_window"])
        self.excitation_min = np.array(s["filter.excitation_min"], dtype=float)
        self.converged_std = np.array(s["filter.converged_std"], dtype=float)
        self.converged_rel = float(s["filter.converged_rel_std"])
        self.nonnegative = bool(s["filter.nonnegative"])
        self.correlation_correction = bool(s["filter.correlation_correction"])
        self.excitation_min_list = self.excitation_min.tolist()
        self.converged_std_list = self.converged_std.tolist()
        if self.nonnegative:
            for i in range(3):
                if self.initial_mean[i] < 0.0:
                    raise SettingsError(
                        f"filter.initial_mean[{i}]: {self.initial_mean[i]!r} {PARAMETER_UNITS[i]}"
                        f" ({PARAMETER_NAMES[i]}) is negative while filter.nonnegative is true;"
                        f" expected a value >= 0")


def _nis_bounds_table(n_max: int) -> tuple[list[float], list[float]]:
    """Two-sided 95 % interval of the mean of n NIS values of a 1-D measurement, n = 1..n_max.

    n times that mean is chi-square with n degrees of freedom when the filter is consistent
    (Bar-Shalom, Li and Kirubarajan 2001, sec. 5.4), so the bounds are chi2.ppf(a/2, n) / n and
    chi2.ppf(1 - a/2, n) / n. Index 0 is unused.
    """
    from scipy.stats import chi2  # settings time only, never in the update

    n = np.arange(1, n_max + 1, dtype=float)
    alpha = 1.0 - NIS_CONFIDENCE
    lo = chi2.ppf(alpha / 2.0, n) / n
    hi = chi2.ppf(1.0 - alpha / 2.0, n) / n
    return [math.nan] + lo.tolist(), [math.nan] + hi.tolist()


def _conditional_shift(P: list[float], active: list[int], th: list[float]) -> list[float] | None:
    """z = P_AA^-1 theta_A for the active constraints A (P 4x4 row-major); None when P_AA is
    singular. One constraint (the usual case) is a division; more go to numpy.linalg.solve."""
    if len(active) == 1:
        a = active[0]
        p = P[5 * a]
        return [th[a] / p] if p != 0.0 else None
    try:
        return np.linalg.solve(np.array([[P[4 * i + j] for j in active] for i in active]),
                               np.array([th[i] for i in active])).tolist()
    except np.linalg.LinAlgError:
        return None


class EnvironmentFilter:
    """Adaptive Kalman filter on theta = [mass kg, damping N·s/m, stiffness N/m, static_force N].

    Call :meth:`update` once per sample with the time t (s), the regressor h (4,) =
    [x'' m/s^2, x' m/s, x m, 1] and the force f (N) along the direction; it returns a
    :class:`FilterStep`. The filter reads only the ``filter.*`` settings.

    Per update:

    1. Prediction of the random walk: P += diag(q^2) * dt, dt = t - t_prev (0 for the first).
    2. Excitation: exponentially weighted mean of h_i^2 with per-sample forgetting
       exp(-dt / filter.excitation_window); parameter i is excited when the RMS is at least
       filter.excitation_min[i].
    3. Update with a Schmidt-Kalman ("consider") gain (Schmidt 1966; Simon, Optimal State
       Estimation, 2006, sec. 7.4): innovation y = f - h theta, S = h P h^T + R with the full h,
       K = P h^T / S with the entries of not-excited parameters set to zero. Those parameters
       are thus not updated and keep their prior, while their uncertainty still enters S (so
       the NIS stays consistent). The covariance update
       P+ = P - K h P - P h^T K^T + S K K^T is the Joseph form (Bucy and Joseph 1968), valid
       for this sub-optimal gain; with every parameter excited it is the ordinary Kalman update.
    4. Non-negativity (filter.nonnegative): if mass, damping or stiffness is negative, the
       estimate is projected onto the constraint, minimising (x - theta)^T P^-1 (x - theta)
       over the excited parameters subject to those bounds (an active-set iteration, see
       :meth:`_project`; Simon and Chia, "Kalman filtering with state equality constraints", IEEE TAES 2002;
       Simon, "Kalman filtering with state constraints: a survey of linear and nonlinear
       algorithms", IET Control Theory Appl. 2010, estimate projection). P is not changed.
    5. Measurement noise R (filter.noise_adaptation), see :meth:`_adapt_measurement_noise`.
    6. Process noise (filter.process_adaptation), see :meth:`_adapt_process_noise`.
    7. NIS y^2/S, its mean over the last filter.nis_window updates and the two-sided 95 %
       chi-square interval of that mean (Bar-Shalom, Li and Kirubarajan, Estimation with
       Applications to Tracking and Navigation, 2001, sec. 5.4).
    8. Change detection: one-sided CUSUM g = max(0, g + NIS - filter.change_drift) (Page,
       "Continuous inspection schemes", Biometrika 1954); when g exceeds
       filter.change_threshold a change is declared, the covariance is inflated by
       filter.change_inflation and g restarts from zero.

    Bad input (non-finite t, h or f; time going backwards) raises
    :class:`~interaction_estimator.samples.SampleRejected`, is counted in :attr:`rejected` and
    leaves the state untouched.
    """

    def __init__(self, settings: Settings):
        self._cfg = _Config(settings)
        self.rejected = 0
        self.changes = 0
        self.last_change = ""
        self.reset_reason = ""
        self._apply_windows(self._cfg)
        self.reset("start")

    # ----------------------------------------------------------------------------------------
    # state handling

    def reset(self, reason: str = "reset") -> None:
        """Back to the prior: theta = filter.initial_mean, P = diag(filter.initial_std^2),
        R = filter.measurement_std^2, q = filter.process_std; windows, CUSUM and sample count
        cleared. The rejected count is kept."""
        c = self._cfg
        # the state is held in plain floats: a step is a few hundred float operations, much
        # cheaper in Python than tens of numpy calls on 4-vectors (the views below convert)
        self._th = c.initial_mean.tolist()                       # theta (4,)
        self._Pf = np.diag(c.initial_std ** 2).ravel().tolist()  # P (4, 4), row-major
        self._P0_diag = c.initial_std ** 2
        self._R = max(c.measurement_var, c.measurement_var_floor)
        self._q2 = c.process_var.tolist()                        # q^2 (4,), per second
        self._t_prev: float | None = None
        self._samples = 0
        self._fading_power = 1.0  # b^k
        self._cusum = 0.0
        self._pending_change = ""
        self._z_prev = 0.0     # previous normalized innovation
        self._corr = [0.0, 0.0]  # decaying sums of z_k z_(k-1) and z_k^2
        self._ex_num = [0.0, 0.0, 0.0, 0.0]
        self._ex_den = 0.0
        self._nis_window = _WindowMean(c.nis_window)
        self._match_window = _WindowMean(c.matching_window)
        self.reset_reason = reason
        self.last: FilterStep | None = None

    def inflate(self, reason: str) -> None:
        """Multiply the covariance by filter.change_inflation (used when the contact starts
        again or a new object is expected) and report ``reason`` in the next step's ``change``.

        No parameter's variance is taken beyond its prior variance: rows and columns whose
        variance would exceed it are scaled down together (P -> D P D, D diagonal), which keeps
        P positive semi-definite and the correlations unchanged."""
        self._inflate(reason)

    def update_settings(self, settings: Settings) -> None:
        """Apply new filter.* settings at run time without losing the estimate.

        theta, P, the adapted R and q, the CUSUM and the excitation are kept. A new
        filter.measurement_std takes effect at once when noise_adaptation is 'fixed', a new
        filter.process_std when process_adaptation is 'fixed'. A changed nis_window or
        matching_window restarts that window. The prior (initial_mean, initial_std) is used at
        the next reset. Raises SettingsError (state untouched) for a bad combination."""
        new = _Config(settings)
        old = self._cfg
        if new.nis_window != old.nis_window:
            self._apply_windows(new)
            self._nis_window = _WindowMean(new.nis_window)
        if new.matching_window != old.matching_window:
            self._match_window = _WindowMean(new.matching_window)
        if new.noise_adaptation == "fixed":
            self._R = max(new.measurement_var, new.measurement_var_floor)
        else:
            self._R = max(self._R, new.measurement_var_floor)
        if new.process_adaptation == "fixed":
            self._q2 = new.process_var.tolist()
        if new.fading != old.fading:
            self._fading_power = new.fading ** self._samples  # keeps d_k = (1-b)/(1-b^(k+1))
        self._cfg = new

    def _apply_windows(self, c: _Config) -> None:
        self._nis_lo, self._nis_hi = _nis_bounds_table(c.nis_window)

    def _inflate(self, reason: str) -> None:
        P = np.array(self._Pf).reshape(4, 4) * self._cfg.change_inflation
        d = P.diagonal()
        over = d > self._P0_diag
        if over.any():
            scale = np.ones(4)
            scale[over] = np.sqrt(self._P0_diag[over] / d[over])
            P = P * np.outer(scale, scale)
        self._Pf = P.ravel().tolist()
        self._cusum = 0.0
        self.changes += 1
        self.last_change = reason
        self._pending_change = (self._pending_change + "; " + reason
                                if self._pending_change else reason)

    # ----------------------------------------------------------------------------------------
    # read-only views

    @property
    def theta(self) -> np.ndarray:
        """(4,) current estimate [kg, N·s/m, N/m, N] (a copy)."""
        return np.array(self._th)

    @property
    def covariance(self) -> np.ndarray:
        """(4, 4) current covariance of theta, SI units squared (a copy)."""
        return np.array(self._Pf).reshape(4, 4)

    @property
    def measurement_var(self) -> float:
        """Current measurement-noise variance R, N^2."""
        return self._R

    @property
    def process_std(self) -> np.ndarray:
        """(4,) current random-walk intensity [kg/√s, N·s/m/√s, N/m/√s, N/√s]."""
        return np.sqrt(np.array(self._q2))

    @property
    def samples(self) -> int:
        """Updates since the last reset."""
        return self._samples

    # ----------------------------------------------------------------------------------------
    # the update

    def _reject(self, reason: str, message: str) -> None:
        self.rejected += 1
        raise SampleRejected(reason, message)

    def _check_input(self, t: float, h: np.ndarray, f: float, y: float) -> None:
        """Slow path after the fast finiteness test failed: name the bad item (raises)."""
        if not math.isfinite(t):
            self._reject("non_finite_output", f"environment filter: time t is {t!r} s")
        for i in range(4):
            if not math.isfinite(h[i]):
                self._reject("non_finite_output",
                             f"environment filter: regressor {_H_LABELS[i]} is {float(h[i])!r}")
        if not math.isfinite(f):
            self._reject("non_finite_output", f"environment filter: force f is {f!r} N")
        self._reject("non_finite_output",
                     f"environment filter: predicted force h theta overflowed (innovation {y!r} N)"
                     f" for h = {[float(v) for v in h]} and theta = {list(self._th)}")

    def update(self, t: float, h: np.ndarray, f: float) -> FilterStep:
        """One filter step.

        t: time in s (must not decrease); h: (4,) regressor [x'' m/s^2, x' m/s, x m, 1];
        f: force along the direction, N. Returns the :class:`FilterStep` (also kept in
        :attr:`last`). Raises SampleRejected('non_finite_output') for a non-finite t, h or f
        and SampleRejected('time_backwards') when t is older than the previous update; the
        state is then untouched and :attr:`rejected` counts it.
        """
        if type(h) is tuple and len(h) == 4:   # the pipeline's fast path: four floats
            h0, h1, h2, h3 = h
        else:
            h = np.asarray(h, dtype=float)
            if h.shape != (4,):
                raise ValueError(f"environment filter: regressor h has shape {h.shape}; "
                                 "expected (4,) = [x'' m/s^2, x' m/s, x m, 1]")
            h0, h1, h2, h3 = h.tolist()
        t = float(t)
        f = float(f)
        th0, th1, th2, th3 = self._th
        # Innovation first: it is non-finite whenever h or f is (NaN and inf propagate through
        # the dot product), so one test covers all inputs; the slow path names the bad one.
        y = f - (h0 * th0 + h1 * th1 + h2 * th2 + h3 * th3)
        if not (math.isfinite(y) and math.isfinite(t)):
            self._check_input(t, h, f, y)
        c = self._cfg
        if self._t_prev is None:
            dt = 0.0
        else:
            dt = t - self._t_prev
            if dt < 0.0:
                self._reject("time_backwards",
                             f"environment filter: t = {t:.6f} s is older than the previous"
                             f" {self._t_prev:.6f} s")

        # 1. random-walk prediction (F = I): P += diag(q^2) dt
        (p00, p01, p02, p03, _, p11, p12, p13, _, _, p22, p23, _, _, _, p33) = self._Pf
        if dt > 0.0:
            q = self._q2
            p00 += q[0] * dt
            p11 += q[1] * dt
            p22 += q[2] * dt
            p33 += q[3] * dt

        # 2. excitation: exponentially weighted mean square of each regressor
        decay = math.exp(-dt / c.excitation_window)
        e0, e1, e2, e3 = self._ex_num
        e0 = e0 * decay + h0 * h0
        e1 = e1 * decay + h1 * h1
        e2 = e2 * decay + h2 * h2
        e3 = e3 * decay + h3 * h3
        ex_den = self._ex_den * decay + 1.0
        excitation = (math.sqrt(e0 / ex_den), math.sqrt(e1 / ex_den), math.sqrt(e2 / ex_den),
                      math.sqrt(e3 / ex_den))
        m0, m1, m2, m3 = c.excitation_min_list
        x0, x1, x2, x3 = excited = (excitation[0] >= m0, excitation[1] >= m1,
                                    excitation[2] >= m2, excitation[3] >= m3)

        # 3. Schmidt-Kalman update, Joseph form
        a0 = p00 * h0 + p01 * h1 + p02 * h2 + p03 * h3   # P h
        a1 = p01 * h0 + p11 * h1 + p12 * h2 + p13 * h3
        a2 = p02 * h0 + p12 * h1 + p22 * h2 + p23 * h3
        a3 = p03 * h0 + p13 * h1 + p23 * h2 + p33 * h3
        hph = h0 * a0 + h1 * a1 + h2 * a2 + h3 * a3
        R = self._R
        S = hph + R
        if x0 and x1 and x2 and x3:
            k0, k1, k2, k3 = a0 / S, a1 / S, a2 / S, a3 / S
            # P - K K^T S (= P - P h^T h P / S), exactly symmetric
            p00 -= k0 * a0
            p01 -= k0 * a1
            p02 -= k0 * a2
            p03 -= k0 * a3
            p11 -= k1 * a1
            p12 -= k1 * a2
            p13 -= k1 * a3
            p22 -= k2 * a2
            p23 -= k2 * a3
            p33 -= k3 * a3
        else:
            k0 = a0 / S if x0 else 0.0
            k1 = a1 / S if x1 else 0.0
            k2 = a2 / S if x2 else 0.0
            k3 = a3 / S if x3 else 0.0
            # P - (K (Ph)^T + (Ph) K^T) + S K K^T
            b0, b1, b2, b3 = S * k0, S * k1, S * k2, S * k3
            p00 += -(k0 * a0 + a0 * k0) + b0 * k0
            p01 += -(k0 * a1 + a0 * k1) + b0 * k1
            p02 += -(k0 * a2 + a0 * k2) + b0 * k2
            p03 += -(k0 * a3 + a0 * k3) + b0 * k3
            p11 += -(k1 * a1 + a1 * k1) + b1 * k1
            p12 += -(k1 * a2 + a1 * k2) + b1 * k2
            p13 += -(k1 * a3 + a1 * k3) + b1 * k3
            p22 += -(k2 * a2 + a2 * k2) + b2 * k2
            p23 += -(k2 * a3 + a2 * k3) + b2 * k3
            p33 += -(k3 * a3 + a3 * k3) + b3 * k3
        P = [p00, p01, p02, p03, p01, p11, p12, p13, p02, p12, p22, p23, p03, p13, p23, p33]
        theta = [th0 + k0 * y, th1 + k1 * y, th2 + k2 * y, th3 + k3 * y]

        # 4. non-negative mass, damping, stiffness
        if c.nonnegative and (theta[0] < 0.0 or theta[1] < 0.0 or theta[2] < 0.0):
            theta = self._project(theta, P, excited)

        # 5.-6. noise adaptation
        nis = y * y / S
        k = self._samples
        if c.noise_adaptation != "fixed" or c.process_adaptation != "fixed":
            self._fading_power *= c.fading
            d = (1.0 - c.fading) / (1.0 - self._fading_power)
            if c.noise_adaptation != "fixed":
                self._R = self._adapt_measurement_noise(R, S, hph, nis, d)
            if c.process_adaptation != "fixed" and dt > 0.0:
                self._adapt_process_noise((k0, k1, k2, k3), y, S, d, dt)

        # 7. NIS average and its chi-square interval
        nis_avg = self._nis_window.push(nis)
        n = self._nis_window.count

        # 8. CUSUM change detection
        g = self._cusum + nis - c.change_drift
        self._cusum = g if g > 0.0 else 0.0
        self._th = theta
        self._Pf = P
        if g > c.change_threshold:
            self._inflate(f"innovation CUSUM {g:.1f} > {c.change_threshold:g}")
        change = self._pending_change
        self._pending_change = ""

        self._ex_num = [e0, e1, e2, e3]
        self._ex_den = ex_den
        self._t_prev = t
        self._samples = k + 1
        # 9. correlated innovations: the force passes through the observer and the regressor
        # through the differentiator, so neighbouring residuals are correlated and P (which
        # assumes white noise) is too small. The standard deviations are widened by the AR(1)
        # variance inflation factor (1 + rho) / (1 - rho), rho the lag-1 autocorrelation of the
        # normalized innovations over the excitation window (effective sample size n (1 - rho)
        # / (1 + rho); Box, Jenkins and Reinsel, Time Series Analysis, 4th ed. 2008, Sec. 2.1).
        z = y / math.sqrt(S)
        corr = self._corr
        corr[0] = corr[0] * decay + z * self._z_prev
        corr[1] = corr[1] * decay + z * z
        self._z_prev = z
        inflation = 1.0
        if c.correlation_correction and corr[1] > 0.0:
            rho = min(max(corr[0] / corr[1], 0.0), 0.998)
            inflation = (1.0 + rho) / (1.0 - rho)
        v0, v1, v2, v3 = P[0], P[5], P[10], P[15]
        s0 = math.sqrt(v0 * inflation) if v0 > 0.0 else 0.0
        s1 = math.sqrt(v1 * inflation) if v1 > 0.0 else 0.0
        s2 = math.sqrt(v2 * inflation) if v2 > 0.0 else 0.0
        s3 = math.sqrt(v3 * inflation) if v3 > 0.0 else 0.0
        cs0, cs1, cs2, cs3 = c.converged_std_list
        rel = c.converged_rel
        t0, t1, t2, t3 = theta
        c0 = x0 and s0 < max(cs0, rel * abs(t0))
        c1 = x1 and s1 < max(cs1, rel * abs(t1))
        c2 = x2 and s2 < max(cs2, rel * abs(t2))
        c3 = x3 and s3 < max(cs3, rel * abs(t3))
        numbers = np.array((t0, t1, t2, t3, s0, s1, s2, s3) + excitation)
        excited_bits = x0 | x1 << 1 | x2 << 2 | x3 << 3
        converged_bits = c0 | c1 << 1 | c2 << 2 | c3 << 3
        step = FilterStep(numbers[:4], numbers[4:8], y, S, nis, nis_avg,
                          (self._nis_lo[n], self._nis_hi[n]), R, numbers[8:],
                          _FLAGS[excited_bits], _FLAGS[converged_bits], change, k + 1,
                          excited_bits | converged_bits << 4)   # layout: health.ALL_CONVERGED
        self.last = step
        return step

    @staticmethod
    def _project(theta: list[float], P: list[float], excited: tuple[bool, ...]) -> list[float]:
        """Estimate projection onto mass, damping, stiffness >= 0 (Simon and Chia 2002).

        theta (4,) and P (4x4 row-major, 16 floats) as plain floats; returns the new theta:
        the minimiser of (x - theta)^T P_EE^-1 (x - theta) over the excited parameters E with
        x_i >= 0 for the excited ones among mass, damping and stiffness. For an active set A
        (bounds held at zero) the minimiser is x_E = theta_E - P_EA z with z = P_AA^-1 theta_A
        (the conditional mean given x_A = 0), and the bound a really binds only where z_a < 0
        (its Lagrange multiplier is -z_a). An active-set iteration (Nocedal and Wright,
        Numerical Optimization, 2nd ed. 2006, ch. 16.5) adds the most violated bound, releases
        the one whose multiplier has the wrong sign, and stops at the KKT point; with one
        violated bound (the usual case) it is one division. Not-excited parameters are not
        moved unless they are themselves negative (possible only after a settings change);
        then they are set to zero.
        """
        if excited[0] and excited[1] and excited[2] and excited[3]:
            # the usual case, without the general iteration: all excited and one bound violated;
            # it binds (z < 0), and if the shift violates no other bound, that is the KKT point
            neg0, neg1, neg2 = theta[0] < 0.0, theta[1] < 0.0, theta[2] < 0.0
            if neg0 + neg1 + neg2 == 1:
                a = 0 if neg0 else (1 if neg1 else 2)
                p = P[5 * a]
                if p > 0.0:
                    z = theta[a] / p
                    x = [theta[0] - P[a] * z, theta[1] - P[4 + a] * z,
                         theta[2] - P[8 + a] * z, theta[3] - P[12 + a] * z]
                    x[a] = 0.0
                    if x[0] >= 0.0 and x[1] >= 0.0 and x[2] >= 0.0:
                        return x
        th0 = list(theta)
        E = [i for i in range(4) if excited[i]]
        for i in range(3):
            if th0[i] < 0.0 and not excited[i]:
                th0[i] = 0.0
        x = th0
        active: list[int] = []
        for _ in range(8):  # at most 3 bounds: a handful of steps reach the KKT point
            violated = [i for i in range(3) if excited[i] and i not in active and x[i] < 0.0]
            if not violated:
                break
            active.append(min(violated, key=lambda i: x[i]))
            while active:
                z = _conditional_shift(P, active, th0)
                if z is None:   # a singular P_AA: no correction, the bounds set to zero
                    x = [0.0 if i in active else v for i, v in enumerate(th0)]
                    break
                worst = max(range(len(active)), key=lambda k: z[k])
                if z[worst] <= 0.0:   # every multiplier >= 0: these bounds bind
                    x = list(th0)
                    for e in E:
                        x[e] -= sum(P[4 * e + a] * zk for a, zk in zip(active, z))
                    for a in active:
                        x[a] = 0.0
                    break
                active.pop(worst)     # this bound does not bind: release it
            else:
                x = th0
        return [max(v, 0.0) if i < 3 else v for i, v in enumerate(x)]

    def _adapt_measurement_noise(self, R: float, S: float, hph: float, nis: float,
                                 d: float) -> float:
        """New R from this step's residual (N^2), floored at filter.measurement_std_floor^2.

        The classic Sage-Husa estimate R_k = (1 - d_k) R_{k-1} + d_k (y^2 - h P h^T), with
        d_k = (1 - b) / (1 - b^(k+1)) and fading factor b (Sage and Husa 1969), can go negative.
        We use instead the residual form (Mohamed and Schwarz, "Adaptive Kalman filtering for
        INS/GPS", J. Geodesy 1999): R = E[r^2] + h P+ h^T with r the post-fit residual, which
        is a sum of non-negative terms. It is evaluated for the full (every parameter updated)
        gain, for which r = (R/S) y and h P+ h^T = R h P h^T / S, so the sample is
        g = R (R * NIS + h P h^T) / S >= 0, with E[g] = R when R is right.

        'sage_husa': R_k = (1 - d_k) R_{k-1} + d_k g_k.
        'matching': R_k = mean of g over the last filter.matching_window samples, covariance
        matching (Mehra, "Approaches to adaptive filtering", IEEE TAC 1972) in the same form.
        """
        g = R * (R * nis + hph) / S
        if self._cfg.noise_adaptation == "sage_husa":
            R_new = (1.0 - d) * R + d * g
        else:
            R_new = self._match_window.push(g)
        floor = self._cfg.measurement_var_floor
        return R_new if R_new > floor else floor

    def _adapt_process_noise(self, K: tuple[float, ...], y: float, S: float, d: float,
                             dt: float) -> None:
        """Diagonal Sage-Husa process-noise estimate (Sage and Husa 1969).

        With F = I the estimate Q_k = (1 - d_k) Q_{k-1} + d_k (K y^2 K^T + P_k - P_{k-1})
        equals Q_{k-1} + d_k K (y^2 - S) K^T. Only its diagonal is kept, divided by dt to give
        the intensity q^2 (per second), and floored at zero (the full matrix can lose positive
        semi-definiteness). Parameters that are not excited have K_i = 0 and keep their q.
        """
        g = d * (y * y - S) / dt
        self._q2 = [max(q + g * k * k, 0.0) for q, k in zip(self._q2, K)]
