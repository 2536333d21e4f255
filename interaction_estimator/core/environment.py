"""Environment-parameter filter: an adaptive Kalman filter on the object's parameters.

The object model (:mod:`.object_models`) gives a measurement row: the force f (N) and the
regressor h (m,) with ``f = h . theta + v``; theta holds the model's m parameters (for the
default model along the direction: [mass kg, damping N·s/m, stiffness N/m, static_force N] with
h = [x'', x', x, 1]). The parameters follow a random walk, theta_k = theta_{k-1} + w_k with
w_k ~ N(0, diag(q^2) dt), and the measurement noise v_k ~ N(0, R). This is a linear Kalman
filter with F = I and a time-varying 1 x m measurement matrix h_k (Kalman 1960; the same
equations as filterpy's ``KalmanFilter``, with the Joseph-form covariance update of Bucy and
Joseph 1968). Nothing here knows m: every loop runs over the parameters the model declares.

On top of it (each one cited where it is implemented): measurement-noise adaptation
(fading-memory Sage-Husa, or covariance matching), optional diagonal process-noise adaptation,
non-negativity of the parameters the model declares non-negative by projection, excitation
monitoring with a Schmidt ("consider") gain for parameters the motion does not excite, NIS
consistency against chi-square bounds, CUSUM change detection, and the widening of the
standard deviations for correlated innovations.

Records (:class:`FilterRecords`): configuration :data:`PARAMS` and per-parameter
:data:`PARAMETER_PARAMS`; state :data:`STATE`, per-parameter :data:`PARAMETERS` and the
covariance (m, m); the NIS bounds table and the two windows; the last update's figures
:data:`OUTPUT` and per-parameter :data:`PARAMETER_OUTPUT`. Memory is bounded (fixed windows).
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .compiled import kernel
from .object_models import ALONG_DIRECTION, ObjectModel
from .records import B1, F8, I1, I8, record
from .samples import SampleRejected
from .settings import Settings, SettingsError

# kept for callers that name the default model's parameters
PARAMETER_NAMES = ALONG_DIRECTION.parameter_names
PARAMETER_UNITS = ALONG_DIRECTION.parameter_units
NIS_CONFIDENCE = 0.95  # two-sided probability of the NIS interval (Bar-Shalom et al. 2001)

CHANGE_REGAINED = 1  # the contact started again (the Pipeline's inflation)
CHANGE_CUSUM = 2     # the innovation CUSUM crossed its threshold
CHANGE_TEXT = 4      # an inflation asked for through EnvironmentFilter.inflate (its text)

UPDATED, REJECT_NON_FINITE, REJECT_TIME_BACKWARDS = 0, 1, 2
ADAPT_FIXED, ADAPT_SAGE_HUSA, ADAPT_MATCHING = 0, 1, 2
_ADAPTATION = {"fixed": ADAPT_FIXED, "sage_husa": ADAPT_SAGE_HUSA, "matching": ADAPT_MATCHING}

PARAMS = record(
    "environment filter parameters",
    ("r0", F8, "N^2", "measurement variance to start from (filter.measurement_std^2)"),
    ("measurement_std0", F8, "N", "filter.measurement_std, reported before the first update"),
    ("r_floor", F8, "N^2", "floor of the adapted measurement variance"),
    ("noise_adaptation", I1, "", "ADAPT_FIXED, ADAPT_SAGE_HUSA or ADAPT_MATCHING"),
    ("fading", F8, "", "Sage-Husa fading factor b"),
    ("process_adaptation", I1, "", "ADAPT_FIXED or ADAPT_SAGE_HUSA"),
    ("change_threshold", F8, "", "CUSUM threshold on the NIS"),
    ("change_drift", F8, "", "CUSUM drift"),
    ("change_inflation", F8, "", "covariance factor at a change"),
    ("excitation_window_s", F8, "s", "forgetting time of the excitation measure"),
    ("converged_rel", F8, "", "relative std below which a parameter converged"),
    ("correlation", B1, "", "widen the std for correlated innovations"),
    ("nis_window", I8, "updates", "NIS averaging window"),
    ("matching_window", I8, "updates", "covariance-matching window"),
)
PARAMETER_PARAMS = record(
    "environment filter, per parameter",
    ("prior_mean", F8, "(parameter unit)", "prior mean"),
    ("prior_std", F8, "(parameter unit)", "prior standard deviation"),
    ("prior_var", F8, "(parameter unit)^2", "prior variance"),
    ("process_var", F8, "(parameter unit)^2/s", "random-walk intensity q^2 to start from"),
    ("excitation_min", F8, "(regressor unit)", "RMS of h_i below which i is not excited"),
    ("converged_std", F8, "(parameter unit)", "std below which i counts as converged"),
    ("nonnegative", B1, "", "kept >= 0 by projection"),
)
STATE = record(
    "environment filter state",
    ("r", F8, "N^2", "measurement variance R now"),
    ("has_update", B1, "", "updated since the last reset"),
    ("last_time_s", F8, "s", "time of the last update"),
    ("samples", I8, "", "updates since the last reset"),
    ("fading_power", F8, "", "b^k"),
    ("cusum", F8, "", "CUSUM of the NIS"),
    ("z_prev", F8, "", "previous normalized innovation"),
    ("corr_lag", F8, "", "decaying sum of z_k z_(k-1)"),
    ("corr_zero", F8, "", "decaying sum of z_k^2"),
    ("excitation_weight", F8, "", "decaying count of the excitation sums"),
    ("pending_change", I8, "", "CHANGE_* bits to report at the next update"),
    ("pending_g", F8, "", "the CUSUM value that declared a pending change"),
    ("nis_index", I8, "", "NIS window: next slot"),
    ("nis_count", I8, "", "NIS window: values held"),
    ("nis_sum", F8, "", "NIS window: running sum"),
    ("match_index", I8, "", "matching window: next slot"),
    ("match_count", I8, "", "matching window: values held"),
    ("match_sum", F8, "N^2", "matching window: running sum"),
    ("rejected", I8, "", "updates refused since start"),
)
PARAMETERS = record(
    "environment filter state, per parameter",
    ("theta", F8, "(parameter unit)", "estimate"),
    ("process_var", F8, "(parameter unit)^2/s", "random-walk intensity q^2 now"),
    ("excitation_sum", F8, "(regressor unit)^2", "decaying sum of h_i^2"),
)
NIS_BOUNDS = record(
    "NIS interval by number of updates averaged",
    ("lower", F8, "", "chi2.ppf(a/2, n) / n"),
    ("upper", F8, "", "chi2.ppf(1 - a/2, n) / n"),
)
OUTPUT = record(
    "environment filter, last update",
    ("time_s", F8, "s", "time of the update"),
    ("force", F8, "N", "measured force f"),
    ("innovation", F8, "N", "f - h theta_prior"),
    ("innovation_var", F8, "N^2", "S = h P h^T + R"),
    ("nis", F8, "", "innovation^2 / S"),
    ("nis_average", F8, "", "mean NIS over the NIS window"),
    ("nis_lower", F8, "", "lower bound of that mean (95 %)"),
    ("nis_upper", F8, "", "upper bound"),
    ("r", F8, "N^2", "R used at this update"),
    ("change", I8, "", "CHANGE_* bits declared at (or just before) this update"),
    ("change_g", F8, "", "the CUSUM value of a CUSUM change"),
    ("samples", I8, "", "updates since the last reset, this one included"),
    ("all_excited", B1, "", "every parameter excited"),
    ("all_converged", B1, "", "every parameter converged"),
)
PARAMETER_OUTPUT = record(
    "environment filter, last update, per parameter",
    ("value", F8, "(parameter unit)", "estimate"),
    ("std", F8, "(parameter unit)", "standard deviation (widened for correlation)"),
    ("excitation", F8, "(regressor unit)", "RMS of h_i over the excitation window"),
    ("excited", B1, "", "updated at this step"),
    ("converged", B1, "", "excited and std below its threshold"),
    ("regressor", F8, "(regressor unit)", "h_i of this update"),
)


class FilterRecords(NamedTuple):
    """The filter's records, as the compiled update takes them."""

    params: np.ndarray            # (1,) PARAMS
    parameter_params: np.ndarray  # (m,) PARAMETER_PARAMS
    state: np.ndarray             # (1,) STATE
    parameters: np.ndarray        # (m,) PARAMETERS
    covariance: np.ndarray        # (m, m) float
    nis_bounds: np.ndarray        # (nis_window + 1,) NIS_BOUNDS
    nis_ring: np.ndarray          # (nis_window,) float
    match_ring: np.ndarray        # (matching_window,) float
    output: np.ndarray            # (1,) OUTPUT
    parameter_output: np.ndarray  # (m,) PARAMETER_OUTPUT


def nis_bounds_table(n_max: int) -> np.ndarray:
    """Two-sided 95 % interval of the mean of n NIS values of a 1-D measurement, n = 1..n_max,
    as an (n_max + 1,) NIS_BOUNDS array (index 0 unused, NaN).

    n times that mean is chi-square with n degrees of freedom when the filter is consistent
    (Bar-Shalom, Li and Kirubarajan 2001, sec. 5.4), so the bounds are chi2.ppf(a/2, n) / n and
    chi2.ppf(1 - a/2, n) / n.
    """
    from scipy.stats import chi2  # settings time only, never in the update

    n = np.arange(1, n_max + 1, dtype=float)
    alpha = 1.0 - NIS_CONFIDENCE
    table = NIS_BOUNDS.many(n_max + 1)
    table[0] = (math.nan, math.nan)
    table["lower"][1:] = chi2.ppf(alpha / 2.0, n) / n
    table["upper"][1:] = chi2.ppf(1.0 - alpha / 2.0, n) / n
    return table


@kernel
def _exact_sum(buf):
    """Sum of buf with Neumaier's compensation (error about one rounding of the result, like
    math.fsum for these magnitudes; Neumaier, ZAMM 1974)."""
    s = 0.0
    comp = 0.0
    for k in range(buf.shape[0]):
        x = buf[k]
        t = s + x
        if abs(s) >= abs(x):
            comp += (s - t) + x
        else:
            comp += (x - t) + s
        s = t
    return s + comp


@kernel
def _window_push(ring, index, count, total, value):
    """Mean of the last len(ring) values after adding ``value``; returns (mean, index, count,
    total). The sum is recomputed with compensation each time the ring wraps, so rounding
    errors do not accumulate."""
    size = ring.shape[0]
    total += value - ring[index]
    ring[index] = value
    index += 1
    if count < size:
        count += 1
    if index == size:
        index = 0
        total = _exact_sum(ring)
    return total / count, index, count, total


@kernel
def filter_inflate(fr, reason):
    """Multiply P by the change inflation; rows and columns whose variance would exceed the
    prior variance are scaled down together (P -> D P D), which keeps P positive semi-definite
    and the correlations unchanged. ``reason``: a CHANGE_* bit reported at the next update."""
    P = fr.covariance
    m = P.shape[0]
    infl = fr.params[0].change_inflation
    scale = np.ones(m)
    for i in range(m):
        for j in range(m):
            P[i, j] *= infl
    for i in range(m):
        prior = fr.parameter_params[i].prior_var
        if P[i, i] > prior:
            scale[i] = math.sqrt(prior / P[i, i])
    for i in range(m):
        for j in range(m):
            P[i, j] *= scale[i] * scale[j]
    s = fr.state[0]
    s.cusum = 0.0
    s.pending_change |= reason


@kernel
def filter_reset(fr):
    """Back to the prior: theta = prior mean, P = diag(prior variance), R = r0 (floored),
    q^2 = the process variance; windows, CUSUM and sample count cleared. The rejected count is
    kept."""
    p, s = fr.params[0], fr.state[0]
    P = fr.covariance
    m = P.shape[0]
    for i in range(m):
        pp, ps = fr.parameter_params[i], fr.parameters[i]
        ps.theta = pp.prior_mean
        ps.process_var = pp.process_var
        ps.excitation_sum = 0.0
        for j in range(m):
            P[i, j] = 0.0
        P[i, i] = pp.prior_var
    s.r = max(p.r0, p.r_floor)
    s.has_update = False
    s.last_time_s = 0.0
    s.samples = 0
    s.fading_power = 1.0
    s.cusum = 0.0
    s.z_prev = 0.0
    s.corr_lag = 0.0
    s.corr_zero = 0.0
    s.excitation_weight = 0.0
    s.pending_change = 0
    s.pending_g = 0.0
    s.nis_index = s.nis_count = 0
    s.nis_sum = 0.0
    s.match_index = s.match_count = 0
    s.match_sum = 0.0
    fr.nis_ring[:] = 0.0
    fr.match_ring[:] = 0.0


@kernel
def _solve_active(P, active, n_active, th0):
    """z = P_AA^-1 theta_A for the active bounds A (numpy.linalg.solve, LAPACK's dgesv);
    returns (z, False) when P_AA is singular."""
    A = np.empty((n_active, n_active))
    b = np.empty(n_active)
    for r in range(n_active):
        b[r] = th0[active[r]]
        for c in range(n_active):
            A[r, c] = P[active[r], active[c]]
    try:
        return np.linalg.solve(A, b), True
    except Exception:   # numpy.linalg.LinAlgError: singular
        return b, False


@kernel
def filter_project(theta, P, excited, nonnegative):
    """Estimate projection onto the bounds x_i >= 0 of the non-negative parameters (Simon and
    Chia 2002), in place.

    theta (m,), P (m, m), excited and nonnegative (m,) bool: theta becomes the minimiser of
    (x - theta)^T P_EE^-1 (x - theta) over the excited parameters E with x_i >= 0 for the
    excited non-negative ones. For an active set A (bounds held at zero) the minimiser is
    x_E = theta_E - P_EA z with z = P_AA^-1 theta_A (the conditional mean given x_A = 0), and
    the bound a really binds only where z_a < 0 (its Lagrange multiplier is -z_a). An
    active-set iteration (Nocedal and Wright, Numerical Optimization, 2nd ed. 2006, ch. 16.5)
    adds the most violated bound, releases the one whose multiplier has the wrong sign, and
    stops at the KKT point; with one violated bound (the usual case) it is one division.
    Not-excited parameters are not moved unless they are themselves negative (possible only
    after a settings change); then they are set to zero.
    """
    m = theta.shape[0]
    all_excited = True
    for i in range(m):
        if not excited[i]:
            all_excited = False
    if all_excited:
        # the usual case, without the general iteration: all excited and one bound violated;
        # it binds (z < 0), and if the shift violates no other bound, that is the KKT point
        count = 0
        a = 0
        for i in range(m):
            if nonnegative[i] and theta[i] < 0.0:
                count += 1
                a = i
        if count == 1:
            p = P[a, a]
            if p > 0.0:
                z = theta[a] / p
                x = np.empty(m)
                for e in range(m):
                    x[e] = theta[e] - P[e, a] * z
                x[a] = 0.0
                ok = True
                for e in range(m):
                    if nonnegative[e] and not x[e] >= 0.0:
                        ok = False
                if ok:
                    for e in range(m):
                        theta[e] = x[e]
                    return
    th0 = theta.copy()
    bounds = 0
    for i in range(m):
        if nonnegative[i]:
            bounds += 1
            if th0[i] < 0.0 and not excited[i]:
                th0[i] = 0.0
    x = th0.copy()
    active = np.zeros(max(bounds, 1), np.int64)
    n_active = 0
    for _ in range(max(8, 2 * bounds + 2)):   # a handful of steps reach the KKT point
        pick = -1
        for i in range(m):
            if nonnegative[i] and excited[i] and x[i] < 0.0:
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
                for i in range(m):
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
                for e in range(m):
                    x[e] = th0[e]
                    if excited[e]:
                        s = 0.0
                        for k in range(n_active):
                            s += P[e, active[k]] * z[k]
                        x[e] -= s
                for k in range(n_active):
                    x[active[k]] = 0.0
                released_all = False
                break
            for k in range(worst, n_active - 1):   # this bound does not bind: release it
                active[k] = active[k + 1]
            n_active -= 1
        if released_all:
            for i in range(m):
                x[i] = th0[i]
    for i in range(m):
        theta[i] = max(x[i], 0.0) if nonnegative[i] else x[i]


@kernel
def filter_update(fr, t, h, f):
    """One step of the adaptive filter (see :class:`EnvironmentFilter` for the steps): time t
    (s), regressor h (m,), force f (N).

    Returns UPDATED, or REJECT_NON_FINITE / REJECT_TIME_BACKWARDS with the state untouched
    (the refusal counted in ``state.rejected``). The step's figures are in ``fr.output`` and
    ``fr.parameter_output``."""
    p, s, out = fr.params[0], fr.state[0], fr.output[0]
    pp, ps, po = fr.parameter_params, fr.parameters, fr.parameter_output
    P = fr.covariance
    m = h.shape[0]
    # Innovation first: it is non-finite whenever h or f is (NaN and inf propagate through the
    # dot product), so one test covers all inputs
    predicted = 0.0
    for i in range(m):
        predicted += h[i] * ps[i].theta
    y = f - predicted
    if not (math.isfinite(y) and math.isfinite(t)):
        s.rejected += 1
        return REJECT_NON_FINITE
    dt = 0.0
    if s.has_update:
        dt = t - s.last_time_s
        if dt < 0.0:
            s.rejected += 1
            return REJECT_TIME_BACKWARDS

    # 1. random-walk prediction (F = I): P += diag(q^2) dt
    if dt > 0.0:
        for i in range(m):
            P[i, i] += ps[i].process_var * dt

    # 2. excitation: exponentially weighted mean square of each regressor
    decay = math.exp(-dt / p.excitation_window_s)
    excitation_weight = s.excitation_weight * decay + 1.0
    excitation_sum = np.empty(m)
    excited = np.empty(m, np.bool_)
    all_excited = True
    for i in range(m):
        excitation_sum[i] = ps[i].excitation_sum * decay + h[i] * h[i]
        excited[i] = math.sqrt(excitation_sum[i] / excitation_weight) >= pp[i].excitation_min
        all_excited = all_excited and excited[i]

    # 3. Schmidt-Kalman update, Joseph form
    a = np.empty(m)   # P h
    for i in range(m):
        acc = 0.0
        for j in range(m):
            acc += P[i, j] * h[j]
        a[i] = acc
    hph = 0.0
    for i in range(m):
        hph += h[i] * a[i]
    R = s.r
    S = hph + R
    k = np.empty(m)
    if all_excited:
        for i in range(m):
            k[i] = a[i] / S
        # P - K K^T S (= P - P h^T h P / S), exactly symmetric
        for i in range(m):
            for j in range(i, m):
                P[i, j] -= k[i] * a[j]
                P[j, i] = P[i, j]
    else:
        for i in range(m):
            k[i] = a[i] / S if excited[i] else 0.0
        # P - (K (Ph)^T + (Ph) K^T) + S K K^T
        for i in range(m):
            b = S * k[i]
            for j in range(i, m):
                P[i, j] += -(k[i] * a[j] + a[i] * k[j]) + b * k[j]
                P[j, i] = P[i, j]
    theta = np.empty(m)
    for i in range(m):
        theta[i] = ps[i].theta + k[i] * y

    # 4. non-negativity of the parameters the model declares non-negative
    violated = False
    for i in range(m):
        if pp[i].nonnegative and theta[i] < 0.0:
            violated = True
    if violated:
        filter_project(theta, P, excited, pp.nonnegative)
    for i in range(m):
        ps[i].theta = theta[i]

    # 5.-6. noise adaptation
    nis = y * y / S
    samples = s.samples
    if p.noise_adaptation != ADAPT_FIXED or p.process_adaptation != ADAPT_FIXED:
        fading = p.fading
        s.fading_power *= fading
        d = (1.0 - fading) / (1.0 - s.fading_power)
        if p.noise_adaptation != ADAPT_FIXED:
            # residual form of Mohamed and Schwarz (1999): g = R (R NIS + h P h^T) / S >= 0
            g = R * (R * nis + hph) / S
            if p.noise_adaptation == ADAPT_SAGE_HUSA:
                r_new = (1.0 - d) * R + d * g
            else:
                r_new, s.match_index, s.match_count, s.match_sum = _window_push(
                    fr.match_ring, s.match_index, s.match_count, s.match_sum, g)
            s.r = r_new if r_new > p.r_floor else p.r_floor
        if p.process_adaptation != ADAPT_FIXED and dt > 0.0:
            # diagonal Sage-Husa: q^2 += d K (y^2 - S) K^T / dt, floored at zero
            gq = d * (y * y - S) / dt
            for i in range(m):
                ps[i].process_var = max(ps[i].process_var + gq * k[i] * k[i], 0.0)

    # 7. NIS average and its chi-square interval
    nis_avg, s.nis_index, s.nis_count, s.nis_sum = _window_push(
        fr.nis_ring, s.nis_index, s.nis_count, s.nis_sum, nis)

    # 8. CUSUM change detection (the step reports the variances before an inflation)
    variance = np.empty(m)
    for i in range(m):
        variance[i] = P[i, i]
    gc = s.cusum + nis - p.change_drift
    s.cusum = gc if gc > 0.0 else 0.0
    if gc > p.change_threshold:
        filter_inflate(fr, CHANGE_CUSUM)
        s.pending_g = gc
    out.change = s.pending_change
    out.change_g = s.pending_g
    s.pending_change = 0

    for i in range(m):
        ps[i].excitation_sum = excitation_sum[i]
    s.excitation_weight = excitation_weight
    s.has_update = True
    s.last_time_s = t
    s.samples = samples + 1
    # 9. correlated innovations: the standard deviations widened by the AR(1) variance
    # inflation factor (1 + rho) / (1 - rho) (Box, Jenkins and Reinsel 2008, Sec. 2.1)
    z = y / math.sqrt(S)
    s.corr_lag = s.corr_lag * decay + z * s.z_prev
    s.corr_zero = s.corr_zero * decay + z * z
    s.z_prev = z
    inflation = 1.0
    if p.correlation and s.corr_zero > 0.0:
        rho = min(max(s.corr_lag / s.corr_zero, 0.0), 0.998)
        inflation = (1.0 + rho) / (1.0 - rho)
    all_converged = True
    for i in range(m):
        v = variance[i]
        std = math.sqrt(v * inflation) if v > 0.0 else 0.0
        o = po[i]
        o.value = theta[i]
        o.std = std
        o.excited = excited[i]
        o.converged = excited[i] and std < max(pp[i].converged_std, p.converged_rel * abs(theta[i]))
        all_converged = all_converged and o.converged
        o.excitation = math.sqrt(excitation_sum[i] / excitation_weight)
        o.regressor = h[i]
    out.time_s = t
    out.force = f
    out.innovation = y
    out.innovation_var = S
    out.nis = nis
    out.nis_average = nis_avg
    out.nis_lower = fr.nis_bounds[s.nis_count].lower
    out.nis_upper = fr.nis_bounds[s.nis_count].upper
    out.r = R
    out.samples = samples + 1
    out.all_excited = all_excited
    out.all_converged = all_converged
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


class FilterStep(NamedTuple):
    """One record per update; all SI, the parameters in the model's order and units.

    theta (m,): estimate. std (m,): standard deviations. innovation: f - h theta_prior, N.
    innovation_var: S = h P h^T + R, N^2. nis: innovation^2 / S. nis_average: mean NIS over the
    last filter.nis_window updates. nis_bounds: two-sided 95 % chi-square interval of that
    average (chi2(n)/n, n the number of updates averaged). measurement_var: R used at this
    step, N^2. excitation (m,): RMS of each regressor over the excitation window. excited (m,)
    bool: the parameter was updated at this step. converged (m,) bool: excited and std below
    its threshold (filter.converged_std or filter.converged_rel_std * |theta|). change: "" or
    why a change was declared at (or just before) this step. samples: updates since the last
    reset, this one included.
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


def _per_parameter(s: Settings, name: str, model: ObjectModel) -> list[float]:
    values = list(s[name])
    if len(values) != model.size:
        raise SettingsError(f"{name}: {values!r} has {len(values)} numbers; expected "
                            f"{model.size} (one per parameter of the {model.name} model: "
                            f"{', '.join(model.parameter_names)})")
    return values


def configure(fr: FilterRecords, s: Settings, model: ObjectModel) -> None:
    """Write the filter.* settings into the configuration records (checked for cross-setting
    rules; raises SettingsError naming the bad value)."""
    mean = _per_parameter(s, "filter.initial_mean", model)
    nonnegative = bool(s["filter.nonnegative"])
    if nonnegative:
        for i, (x, nonneg) in enumerate(zip(mean, model.nonnegative, strict=True)):
            if nonneg and x < 0.0:
                raise SettingsError(
                    f"filter.initial_mean[{i}]: {x!r} {model.parameter_units[i]}"
                    f" ({model.parameter_names[i]}) is negative while filter.nonnegative is"
                    f" true; expected a value >= 0")
    p = fr.params[0]
    p["measurement_std0"] = float(s["filter.measurement_std"])
    p["r0"] = float(s["filter.measurement_std"]) ** 2
    p["r_floor"] = float(s["filter.measurement_std_floor"]) ** 2
    p["noise_adaptation"] = _ADAPTATION[s["filter.noise_adaptation"]]
    p["fading"] = float(s["filter.fading_factor"])
    p["process_adaptation"] = _ADAPTATION[s["filter.process_adaptation"]]
    p["change_threshold"] = float(s["filter.change_threshold"])
    p["change_drift"] = float(s["filter.change_drift"])
    p["change_inflation"] = float(s["filter.change_inflation"])
    p["excitation_window_s"] = float(s["filter.excitation_window"])
    p["converged_rel"] = float(s["filter.converged_rel_std"])
    p["correlation"] = bool(s["filter.correlation_correction"])
    p["nis_window"] = int(s["filter.nis_window"])
    p["matching_window"] = int(s["filter.matching_window"])
    pp = fr.parameter_params
    pp["prior_mean"] = mean
    pp["prior_std"] = _per_parameter(s, "filter.initial_std", model)
    pp["prior_var"] = np.square(pp["prior_std"])
    pp["process_var"] = np.square(_per_parameter(s, "filter.process_std", model))
    pp["excitation_min"] = _per_parameter(s, "filter.excitation_min", model)
    pp["converged_std"] = _per_parameter(s, "filter.converged_std", model)
    pp["nonnegative"] = [nonnegative and x for x in model.nonnegative]


def new_records(s: Settings, model: ObjectModel,
                views: FilterRecords | None = None) -> FilterRecords:
    """Records for ``model`` configured from ``s`` and reset to the prior: the filter's own, or
    ``views`` (the Pipeline's storage) with windows sized for ``s``."""
    m = model.size
    n, w = int(s["filter.nis_window"]), int(s["filter.matching_window"])
    if views is None:
        fr = FilterRecords(PARAMS.one(), PARAMETER_PARAMS.many(m), STATE.one(),
                           PARAMETERS.many(m), np.zeros((m, m)), nis_bounds_table(n),
                           np.zeros(n), np.zeros(w), OUTPUT.one(), PARAMETER_OUTPUT.many(m))
    else:
        fr = views._replace(nis_bounds=nis_bounds_table(n), nis_ring=np.zeros(n),
                            match_ring=np.zeros(w))
    configure(fr, s, model)
    filter_reset(fr)
    return fr


class EnvironmentFilter:
    """Adaptive Kalman filter on the parameters theta of an object model (default: along the
    direction, theta = [mass kg, damping N·s/m, stiffness N/m, static_force N]).

    Call :meth:`update` once per sample with the time t (s), the regressor h (m,) (for the
    default model [x'' m/s^2, x' m/s, x m, 1]) and the force f (N); it returns a
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
    4. Non-negativity (filter.nonnegative, for the parameters the model declares non-negative):
       a negative estimate is projected onto the constraint, minimising
       (x - theta)^T P^-1 (x - theta) over the excited parameters subject to the bounds (an
       active-set iteration, see :func:`filter_project`; Simon and Chia, "Kalman filtering with
       state equality constraints", IEEE TAES 2002; Simon, "Kalman filtering with state
       constraints: a survey of linear and nonlinear algorithms", IET Control Theory Appl.
       2010, estimate projection). P is not changed.
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
    :class:`~interaction_estimator.core.samples.SampleRejected`, is counted in
    :attr:`rejected` and leaves the state untouched.
    """

    def __init__(self, settings: Settings, model: ObjectModel = ALONG_DIRECTION,
                 views: FilterRecords | None = None):
        self.model = model
        self.records = new_records(settings, model, views)
        self._change_threshold = float(settings["filter.change_threshold"])
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
        filter_reset(self.records)
        self.reset_reason = reason   # why the filter last started from its prior
        self._resets += 1
        self._text = ""
        self._last, self._last_key = None, None

    def inflate(self, reason: str) -> None:
        """Multiply the covariance by filter.change_inflation (used when the contact starts
        again or a new object is expected) and report ``reason`` in the next step's ``change``.

        No parameter's variance is taken beyond its prior variance: rows and columns whose
        variance would exceed it are scaled down together (P -> D P D, D diagonal), which keeps
        P positive semi-definite and the correlations unchanged."""
        filter_inflate(self.records, CHANGE_TEXT)
        self._text = f"{self._text}; {reason}" if self._text else reason

    def update_settings(self, settings: Settings) -> None:
        """Apply new filter.* settings at run time without losing the estimate.

        theta, P, the adapted R and q, the CUSUM and the excitation are kept. A new
        filter.measurement_std takes effect at once when noise_adaptation is 'fixed', a new
        filter.process_std when process_adaptation is 'fixed'. A changed nis_window or
        matching_window restarts that window. The prior (initial_mean, initial_std) is used at
        the next reset. Raises SettingsError (state untouched) for a bad combination."""
        old = self.records
        new = new_records(settings, self.model)   # checks everything before anything changes
        p_old, p_new = old.params[0], new.params[0]
        s = old.state[0]
        nis_ring, nis_bounds, match_ring = old.nis_ring, old.nis_bounds, old.match_ring
        if p_new["nis_window"] != p_old["nis_window"]:
            nis_ring, nis_bounds = new.nis_ring, new.nis_bounds
            s["nis_index"] = s["nis_count"] = 0
            s["nis_sum"] = 0.0
        if p_new["matching_window"] != p_old["matching_window"]:
            match_ring = new.match_ring
            s["match_index"] = s["match_count"] = 0
            s["match_sum"] = 0.0
        if p_new["noise_adaptation"] == ADAPT_FIXED:
            s["r"] = max(p_new["r0"], p_new["r_floor"])
        else:
            s["r"] = max(s["r"], p_new["r_floor"])
        if p_new["process_adaptation"] == ADAPT_FIXED:
            old.parameters["process_var"] = new.parameter_params["process_var"]
        if p_new["fading"] != p_old["fading"]:
            # keeps d_k = (1-b)/(1-b^(k+1))
            s["fading_power"] = p_new["fading"] ** s["samples"]
        old.params[:] = new.params
        old.parameter_params[:] = new.parameter_params
        self.records = old._replace(nis_bounds=nis_bounds, nis_ring=nis_ring,
                                    match_ring=match_ring)
        self._change_threshold = float(settings["filter.change_threshold"])

    # ----------------------------------------------------------------------------------------
    # read-only views

    @property
    def theta(self) -> np.ndarray:
        """(m,) current estimate, in the model's units (a copy)."""
        return self.records.parameters["theta"].copy()

    @property
    def covariance(self) -> np.ndarray:
        """(m, m) current covariance of theta, the model's units squared (a copy)."""
        return self.records.covariance.copy()

    @property
    def measurement_var(self) -> float:
        """Current measurement-noise variance R, N^2."""
        return float(self.records.state[0]["r"])

    @property
    def process_std(self) -> np.ndarray:
        """(m,) current random-walk intensity (parameter unit per square root of a second)."""
        return np.sqrt(self.records.parameters["process_var"])

    @property
    def samples(self) -> int:
        """Updates since the last reset."""
        return int(self.records.state[0]["samples"])

    @property
    def rejected(self) -> int:
        """Updates refused (non-finite input, time going backwards) since start."""
        return int(self.records.state[0]["rejected"])

    @property
    def change_threshold(self) -> float:
        return self._change_threshold

    @property
    def last(self) -> FilterStep | None:
        """The :class:`FilterStep` of the last update (None before the first one after a
        reset); the same object until the next update."""
        n = self.samples
        if n == 0:
            return None
        if self._last_key != (self._resets, n):
            self._last = self._step(self._text)
            self._last_key = (self._resets, n)
        return self._last

    def _step(self, text: str) -> FilterStep:
        out, po = self.records.output[0], self.records.parameter_output
        return FilterStep(po["value"].copy(), po["std"].copy(), float(out["innovation"]),
                          float(out["innovation_var"]), float(out["nis"]),
                          float(out["nis_average"]),
                          (float(out["nis_lower"]), float(out["nis_upper"])), float(out["r"]),
                          po["excitation"].copy(), po["excited"].copy(), po["converged"].copy(),
                          change_text(int(out["change"]), float(out["change_g"]),
                                      self._change_threshold, text),
                          int(out["samples"]))

    # ----------------------------------------------------------------------------------------
    # the update

    def refusal(self, code: int, t: float, h: np.ndarray, f: float) -> SampleRejected:
        """The SampleRejected naming the bad input of an update the compiled code refused."""
        if code == REJECT_TIME_BACKWARDS:
            return SampleRejected(
                "time_backwards",
                f"environment filter: t = {t:.6f} s is older than the previous "
                f"{float(self.records.state[0]['last_time_s']):.6f} s")
        if not math.isfinite(t):
            return SampleRejected("non_finite_output", f"environment filter: time t is {t!r} s")
        for i, label in enumerate(self.model.regressor_labels):
            if not math.isfinite(h[i]):
                return SampleRejected(
                    "non_finite_output",
                    f"environment filter: regressor {label} is {float(h[i])!r}")
        if not math.isfinite(f):
            return SampleRejected("non_finite_output", f"environment filter: force f is {f!r} N")
        return SampleRejected(
            "non_finite_output",
            f"environment filter: predicted force h theta overflowed for h = "
            f"{[float(v) for v in h]} and theta = {self.theta.tolist()}")

    def update(self, t: float, h, f: float) -> FilterStep:
        """One filter step.

        t: time in s (must not decrease); h: (m,) regressor (for the default model [x'' m/s^2,
        x' m/s, x m, 1]); f: force along the direction, N. Returns the :class:`FilterStep` (also
        kept in :attr:`last`). Raises SampleRejected('non_finite_output') for a non-finite t, h
        or f and SampleRejected('time_backwards') when t is older than the previous update; the
        state is then untouched and :attr:`rejected` counts it.
        """
        h = np.array(h, dtype=float)
        if h.shape != (self.model.size,):
            raise ValueError(f"environment filter: regressor h has shape {h.shape}; expected "
                             f"({self.model.size},) = {list(self.model.regressor_labels)}")
        t, f = float(t), float(f)
        code = filter_update(self.records, t, h, f)
        if code != UPDATED:
            raise self.refusal(code, t, h, f)
        step = self._step(self._text)
        self._text = ""
        self._last, self._last_key = step, (self._resets, self.samples)
        return step

    @staticmethod
    def _project(theta, P, excited, nonnegative=(True, True, True, False)) -> list[float]:
        """:func:`filter_project` on plain sequences: theta (m,), P (m, m) or (m*m,) row-major,
        excited and nonnegative flags (m,); returns the projected theta."""
        th = np.array(theta, dtype=float)
        m = len(th)
        filter_project(th, np.array(P, dtype=float).reshape(m, m),
                       np.array(excited, dtype=np.bool_), np.array(nonnegative, dtype=np.bool_))
        return th.tolist()
