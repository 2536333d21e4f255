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

Memory is bounded (fixed-size windows only). The state lives in float arrays and an update is
compiled (:mod:`.compiled`): the 10 distinct entries of the symmetric 4x4 covariance are written
out, so an update is a few hundred float operations. scipy is used only when settings are
applied.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .compiled import kernel
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


# --- storage layouts ------------------------------------------------------------------------
# state (float array of FILTER_STATE_SIZE)
EF_TH = 0            # 0..3 theta
EF_P = 4             # 4..19 P, row-major
EF_R = 20            # measurement variance R, N^2
EF_Q2 = 21           # 21..24 random-walk intensities q^2, per second
EF_T_PREV = 25       # s (NaN: no update yet)
EF_SAMPLES = 26      # updates since the last reset
EF_FADING_POWER = 27  # b^k
EF_CUSUM = 28
EF_Z_PREV = 29       # previous normalized innovation
EF_CORR = 30         # 30..31 decaying sums of z_k z_(k-1) and z_k^2
EF_EX = 32           # 32..35 decaying sums of h_i^2
EF_EX_DEN = 36       # decaying count
EF_PENDING = 37      # changes waiting for the next update (CHANGE_* bits)
EF_PENDING_G = 38    # the CUSUM value that declared a pending change
EF_NIS_WIN = 39      # 39..41 NIS window: index, count, running sum
EF_MATCH_WIN = 42    # 42..44 covariance-matching window: index, count, running sum
EF_REJECTED = 45     # updates refused
FILTER_STATE_SIZE = 46
# configuration (float array of FILTER_CONFIG_SIZE), from the filter.* settings
EC_P0 = 0            # 0..3 prior variances
EC_R_FLOOR = 4
EC_NOISE_ADAPTATION = 5   # 0 fixed, 1 sage_husa, 2 matching
EC_FADING = 6
EC_PROCESS_ADAPTATION = 7  # 0 fixed, 1 sage_husa
EC_THRESHOLD = 8
EC_DRIFT = 9
EC_INFLATION = 10
EC_EX_WINDOW = 11    # s
EC_EX_MIN = 12       # 12..15
EC_CONVERGED_STD = 16  # 16..19
EC_CONVERGED_REL = 20
EC_NONNEGATIVE = 21
EC_CORRELATION = 22
EC_NIS_WINDOW = 23
EC_MATCH_WINDOW = 24
EC_MEAN0 = 25        # 25..28 prior mean
EC_R0 = 29           # filter.measurement_std^2
FILTER_CONFIG_SIZE = 30
# output of the last update (float array of FILTER_OUTPUT_SIZE): what FilterStep holds
EO_THETA = 0         # 0..3
EO_STD = 4           # 4..7
EO_EXCITATION = 8    # 8..11
EO_INNOVATION = 12
EO_S = 13
EO_NIS = 14
EO_NIS_AVERAGE = 15
EO_NIS_LO = 16
EO_NIS_HI = 17
EO_R = 18
EO_PATTERN = 19      # excited bits 0-3, converged bits 4-7 (health.ALL_CONVERGED)
EO_CHANGE = 20       # CHANGE_* bits declared at (or just before) this update
EO_CHANGE_G = 21     # the CUSUM value of a CUSUM change
EO_SAMPLES = 22
EO_H = 23            # 23..26 the regressor of this update
EO_F = 27            # the force of this update, N
EO_T = 28            # its time, s
FILTER_OUTPUT_SIZE = 29
# windows array W: NIS bounds lo (n+1), hi (n+1), NIS window (n), matching window (m)

CHANGE_REGAINED = 1  # the contact started again (the Pipeline's inflation)
CHANGE_CUSUM = 2     # the innovation CUSUM crossed its threshold
CHANGE_TEXT = 4      # an inflation asked for through EnvironmentFilter.inflate (its text)

UPDATED, REJECT_NON_FINITE, REJECT_TIME_BACKWARDS = 0, 1, 2
_ADAPTATION = {"fixed": 0.0, "sage_husa": 1.0, "matching": 2.0}


def configuration(c: _Config) -> np.ndarray:
    """The filter.* settings as the compiled update's configuration array."""
    cf = np.zeros(FILTER_CONFIG_SIZE)
    cf[EC_P0:EC_P0 + 4] = c.initial_std ** 2
    cf[EC_R_FLOOR] = c.measurement_var_floor
    cf[EC_NOISE_ADAPTATION] = _ADAPTATION[c.noise_adaptation]
    cf[EC_FADING] = c.fading
    cf[EC_PROCESS_ADAPTATION] = _ADAPTATION[c.process_adaptation]
    cf[EC_THRESHOLD], cf[EC_DRIFT] = c.change_threshold, c.change_drift
    cf[EC_INFLATION], cf[EC_EX_WINDOW] = c.change_inflation, c.excitation_window
    cf[EC_EX_MIN:EC_EX_MIN + 4] = c.excitation_min
    cf[EC_CONVERGED_STD:EC_CONVERGED_STD + 4] = c.converged_std
    cf[EC_CONVERGED_REL] = c.converged_rel
    cf[EC_NONNEGATIVE], cf[EC_CORRELATION] = c.nonnegative, c.correlation_correction
    cf[EC_NIS_WINDOW], cf[EC_MATCH_WINDOW] = c.nis_window, c.matching_window
    cf[EC_MEAN0:EC_MEAN0 + 4] = c.initial_mean
    cf[EC_R0] = c.measurement_var
    return cf


def windows(c: _Config) -> np.ndarray:
    """The windows array W for the nis and matching windows of ``c`` (bounds filled)."""
    n, m = c.nis_window, c.matching_window
    W = np.zeros(2 * (n + 1) + n + m)
    lo, hi = _nis_bounds_table(n)
    W[:n + 1], W[n + 1:2 * (n + 1)] = lo, hi
    return W


@kernel
def _exact_sum(buf, start, size):
    """Sum of buf[start:start + size] with Neumaier's compensation (error about one rounding
    of the result, like math.fsum for these magnitudes; Neumaier, ZAMM 1974)."""
    s = 0.0
    comp = 0.0
    for k in range(start, start + size):
        x = buf[k]
        t = s + x
        if abs(s) >= abs(x):
            comp += (s - t) + x
        else:
            comp += (x - t) + s
        s = t
    return s + comp


@kernel
def _window_push(W, start, size, st, at, value):
    """Mean of the last ``size`` values after adding ``value``: ring buffer W[start:start +
    size], index, count and running sum in st[at:at + 3]. The sum is recomputed with
    compensation each time the buffer wraps, so rounding errors do not accumulate."""
    i = int(st[at])
    st[at + 2] += value - W[start + i]
    W[start + i] = value
    i += 1
    if st[at + 1] < size:
        st[at + 1] += 1.0
    if i == size:
        i = 0
        st[at + 2] = _exact_sum(W, start, size)
    st[at] = i
    return st[at + 2] / st[at + 1]


@kernel
def filter_inflate(st, cf, reason):
    """Multiply P by filter.change_inflation; rows and columns whose variance would exceed the
    prior variance are scaled down together (P -> D P D), which keeps P positive semi-definite
    and the correlations unchanged. ``reason``: a CHANGE_* bit reported at the next update."""
    infl = cf[EC_INFLATION]
    scale = np.ones(4)
    for i in range(4):
        for j in range(4):
            st[EF_P + 4 * i + j] *= infl
    for i in range(4):
        d = st[EF_P + 5 * i]
        if d > cf[EC_P0 + i]:
            scale[i] = math.sqrt(cf[EC_P0 + i] / d)
    for i in range(4):
        for j in range(4):
            st[EF_P + 4 * i + j] *= scale[i] * scale[j]
    st[EF_CUSUM] = 0.0
    st[EF_PENDING] = float(int(st[EF_PENDING]) | reason)


@kernel
def filter_reset(st, cf, W):
    """Back to the prior: theta = filter.initial_mean, P = diag(filter.initial_std^2),
    R = filter.measurement_std^2 (floored), q = filter.process_std; windows, CUSUM and sample
    count cleared. The rejected count is kept (q^2 is set by the caller)."""
    rejected = st[EF_REJECTED]
    st[:] = 0.0
    st[EF_REJECTED] = rejected
    for i in range(4):
        st[EF_TH + i] = cf[EC_MEAN0 + i]
        st[EF_P + 5 * i] = cf[EC_P0 + i]
    st[EF_R] = max(cf[EC_R0], cf[EC_R_FLOOR])
    st[EF_T_PREV] = math.nan
    st[EF_FADING_POWER] = 1.0
    n = int(cf[EC_NIS_WINDOW])
    for k in range(2 * (n + 1), W.shape[0]):
        W[k] = 0.0


@kernel
def _solve_active(P, active, n_active, th0):
    """z = P_AA^-1 theta_A for the active bounds A (numpy.linalg.solve, LAPACK's dgesv);
    returns (z, False) when P_AA is singular."""
    A = np.empty((n_active, n_active))
    b = np.empty(n_active)
    for r in range(n_active):
        b[r] = th0[active[r]]
        for c in range(n_active):
            A[r, c] = P[4 * active[r] + active[c]]
    try:
        return np.linalg.solve(A, b), True
    except Exception:   # numpy.linalg.LinAlgError: singular
        return b, False


@kernel
def filter_project(theta, P, excited_bits):
    """Estimate projection onto mass, damping, stiffness >= 0 (Simon and Chia 2002), in place.

    theta (4,), P (16,) row-major: theta becomes the minimiser of (x - theta)^T P_EE^-1
    (x - theta) over the excited parameters E with x_i >= 0 for the excited ones among mass,
    damping and stiffness. For an active set A (bounds held at zero) the minimiser is
    x_E = theta_E - P_EA z with z = P_AA^-1 theta_A (the conditional mean given x_A = 0), and
    the bound a really binds only where z_a < 0 (its Lagrange multiplier is -z_a). An
    active-set iteration (Nocedal and Wright, Numerical Optimization, 2nd ed. 2006, ch. 16.5)
    adds the most violated bound, releases the one whose multiplier has the wrong sign, and
    stops at the KKT point; with one violated bound (the usual case) it is one division.
    Not-excited parameters are not moved unless they are themselves negative (possible only
    after a settings change); then they are set to zero.
    """
    if excited_bits == 15:
        # the usual case, without the general iteration: all excited and one bound violated;
        # it binds (z < 0), and if the shift violates no other bound, that is the KKT point
        count = 0
        a = 0
        for i in range(3):
            if theta[i] < 0.0:
                count += 1
                a = i
        if count == 1:
            p = P[5 * a]
            if p > 0.0:
                z = theta[a] / p
                x0 = theta[0] - P[a] * z
                x1 = theta[1] - P[4 + a] * z
                x2 = theta[2] - P[8 + a] * z
                x3 = theta[3] - P[12 + a] * z
                if a == 0:
                    x0 = 0.0
                elif a == 1:
                    x1 = 0.0
                else:
                    x2 = 0.0
                if x0 >= 0.0 and x1 >= 0.0 and x2 >= 0.0:
                    theta[0], theta[1], theta[2], theta[3] = x0, x1, x2, x3
                    return
    th0 = theta.copy()
    for i in range(3):
        if th0[i] < 0.0 and not (excited_bits >> i) & 1:
            th0[i] = 0.0
    x = th0.copy()
    active = np.zeros(3, np.int64)
    n_active = 0
    for _ in range(8):   # at most 3 bounds: a handful of steps reach the KKT point
        pick = -1
        for i in range(3):
            if (excited_bits >> i) & 1 and x[i] < 0.0:
                taken = False
                for k in range(n_active):
                    if active[k] == i:
                        taken = True
                if not taken and (pick < 0 or x[i] < x[pick]):
                    pick = i
        if pick < 0:
            break
        active[n_active] = pick
        n_active += 1
        released_all = True
        while n_active > 0:
            z, ok = _solve_active(P, active, n_active, th0)
            if not ok:   # a singular P_AA: no correction, the bounds set to zero
                for i in range(4):
                    x[i] = th0[i]
                for k in range(n_active):
                    x[active[k]] = 0.0
                released_all = False
                break
            worst = 0
            for k in range(1, n_active):
                if z[k] > z[worst]:
                    worst = k
            if z[worst] <= 0.0:   # every multiplier >= 0: these bounds bind
                for e in range(4):
                    x[e] = th0[e]
                    if (excited_bits >> e) & 1:
                        s = 0.0
                        for k in range(n_active):
                            s += P[4 * e + active[k]] * z[k]
                        x[e] -= s
                for k in range(n_active):
                    x[active[k]] = 0.0
                released_all = False
                break
            for k in range(worst, n_active - 1):   # this bound does not bind: release it
                active[k] = active[k + 1]
            n_active -= 1
        if released_all:
            for i in range(4):
                x[i] = th0[i]
    for i in range(4):
        theta[i] = max(x[i], 0.0) if i < 3 else x[i]


@kernel
def filter_update(st, cf, W, fo, t, h0, h1, h2, h3, f):
    """One step of the adaptive filter (see :class:`EnvironmentFilter` for the steps).

    Returns UPDATED, or REJECT_NON_FINITE / REJECT_TIME_BACKWARDS with the state untouched
    (the refusal counted in st[EF_REJECTED]). The step's figures are in ``fo``."""
    th0, th1, th2, th3 = st[EF_TH], st[EF_TH + 1], st[EF_TH + 2], st[EF_TH + 3]
    # Innovation first: it is non-finite whenever h or f is (NaN and inf propagate through the
    # dot product), so one test covers all inputs
    y = f - (h0 * th0 + h1 * th1 + h2 * th2 + h3 * th3)
    if not (math.isfinite(y) and math.isfinite(t)):
        st[EF_REJECTED] += 1.0
        return REJECT_NON_FINITE
    t_prev = st[EF_T_PREV]
    dt = 0.0
    if t_prev == t_prev:
        dt = t - t_prev
        if dt < 0.0:
            st[EF_REJECTED] += 1.0
            return REJECT_TIME_BACKWARDS

    # 1. random-walk prediction (F = I): P += diag(q^2) dt
    p00, p01, p02, p03 = st[EF_P], st[EF_P + 1], st[EF_P + 2], st[EF_P + 3]
    p11, p12, p13 = st[EF_P + 5], st[EF_P + 6], st[EF_P + 7]
    p22, p23, p33 = st[EF_P + 10], st[EF_P + 11], st[EF_P + 15]
    if dt > 0.0:
        p00 += st[EF_Q2] * dt
        p11 += st[EF_Q2 + 1] * dt
        p22 += st[EF_Q2 + 2] * dt
        p33 += st[EF_Q2 + 3] * dt

    # 2. excitation: exponentially weighted mean square of each regressor
    decay = math.exp(-dt / cf[EC_EX_WINDOW])
    e0 = st[EF_EX] * decay + h0 * h0
    e1 = st[EF_EX + 1] * decay + h1 * h1
    e2 = st[EF_EX + 2] * decay + h2 * h2
    e3 = st[EF_EX + 3] * decay + h3 * h3
    ex_den = st[EF_EX_DEN] * decay + 1.0
    x0 = math.sqrt(e0 / ex_den) >= cf[EC_EX_MIN]
    x1 = math.sqrt(e1 / ex_den) >= cf[EC_EX_MIN + 1]
    x2 = math.sqrt(e2 / ex_den) >= cf[EC_EX_MIN + 2]
    x3 = math.sqrt(e3 / ex_den) >= cf[EC_EX_MIN + 3]

    # 3. Schmidt-Kalman update, Joseph form
    a0 = p00 * h0 + p01 * h1 + p02 * h2 + p03 * h3   # P h
    a1 = p01 * h0 + p11 * h1 + p12 * h2 + p13 * h3
    a2 = p02 * h0 + p12 * h1 + p22 * h2 + p23 * h3
    a3 = p03 * h0 + p13 * h1 + p23 * h2 + p33 * h3
    hph = h0 * a0 + h1 * a1 + h2 * a2 + h3 * a3
    R = st[EF_R]
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
    P = st[EF_P:EF_P + 16]
    P[0], P[1], P[2], P[3] = p00, p01, p02, p03
    P[4], P[5], P[6], P[7] = p01, p11, p12, p13
    P[8], P[9], P[10], P[11] = p02, p12, p22, p23
    P[12], P[13], P[14], P[15] = p03, p13, p23, p33
    theta = st[EF_TH:EF_TH + 4]
    theta[0], theta[1], theta[2], theta[3] = th0 + k0 * y, th1 + k1 * y, th2 + k2 * y, th3 + k3 * y
    excited_bits = int(x0) | int(x1) << 1 | int(x2) << 2 | int(x3) << 3

    # 4. non-negative mass, damping, stiffness
    if cf[EC_NONNEGATIVE] != 0.0 and (theta[0] < 0.0 or theta[1] < 0.0 or theta[2] < 0.0):
        filter_project(theta, P, excited_bits)

    # 5.-6. noise adaptation
    nis = y * y / S
    k = st[EF_SAMPLES]
    noise_ad, process_ad = cf[EC_NOISE_ADAPTATION], cf[EC_PROCESS_ADAPTATION]
    if noise_ad != 0.0 or process_ad != 0.0:
        fading = cf[EC_FADING]
        st[EF_FADING_POWER] *= fading
        d = (1.0 - fading) / (1.0 - st[EF_FADING_POWER])
        if noise_ad != 0.0:
            # residual form of Mohamed and Schwarz (1999): g = R (R NIS + h P h^T) / S >= 0
            g = R * (R * nis + hph) / S
            if noise_ad == 1.0:
                R_new = (1.0 - d) * R + d * g
            else:
                n = int(cf[EC_NIS_WINDOW])
                R_new = _window_push(W, 3 * n + 2, int(cf[EC_MATCH_WINDOW]), st, EF_MATCH_WIN, g)
            st[EF_R] = R_new if R_new > cf[EC_R_FLOOR] else cf[EC_R_FLOOR]
        if process_ad != 0.0 and dt > 0.0:
            # diagonal Sage-Husa: q^2 += d K (y^2 - S) K^T / dt, floored at zero
            gq = d * (y * y - S) / dt
            st[EF_Q2] = max(st[EF_Q2] + gq * k0 * k0, 0.0)
            st[EF_Q2 + 1] = max(st[EF_Q2 + 1] + gq * k1 * k1, 0.0)
            st[EF_Q2 + 2] = max(st[EF_Q2 + 2] + gq * k2 * k2, 0.0)
            st[EF_Q2 + 3] = max(st[EF_Q2 + 3] + gq * k3 * k3, 0.0)

    # 7. NIS average and its chi-square interval
    n = int(cf[EC_NIS_WINDOW])
    nis_avg = _window_push(W, 2 * (n + 1), n, st, EF_NIS_WIN, nis)
    count = int(st[EF_NIS_WIN + 1])

    # 8. CUSUM change detection (the step reports the variances before an inflation)
    v0, v1, v2, v3 = P[0], P[5], P[10], P[15]
    gc = st[EF_CUSUM] + nis - cf[EC_DRIFT]
    st[EF_CUSUM] = gc if gc > 0.0 else 0.0
    if gc > cf[EC_THRESHOLD]:
        filter_inflate(st, cf, CHANGE_CUSUM)
        st[EF_PENDING_G] = gc
    fo[EO_CHANGE] = st[EF_PENDING]
    fo[EO_CHANGE_G] = st[EF_PENDING_G]
    st[EF_PENDING] = 0.0

    st[EF_EX], st[EF_EX + 1], st[EF_EX + 2], st[EF_EX + 3] = e0, e1, e2, e3
    st[EF_EX_DEN] = ex_den
    st[EF_T_PREV] = t
    st[EF_SAMPLES] = k + 1.0
    # 9. correlated innovations: the standard deviations widened by the AR(1) variance
    # inflation factor (1 + rho) / (1 - rho) (Box, Jenkins and Reinsel 2008, Sec. 2.1)
    z = y / math.sqrt(S)
    st[EF_CORR] = st[EF_CORR] * decay + z * st[EF_Z_PREV]
    st[EF_CORR + 1] = st[EF_CORR + 1] * decay + z * z
    st[EF_Z_PREV] = z
    inflation = 1.0
    if cf[EC_CORRELATION] != 0.0 and st[EF_CORR + 1] > 0.0:
        rho = min(max(st[EF_CORR] / st[EF_CORR + 1], 0.0), 0.998)
        inflation = (1.0 + rho) / (1.0 - rho)
    converged_bits = 0
    rel = cf[EC_CONVERGED_REL]
    for i in range(4):
        v = v0 if i == 0 else (v1 if i == 1 else (v2 if i == 2 else v3))
        s = math.sqrt(v * inflation) if v > 0.0 else 0.0
        fo[EO_THETA + i] = theta[i]
        fo[EO_STD + i] = s
        if (excited_bits >> i) & 1 and s < max(cf[EC_CONVERGED_STD + i], rel * abs(theta[i])):
            converged_bits |= 1 << i
    fo[EO_EXCITATION] = math.sqrt(e0 / ex_den)
    fo[EO_EXCITATION + 1] = math.sqrt(e1 / ex_den)
    fo[EO_EXCITATION + 2] = math.sqrt(e2 / ex_den)
    fo[EO_EXCITATION + 3] = math.sqrt(e3 / ex_den)
    fo[EO_INNOVATION] = y
    fo[EO_S] = S
    fo[EO_NIS] = nis
    fo[EO_NIS_AVERAGE] = nis_avg
    fo[EO_NIS_LO] = W[count]
    fo[EO_NIS_HI] = W[n + 1 + count]
    fo[EO_R] = R
    fo[EO_PATTERN] = excited_bits | converged_bits << 4   # layout: health.ALL_CONVERGED
    fo[EO_SAMPLES] = k + 1.0
    fo[EO_H], fo[EO_H + 1], fo[EO_H + 2], fo[EO_H + 3] = h0, h1, h2, h3
    fo[EO_F] = f
    fo[EO_T] = t
    return UPDATED


def change_text(bits: int, g: float, threshold: float, text: str = "") -> str:
    """The ``change`` words of a step from its CHANGE_* bits (``text``: inflations asked for by
    name through :meth:`EnvironmentFilter.inflate`)."""
    parts = [text] if bits & CHANGE_TEXT and text else []
    if bits & CHANGE_REGAINED:
        parts.append("contact regained")
    if bits & CHANGE_CUSUM:
        parts.append(f"innovation CUSUM {g:.1f} > {threshold:g}")
    return "; ".join(parts)


class EnvironmentFilter:
    """Adaptive Kalman filter on theta = [mass kg, damping N·s/m, stiffness N/m, static_force N].

    Call :meth:`update` once per sample with the time t (s), the regressor h (4,) =
    [x'' m/s^2, x' m/s, x m, 1] and the force f (N) along the direction; it returns a
    :class:`FilterStep`. The filter reads only the ``filter.*`` settings.

    Per update (:func:`filter_update`, compiled):

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
       :func:`filter_project`; Simon and Chia, "Kalman filtering with state equality
       constraints", IEEE TAES 2002; Simon, "Kalman filtering with state constraints: a survey
       of linear and nonlinear algorithms", IET Control Theory Appl. 2010, estimate
       projection). P is not changed.
    5. Measurement noise R (filter.noise_adaptation). The classic Sage-Husa estimate
       R_k = (1 - d_k) R_{k-1} + d_k (y^2 - h P h^T), with d_k = (1 - b) / (1 - b^(k+1)) and
       fading factor b (Sage and Husa 1969), can go negative. We use instead the residual form
       (Mohamed and Schwarz, "Adaptive Kalman filtering for INS/GPS", J. Geodesy 1999):
       R = E[r^2] + h P+ h^T with r the post-fit residual, a sum of non-negative terms. It is
       evaluated for the full (every parameter updated) gain, for which r = (R/S) y and
       h P+ h^T = R h P h^T / S, so the sample is g = R (R * NIS + h P h^T) / S >= 0, with
       E[g] = R when R is right. 'sage_husa': R_k = (1 - d_k) R_{k-1} + d_k g_k. 'matching':
       R_k = mean of g over the last filter.matching_window samples, covariance matching
       (Mehra, "Approaches to adaptive filtering", IEEE TAC 1972) in the same form. R is
       floored at filter.measurement_std_floor^2.
    6. Process noise (filter.process_adaptation 'sage_husa'): with F = I the Sage-Husa
       estimate Q_k = (1 - d_k) Q_{k-1} + d_k (K y^2 K^T + P_k - P_{k-1}) equals
       Q_{k-1} + d_k K (y^2 - S) K^T; only its diagonal is kept, divided by dt to give the
       intensity q^2 (per second), and floored at zero. Parameters that are not excited have
       K_i = 0 and keep their q.
    7. NIS y^2/S, its mean over the last filter.nis_window updates and the two-sided 95 %
       chi-square interval of that mean (Bar-Shalom, Li and Kirubarajan, Estimation with
       Applications to Tracking and Navigation, 2001, sec. 5.4).
    8. Change detection: one-sided CUSUM g = max(0, g + NIS - filter.change_drift) (Page,
       "Continuous inspection schemes", Biometrika 1954); when g exceeds
       filter.change_threshold a change is declared, the covariance is inflated by
       filter.change_inflation and g restarts from zero.
    9. Correlated innovations: the force passes through the observer and the regressor
       through the differentiator, so neighbouring residuals are correlated and P (which
       assumes white noise) is too small. The standard deviations are widened by the AR(1)
       variance inflation factor (1 + rho) / (1 - rho), rho the lag-1 autocorrelation of the
       normalized innovations over the excitation window (effective sample size n (1 - rho)
       / (1 + rho); Box, Jenkins and Reinsel, Time Series Analysis, 4th ed. 2008, Sec. 2.1).

    Bad input (non-finite t, h or f; time going backwards) raises
    :class:`~interaction_estimator.core.samples.SampleRejected`, is counted in :attr:`rejected` and
    leaves the state untouched.

    Storage: state ``st`` (FILTER_STATE_SIZE,), configuration ``cf`` (FILTER_CONFIG_SIZE,) and
    the last update's figures ``fo`` (FILTER_OUTPUT_SIZE,): views into the Pipeline's storage
    when it passes them, else the filter's own; the windows array :attr:`windows_array`.
    """

    def __init__(self, settings: Settings, st: np.ndarray | None = None,
                 cf: np.ndarray | None = None, fo: np.ndarray | None = None):
        self._cfg = _Config(settings)
        self._st = np.zeros(FILTER_STATE_SIZE) if st is None else st
        self._cf = np.zeros(FILTER_CONFIG_SIZE) if cf is None else cf
        self._fo = np.zeros(FILTER_OUTPUT_SIZE) if fo is None else fo
        self._st[:] = 0.0
        self._cf[:] = configuration(self._cfg)
        self.windows_array = windows(self._cfg)
        self._resets = 0
        self._text = ""            # pending inflation reasons asked for by name
        self._last: FilterStep | None = None
        self._last_key: tuple[int, int] | None = None
        self.reset("start")

    # ----------------------------------------------------------------------------------------
    # state handling

    def reset(self, reason: str = "reset") -> None:
        """Back to the prior: theta = filter.initial_mean, P = diag(filter.initial_std^2),
        R = filter.measurement_std^2, q = filter.process_std; windows, CUSUM and sample count
        cleared. The rejected count is kept."""
        filter_reset(self._st, self._cf, self.windows_array)
        self.reset_reason = reason   # why the filter last started from its prior
        self._st[EF_Q2:EF_Q2 + 4] = self._cfg.process_var
        self._resets += 1
        self._text = ""
        self._last, self._last_key = None, None

    def inflate(self, reason: str) -> None:
        """Multiply the covariance by filter.change_inflation (used when the contact starts
        again or a new object is expected) and report ``reason`` in the next step's ``change``.

        No parameter's variance is taken beyond its prior variance: rows and columns whose
        variance would exceed it are scaled down together (P -> D P D, D diagonal), which keeps
        P positive semi-definite and the correlations unchanged."""
        filter_inflate(self._st, self._cf, CHANGE_TEXT)
        self._text = f"{self._text}; {reason}" if self._text else reason

    def update_settings(self, settings: Settings) -> None:
        """Apply new filter.* settings at run time without losing the estimate.

        theta, P, the adapted R and q, the CUSUM and the excitation are kept. A new
        filter.measurement_std takes effect at once when noise_adaptation is 'fixed', a new
        filter.process_std when process_adaptation is 'fixed'. A changed nis_window or
        matching_window restarts that window. The prior (initial_mean, initial_std) is used at
        the next reset. Raises SettingsError (state untouched) for a bad combination."""
        new = _Config(settings)
        old = self._cfg
        st = self._st
        if new.nis_window != old.nis_window or new.matching_window != old.matching_window:
            W = windows(new)
            if new.nis_window == old.nis_window:   # keep the NIS window
                n = old.nis_window
                W[2 * (n + 1):3 * n + 2] = self.windows_array[2 * (n + 1):3 * n + 2]
            else:
                st[EF_NIS_WIN:EF_NIS_WIN + 3] = 0.0
            if new.matching_window == old.matching_window:   # keep the matching window
                m, n_old, n_new = old.matching_window, old.nis_window, new.nis_window
                W[3 * n_new + 2:3 * n_new + 2 + m] = self.windows_array[3 * n_old + 2:
                                                                        3 * n_old + 2 + m]
            else:
                st[EF_MATCH_WIN:EF_MATCH_WIN + 3] = 0.0
            self.windows_array = W
        if new.noise_adaptation == "fixed":
            st[EF_R] = max(new.measurement_var, new.measurement_var_floor)
        else:
            st[EF_R] = max(st[EF_R], new.measurement_var_floor)
        if new.process_adaptation == "fixed":
            st[EF_Q2:EF_Q2 + 4] = new.process_var
        if new.fading != old.fading:
            # keeps d_k = (1-b)/(1-b^(k+1))
            st[EF_FADING_POWER] = new.fading ** st[EF_SAMPLES]
        self._cfg = new
        self._cf[:] = configuration(new)

    # ----------------------------------------------------------------------------------------
    # read-only views

    @property
    def theta(self) -> np.ndarray:
        """(4,) current estimate [kg, N·s/m, N/m, N] (a copy)."""
        return self._st[EF_TH:EF_TH + 4].copy()

    @property
    def covariance(self) -> np.ndarray:
        """(4, 4) current covariance of theta, SI units squared (a copy)."""
        return self._st[EF_P:EF_P + 16].reshape(4, 4).copy()

    @property
    def measurement_var(self) -> float:
        """Current measurement-noise variance R, N^2."""
        return float(self._st[EF_R])

    @property
    def process_std(self) -> np.ndarray:
        """(4,) current random-walk intensity [kg/√s, N·s/m/√s, N/m/√s, N/√s]."""
        return np.sqrt(self._st[EF_Q2:EF_Q2 + 4])

    @property
    def samples(self) -> int:
        """Updates since the last reset."""
        return int(self._st[EF_SAMPLES])

    @property
    def rejected(self) -> int:
        """Updates refused (non-finite input, time going backwards) since start."""
        return int(self._st[EF_REJECTED])

    @property
    def last(self) -> FilterStep | None:
        """The :class:`FilterStep` of the last update (None before the first one after a
        reset); the same object until the next update."""
        n = int(self._st[EF_SAMPLES])
        if n == 0:
            return None
        if self._last_key != (self._resets, n):
            self._last = self._step(self._text)
            self._last_key = (self._resets, n)
        return self._last

    def _step(self, text: str) -> FilterStep:
        fo = self._fo
        numbers = fo[:12].copy()
        pattern = int(fo[EO_PATTERN])
        return FilterStep(numbers[:4], numbers[4:8], float(fo[EO_INNOVATION]), float(fo[EO_S]),
                          float(fo[EO_NIS]), float(fo[EO_NIS_AVERAGE]),
                          (float(fo[EO_NIS_LO]), float(fo[EO_NIS_HI])), float(fo[EO_R]),
                          numbers[8:], _FLAGS[pattern & 15], _FLAGS[pattern >> 4],
                          change_text(int(fo[EO_CHANGE]), float(fo[EO_CHANGE_G]),
                                      self._cfg.change_threshold, text),
                          int(fo[EO_SAMPLES]), pattern)

    # ----------------------------------------------------------------------------------------
    # the update

    def _refuse(self, code: int, t: float, h: tuple[float, ...], f: float) -> None:
        """Raise SampleRejected naming the bad input (the compiled update refused it)."""
        if code == REJECT_TIME_BACKWARDS:
            raise SampleRejected("time_backwards",
                                 f"environment filter: t = {t:.6f} s is older than the previous"
                                 f" {float(self._st[EF_T_PREV]):.6f} s")
        if not math.isfinite(t):
            raise SampleRejected("non_finite_output", f"environment filter: time t is {t!r} s")
        for i in range(4):
            if not math.isfinite(h[i]):
                raise SampleRejected(
                    "non_finite_output",
                    f"environment filter: regressor {_H_LABELS[i]} is {float(h[i])!r}")
        if not math.isfinite(f):
            raise SampleRejected("non_finite_output", f"environment filter: force f is {f!r} N")
        raise SampleRejected(
            "non_finite_output",
            f"environment filter: predicted force h theta overflowed for h = "
            f"{[float(v) for v in h]} and theta = {self.theta.tolist()}")

    def update(self, t: float, h: np.ndarray, f: float) -> FilterStep:
        """One filter step.

        t: time in s (must not decrease); h: (4,) regressor [x'' m/s^2, x' m/s, x m, 1];
        f: force along the direction, N. Returns the :class:`FilterStep` (also kept in
        :attr:`last`). Raises SampleRejected('non_finite_output') for a non-finite t, h or f
        and SampleRejected('time_backwards') when t is older than the previous update; the
        state is then untouched and :attr:`rejected` counts it.
        """
        if type(h) is tuple and len(h) == 4:
            h0, h1, h2, h3 = (float(v) for v in h)
        else:
            h = np.asarray(h, dtype=float)
            if h.shape != (4,):
                raise ValueError(f"environment filter: regressor h has shape {h.shape}; "
                                 "expected (4,) = [x'' m/s^2, x' m/s, x m, 1]")
            h0, h1, h2, h3 = h.tolist()
        t, f = float(t), float(f)
        code = filter_update(self._st, self._cf, self.windows_array, self._fo, t, h0, h1, h2,
                             h3, f)
        if code != UPDATED:
            self._refuse(code, t, (h0, h1, h2, h3), f)
        step = self._step(self._text)
        self._text = ""
        self._last, self._last_key = step, (self._resets, int(self._st[EF_SAMPLES]))
        return step

    @staticmethod
    def _project(theta: list[float], P: list[float], excited: tuple[bool, ...]) -> list[float]:
        """:func:`filter_project` on plain lists: theta (4,), P (16,) row-major, excited flags;
        returns the projected theta."""
        th = np.array(theta, dtype=float)
        filter_project(th, np.array(P, dtype=float),
                       sum(int(bool(x)) << i for i, x in enumerate(excited)))
        return th.tolist()
