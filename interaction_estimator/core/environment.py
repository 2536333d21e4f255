"""Environment-parameter filter: the object's parameters at the information limit of the data.

The object model (:mod:`.object_models`) gives a measurement row per sample: the force f (N) and
the regressor h (m,) with ``f = h . theta + v`` (for the default model along the direction:
theta = [mass kg, damping N·s/m, stiffness N/m, static_force N], h = [x'', x', x, 1]). The
parameters of a stationary object do not change, so nothing is forgotten: the estimate is the
Bayesian linear regression of every row since the contact began (or since a detected change),
with the prior of the parameter file (Gaussian prior, Gaussian noise: the posterior mean and
covariance of e.g. Bishop, Pattern Recognition and Machine Learning, 2006, sec. 3.3), computed
exactly from sufficient statistics (Gram matrix G = sum h h^T, b = sum h f, sum f^2, count), so it
equals a batch least-squares fit of the same rows with that prior - the filter form of recursive
least squares without forgetting. Nothing here knows m.

Rows are averaged over blocks of ``filter.update_interval`` s before they are used. The model is
linear, so block means obey it as the rows do (mean f = mean h . theta), whatever the sample
rate. The force's error is coloured (it passes through the observer, the regressor through the
differentiator, and what the model does not hold varies slowly), so the standard deviations are
not taken from P alone: they are the sandwich P (P0^-1 + S / R^2) P with S the Bartlett-weighted
sum of the blocks' scores and their lagged products over ``filter.correlation_time`` s (Newey
and West, Econometrica 1987), which is P for white residuals and, for residuals whose error
varies slowly, larger for a parameter whose regressor varies slowly (the static force) and
smaller for one whose regressor oscillates faster than the error.

Per block (:func:`filter_update`):

1. Innovation of the block against the estimate so far: y = f - h theta, S = h P h^T + R, and
   its normalized square NIS = y^2 / S. The NIS averaged over the last ``filter.nis_time`` s is
   compared with its two-sided 95 % chi-square interval (Bar-Shalom, Li and Kirubarajan,
   Estimation with Applications to Tracking and Navigation, 2001, sec. 5.4).
2. Change detection: one-sided CUSUM of the NIS, g = max(0, g + NIS - drift) (Page, "Continuous
   inspection schemes", Biometrika 1954; Basseville and Nikiforov, Detection of Abrupt Changes,
   1993, ch. 2). When g exceeds ``filter.change_threshold`` the object changed; the change
   began where g last was zero, and the estimate is made again from the blocks since then
   (kept for ``filter.history_time`` s): what was learned from the old object is dropped, what
   the new one showed is kept.
3. The block joins the sufficient statistics; the estimate is the solution of
   (P0^-1 + G / R) theta = P0^-1 theta0 + b / R, with P = (P0^-1 + G / R)^-1 its covariance.
4. R, the noise variance of a block mean, is the batch residual variance of the rows so far,
   (sum f^2 - 2 theta^T b + theta^T G theta) / (n - m); while n - m is below 3 the noise level
   carried over from before (``filter.measurement_std`` at start) fills in for the missing
   degrees of freedom.
5. Non-negativity (``filter.nonnegative``, for the parameters the model declares non-negative):
   the constrained minimizer of the same quadratic cost is the projection of the estimate onto
   the bounds in the metric P^-1 (an active-set iteration, :func:`filter_project`; Simon and
   Chia, IEEE TAES 2002; Simon, IET Control Theory Appl. 2010). The reported value is that
   projection; the unconstrained solution is kept for the next block.
6. Excitation and convergence are judged by what a parameter's uncertainty does to the force,
   never by thresholds in its own units: its scale d_i = max(|theta_i|, 0.05 F_rms / h_rms_i) is
   the larger of its value and the value whose contribution would be 5 % of the RMS force
   (F_rms, h_rms_i: over the blocks the estimate rests on). Excited: its standard deviation is
   below ``filter.excited_fraction`` d_i and the data, not the prior, determined it (below half
   its prior standard deviation). Converged: below ``filter.converged_fraction`` d_i.

Records (:class:`FilterRecords`): configuration :data:`PARAMS` and per-parameter
:data:`PARAMETER_PARAMS`; state :data:`STATE`, per-parameter :data:`PARAMETERS`, the Gram matrix
and the covariance (m, m); the NIS table and window; the block history; the last update's
figures :data:`OUTPUT` and per-parameter :data:`PARAMETER_OUTPUT`. Memory is bounded.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .compiled import kernel
from .object_models import ALONG_DIRECTION, ObjectModel
from .records import B1, F8, I8, record
from .samples import SampleRejected
from .settings import Settings, SettingsError
from .wrench import symmetric_eigen

# kept for callers that name the default model's parameters
PARAMETER_NAMES = ALONG_DIRECTION.parameter_names
PARAMETER_UNITS = ALONG_DIRECTION.parameter_units
NIS_CONFIDENCE = 0.95  # two-sided probability of the NIS interval (Bar-Shalom et al. 2001)
FORCE_SHARE = 0.05     # the scale of a parameter: the value whose contribution is 5 % of F_rms
NOISE_PRIOR_BLOCKS = 3.0  # degrees of freedom below which the carried-over noise level helps
DATA_DETERMINED = 0.5  # excited only where the data brought the std below half its prior's

CHANGE_REGAINED = 1  # a new contact began after one had ended (the estimate started again)
CHANGE_CUSUM = 2     # the innovation CUSUM crossed its threshold
CHANGE_TEXT = 4      # a restart asked for through EnvironmentFilter.restart (its text)

UPDATED, REJECT_NON_FINITE, REJECT_TIME_BACKWARDS, ADDED = 0, 1, 2, 3

PARAMS = record(
    "environment filter parameters",
    ("block_s", F8, "s", "rows are averaged over blocks this long (0: every row a block)"),
    ("measurement_std0", F8, "N", "noise std of a block mean to start from"),
    ("learn_noise", B1, "", "estimate the noise level from the residuals"),
    ("memory_s", F8, "s", "forgetting time of the statistics (0: nothing is forgotten)"),
    ("change_threshold", F8, "", "CUSUM threshold on the NIS"),
    ("change_drift", F8, "", "CUSUM drift"),
    ("excited_fraction", F8, "", "std below this share of the scale: excited"),
    ("converged_fraction", F8, "", "std below this share of the scale: converged"),
    ("correlation", B1, "", "standard deviations from the residuals' correlation (HAC)"),
    ("lags", I8, "blocks", "blocks over which the residuals are taken to be correlated"),
    ("model_error", F8, "", "systematic error of the force model, as a share of a scale"),
)
PARAMETER_PARAMS = record(
    "environment filter, per parameter",
    ("prior_mean", F8, "(parameter unit)", "prior mean"),
    ("prior_std", F8, "(parameter unit)", "prior standard deviation"),
    ("prior_var", F8, "(parameter unit)^2", "prior variance"),
    ("nonnegative", B1, "", "kept >= 0 by projection"),
)
STATE = record(
    "environment filter state",
    ("block_count", I8, "", "rows in the block being gathered"),
    ("block_time_sum", F8, "s", "sum of their times"),
    ("block_start_s", F8, "s", "time of its first row"),
    ("has_row", B1, "", "a row was added since the last reset"),
    ("last_row_s", F8, "s", "time of the last row"),
    ("has_update", B1, "", "a block was used since the last reset"),
    ("last_time_s", F8, "s", "time of the last block"),
    ("samples", I8, "", "blocks used since the last reset"),
    ("count", F8, "blocks", "blocks in the statistics (weighted when forgetting)"),
    ("force_sq_sum", F8, "N^2", "sum of f^2 over them"),
    ("noise_var", F8, "N^2", "noise variance R of a block mean, as estimated"),
    ("noise_carry", F8, "N^2", "noise variance carried over as a prior"),
    ("cusum", F8, "", "CUSUM of the NIS"),
    ("cusum_zero_s", F8, "s", "time of the last block at which the CUSUM was zero"),
    ("lag_index", I8, "", "next slot of the lag ring"),
    ("lag_count", I8, "", "scores held in the lag ring"),
    ("nis_index", I8, "", "NIS window: next slot"),
    ("nis_count", I8, "", "NIS window: values held"),
    ("nis_sum", F8, "", "NIS window: running sum"),
    ("history_index", I8, "", "block history: next slot"),
    ("history_count", I8, "", "block history: blocks held"),
    ("pending_change", I8, "", "CHANGE_* bits to report at the next update"),
    ("pending_g", F8, "", "the CUSUM value that declared a pending change"),
    ("rejected", I8, "", "rows refused since start"),
)
PARAMETERS = record(
    "environment filter state, per parameter",
    ("theta", F8, "(parameter unit)", "estimate (without the non-negativity projection)"),
    ("force_sum", F8, "(regressor unit)·N", "b_i = sum h_i f"),
)
NIS_BOUNDS = record(
    "NIS interval by number of blocks averaged",
    ("lower", F8, "", "chi2.ppf(a/2, n) / n"),
    ("upper", F8, "", "chi2.ppf(1 - a/2, n) / n"),
)
OUTPUT = record(
    "environment filter, last update",
    ("time_s", F8, "s", "time of the block"),
    ("force", F8, "N", "its mean force f"),
    ("innovation", F8, "N", "f - h theta before the block"),
    ("innovation_var", F8, "N^2", "S = h P h^T + R"),
    ("nis", F8, "", "innovation^2 / S"),
    ("nis_average", F8, "", "mean NIS over the NIS window"),
    ("nis_lower", F8, "", "lower bound of that mean (95 %)"),
    ("nis_upper", F8, "", "upper bound"),
    ("r", F8, "N^2", "noise variance of a block mean (R)"),
    ("force_rms", F8, "N", "RMS of the block means' force since the estimate began"),
    ("change", I8, "", "CHANGE_* bits declared at (or just before) this update"),
    ("change_g", F8, "", "the CUSUM value of a CUSUM change"),
    ("samples", I8, "", "blocks used since the last reset, this one included"),
    ("all_excited", B1, "", "every parameter excited"),
    ("all_converged", B1, "", "every parameter converged"),
)
PARAMETER_OUTPUT = record(
    "environment filter, last update, per parameter",
    ("value", F8, "(parameter unit)", "estimate (projected onto the bounds)"),
    ("std", F8, "(parameter unit)", "standard deviation (widened for correlation)"),
    ("excitation", F8, "(regressor unit)", "RMS of h_i over the blocks the estimate rests on"),
    ("scale", F8, "(parameter unit)", "d_i = max(|theta_i|, 0.05 F_rms / h_rms_i)"),
    ("excited", B1, "", "the data determine it"),
    ("converged", B1, "", "std below filter.converged_fraction of the scale"),
    ("regressor", F8, "(regressor unit)", "h_i of this block"),
)


class FilterRecords(NamedTuple):
    """The filter's records, as the compiled update takes them."""

    params: np.ndarray            # (1,) PARAMS
    parameter_params: np.ndarray  # (m,) PARAMETER_PARAMS
    state: np.ndarray             # (1,) STATE
    parameters: np.ndarray        # (m,) PARAMETERS
    gram: np.ndarray              # (m, m) G = sum h h^T
    covariance: np.ndarray        # (m, m) P
    nis_bounds: np.ndarray        # (nis capacity + 1,) NIS_BOUNDS
    nis_ring: np.ndarray          # (nis capacity,)
    history_time: np.ndarray      # (history capacity,) s, the blocks' times
    history_force: np.ndarray     # (history capacity, p) N, their mean forces
    history_regressor: np.ndarray  # (history capacity, p, m) their mean regressors
    lag_ring: np.ndarray          # (lags, m) the last blocks' scores h^T w
    hac: np.ndarray               # (m, m) sum of the scores' products over the lags
    block_force: np.ndarray       # (p,) N, sum of the forces of the block being gathered
    block_regressor: np.ndarray   # (p, m) sum of its regressors
    output: np.ndarray            # (1,) OUTPUT
    parameter_output: np.ndarray  # (m,) PARAMETER_OUTPUT


def nis_bounds_table(n_max: int, channels: int = 1, lags: int = 0) -> np.ndarray:
    """Two-sided 95 % interval of the mean of n NIS values (n = blocks x channels, 1..n_max), as
    an (n_max + 1,) NIS_BOUNDS array (index 0 unused, NaN).

    For white innovations, n times that mean is chi-square with n degrees of freedom when the
    filter is consistent (Bar-Shalom, Li and Kirubarajan 2001, sec. 5.4): the bounds are
    chi2.ppf(a/2, n) / n and chi2.ppf(1 - a/2, n) / n. The blocks' innovations are correlated
    over ``lags`` blocks (filter.correlation_time), with the Bartlett weights the covariance
    already assumes, rho_k = 1 - k / (lags + 1) (Newey and West 1987). For Gaussian innovations
    the squares then correlate as rho_k^2 (Isserlis 1918), so the mean of b blocks' NIS has the
    variance of white ones times c = 1 + 2 sum_k (1 - k/b) rho_k^2, and the interval is that of
    a chi-square with the matching degrees of freedom n / c (Satterthwaite, Biometrics Bulletin
    1946): without it a consistent filter leaves the white interval far more often than 5 %.
    lags = 0: white.
    """
    # scipy.special's inverse of the chi-square survival function: the same quantiles as
    # scipy.stats.chi2.ppf (to rounding), without importing scipy.stats (about 0.5 s here)
    from scipy.special import chdtri  # settings time only, never in the update

    n = np.arange(1, n_max + 1, dtype=float)
    blocks = np.ceil(n / max(channels, 1))
    inflation = np.ones(n_max)
    for k in range(1, lags + 1):
        rho = 1.0 - k / (lags + 1.0)
        inflation += 2.0 * np.clip(1.0 - k / blocks, 0.0, None) * rho * rho
    dof = n / inflation
    alpha = 1.0 - NIS_CONFIDENCE
    table = NIS_BOUNDS.many(n_max + 1)
    table[0] = (math.nan, math.nan)
    table["lower"][1:] = chdtri(dof, 1.0 - alpha / 2.0) / dof
    table["upper"][1:] = chdtri(dof, alpha / 2.0) / dof
    return table


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
def _solve(fr):
    """theta and P from the sufficient statistics and the noise variance R (step 3)."""
    pp, ps = fr.parameter_params, fr.parameters
    s = fr.state[0]
    G, P = fr.gram, fr.covariance
    m = G.shape[0]
    r = s.noise_var
    A = np.empty((m, m))
    c = np.empty(m)
    for i in range(m):
        for j in range(m):
            A[i, j] = G[i, j] / r
        A[i, i] += 1.0 / pp[i].prior_var
        c[i] = ps[i].force_sum / r + pp[i].prior_mean / pp[i].prior_var
    inverse = np.linalg.inv(A)
    for i in range(m):
        total = 0.0
        for j in range(m):
            P[i, j] = 0.5 * (inverse[i, j] + inverse[j, i])
            total += inverse[i, j] * c[j]
        ps[i].theta = total


@kernel
def _noise(fr):
    """R from the batch residual of the statistics, pooled with the carried-over level."""
    p, s, ps = fr.params[0], fr.state[0], fr.parameters
    if not p.learn_noise:
        s.noise_var = p.measurement_std0 * p.measurement_std0
        return
    G = fr.gram
    m = G.shape[0]
    sse = s.force_sq_sum
    for i in range(m):
        sse -= 2.0 * ps[i].theta * ps[i].force_sum
        for j in range(m):
            sse += ps[i].theta * G[i, j] * ps[j].theta
    dof = s.count - m
    if dof < 0.0:
        dof = 0.0
    if sse < 0.0:   # rounding of a near-perfect fit
        sse = 0.0
    # the carried-over level fills in only for the degrees of freedom the data lack, so it
    # stops counting once there are NOISE_PRIOR_BLOCKS of them
    lack = max(NOISE_PRIOR_BLOCKS - dof, 0.0)
    # a floor of (1e-6 of the RMS force)^2 keeps a noise-free fit (a simulation) solvable
    floor = 1e-12 * max(s.force_sq_sum / max(s.count, 1.0), 1e-12)
    s.noise_var = max((sse + lack * s.noise_carry) / (dof + lack), floor)


@kernel
def _add_block(fr, t, f, H, decay):
    """A block (force f (p,), regressor H (p, m)) into the statistics (after forgetting by
    ``decay``)."""
    s, ps = fr.state[0], fr.parameters
    G = fr.gram
    m = G.shape[0]
    if decay != 1.0:
        for i in range(m):
            ps[i].force_sum *= decay
            for j in range(m):
                G[i, j] *= decay
        s.count *= decay
        s.force_sq_sum *= decay
    for c in range(f.shape[0]):
        for i in range(m):
            ps[i].force_sum += H[c, i] * f[c]
            for j in range(m):
                G[i, j] += H[c, i] * H[c, j]
        s.count += 1.0
        s.force_sq_sum += f[c] * f[c]

@kernel
def _add_score(fr, g, decay):
    """One block's score g = H^T w (m,) into the heteroskedasticity- and autocorrelation-
    consistent sum: g g^T plus, over the last ``lags`` blocks, Bartlett-weighted products with
    the earlier scores (Newey and West, Econometrica 1987), after forgetting by ``decay``."""
    s = fr.state[0]
    hac, ring = fr.hac, fr.lag_ring
    m = g.shape[0]
    lags = ring.shape[0]
    if decay != 1.0:
        for i in range(m):
            for j in range(m):
                hac[i, j] *= decay
    for i in range(m):
        for j in range(m):
            hac[i, j] += g[i] * g[j]
    for lag in range(1, min(s.lag_count, lags) + 1):
        weight = 1.0 - lag / (lags + 1.0)
        slot = (s.lag_index - lag) % lags
        for i in range(m):
            for j in range(m):
                hac[i, j] += weight * (g[i] * ring[slot, j] + ring[slot, i] * g[j])
    for i in range(m):
        ring[s.lag_index, i] = g[i]
    s.lag_index = (s.lag_index + 1) % lags
    if s.lag_count < lags:
        s.lag_count += 1


@kernel
def _clear_statistics(fr):
    s, ps = fr.state[0], fr.parameters
    fr.gram[:, :] = 0.0
    for i in range(ps.shape[0]):
        ps[i].force_sum = 0.0
    s.count = 0.0
    s.force_sq_sum = 0.0
    s.lag_index = s.lag_count = 0
    fr.hac[:, :] = 0.0
    s.nis_index = s.nis_count = 0
    s.nis_sum = 0.0
    s.cusum = 0.0


@kernel
def filter_reset(fr):
    """Back to the prior: theta = prior mean, P = diag(prior variance), no statistics, no
    history, the block being gathered dropped. The noise level learned so far is carried over
    as a prior (a sensor property); the rejected count is kept."""
    p, s = fr.params[0], fr.state[0]
    _clear_statistics(fr)
    s.noise_carry = s.noise_var if s.has_update else p.measurement_std0 * p.measurement_std0
    s.noise_var = s.noise_carry
    s.block_count = 0
    s.block_time_sum = 0.0
    fr.block_force[:] = 0.0
    fr.block_regressor[:, :] = 0.0
    s.has_row = False
    s.has_update = False
    s.samples = 0
    s.cusum_zero_s = 0.0
    s.history_index = s.history_count = 0
    s.pending_change = 0
    s.pending_g = 0.0
    pp, ps = fr.parameter_params, fr.parameters
    P = fr.covariance
    m = P.shape[0]
    for i in range(m):
        ps[i].theta = pp[i].prior_mean
        for j in range(m):
            P[i, j] = 0.0
        P[i, i] = pp[i].prior_var


@kernel
def filter_restart(fr, reason):
    """A new object is expected (a contact regained after a long gap, or asked for): the
    estimate starts from the prior again; ``reason`` (a CHANGE_* bit) is reported at the next
    update."""
    filter_reset(fr)
    fr.state[0].pending_change |= reason


@kernel
def _window_push(ring, index, count, total, value):
    """Mean of the last len(ring) values after adding ``value``; returns (mean, index, count,
    total). The sum is recomputed each time the ring wraps, so rounding errors do not
    accumulate."""
    size = ring.shape[0]
    total += value - ring[index]
    ring[index] = value
    index += 1
    if count < size:
        count += 1
    if index == size:
        index = 0
        total = np.sum(ring)
    return total / count, index, count, total


@kernel
def _outputs(fr, t, f, H, y, S, nis, nis_average):
    """The figures of the update (steps 5 and 6); y, S: the first channel's innovation and
    its variance, nis: the block's normalized innovation squared over all channels."""
    p, s, out = fr.params[0], fr.state[0], fr.output[0]
    pp, ps, po = fr.parameter_params, fr.parameters, fr.parameter_output
    P, G = fr.covariance, fr.gram
    m = P.shape[0]
    # covariance consistent with correlated residuals: P (P0^-1 + HAC / R^2) P, the sandwich of
    # the estimate's sensitivity to the prior and the data (White 1980; Newey and West 1987);
    # with white residuals it is P. Until the data span a few correlation lengths it is not
    # trusted below P.
    blocks = s.count / f.shape[0]
    sandwich = np.zeros(m)
    use_hac = p.correlation and blocks > m
    if use_hac:
        r2 = s.noise_var * s.noise_var
        PS = np.empty((m, m))
        for i in range(m):
            for j in range(m):
                acc = 0.0
                for k in range(m):
                    acc += P[i, k] * fr.hac[k, j]
                # the data's share P HAC / R^2 and the prior's P P0^-1
                PS[i, j] = acc / r2 + P[i, j] / pp[j].prior_var
        for i in range(m):
            acc = 0.0
            for k in range(m):
                acc += PS[i, k] * P[k, i]
            sandwich[i] = acc * blocks / (blocks - m)
    trusted = blocks >= 2.0 * fr.lag_ring.shape[0] + m
    theta = np.empty(m)
    for i in range(m):
        theta[i] = ps[i].theta
    all_true = np.ones(m, np.bool_)
    nonnegative = np.empty(m, np.bool_)
    violated = False
    for i in range(m):
        nonnegative[i] = pp[i].nonnegative
        if nonnegative[i] and theta[i] < 0.0:
            violated = True
    if violated:
        filter_project(theta, P, all_true, nonnegative)
    count = s.count if s.count > 0.0 else 1.0
    force_rms = math.sqrt(s.force_sq_sum / count)
    all_excited = True
    all_converged = True
    for i in range(m):
        o = po[i]
        variance = P[i, i]
        if use_hac:
            variance = sandwich[i] if trusted else max(sandwich[i], P[i, i])
        h_rms = math.sqrt(G[i, i] / count)
        scale = abs(theta[i])
        if h_rms > 0.0:
            scale = max(scale, FORCE_SHARE * force_rms / h_rms)
            # what no amount of data removes: the force model's own error (the observer's,
            # the wrench map's, the kinematics'), a share of the parameter's scale
            floor = p.model_error * scale
            variance += floor * floor
        std = math.sqrt(variance) if variance > 0.0 else 0.0
        o.value = theta[i]
        o.std = std
        o.excitation = h_rms
        o.scale = scale
        o.excited = (h_rms > 0.0 and std <= p.excited_fraction * scale
                     and std <= DATA_DETERMINED * pp[i].prior_std)
        o.converged = o.excited and std <= p.converged_fraction * scale
        o.regressor = H[0, i]
        all_excited = all_excited and o.excited
        all_converged = all_converged and o.converged
    channels = f.shape[0]
    out.time_s = t
    out.force = f[0]
    out.innovation = y
    out.innovation_var = S
    out.nis = nis
    out.nis_average = nis_average
    out.nis_lower = fr.nis_bounds[s.nis_count * channels].lower
    out.nis_upper = fr.nis_bounds[s.nis_count * channels].upper
    out.r = s.noise_var
    out.force_rms = force_rms
    out.samples = s.samples
    out.all_excited = all_excited
    out.all_converged = all_converged

@kernel
def _rebuild_since(fr, start):
    """The statistics made again from the kept blocks later than ``start`` s (a change)."""
    s = fr.state[0]
    _clear_statistics(fr)
    size = fr.history_time.shape[0]
    first = s.history_index - s.history_count
    for k in range(s.history_count):
        slot = (first + k) % size
        if fr.history_time[slot] > start:
            _add_block(fr, fr.history_time[slot], fr.history_force[slot],
                       fr.history_regressor[slot], 1.0)
    _solve(fr)
    # the residuals' correlation from the new estimate's residuals over the same blocks
    ps = fr.parameters
    m = ps.shape[0]
    g = np.empty(m)
    for k in range(s.history_count):
        slot = (first + k) % size
        if fr.history_time[slot] > start:
            H, f = fr.history_regressor[slot], fr.history_force[slot]
            for i in range(m):
                g[i] = 0.0
            for c in range(f.shape[0]):
                e = f[c]
                for i in range(m):
                    e -= H[c, i] * ps[i].theta
                for i in range(m):
                    g[i] += H[c, i] * e
            _add_score(fr, g, 1.0)


@kernel
def _use_block(fr, t, f, H):
    """One block mean: force f (p,), regressor H (p, m) (steps 1 to 6)."""
    p, s, ps = fr.params[0], fr.state[0], fr.parameters
    P = fr.covariance
    m = P.shape[0]
    channels = f.shape[0]
    dt = t - s.last_time_s if s.has_update else 0.0
    # 1. innovation against the estimate so far: y = f - H theta, S = H P H^T + R I
    y = np.empty(channels)
    PH = np.empty((m, channels))
    for c in range(channels):
        predicted = 0.0
        for i in range(m):
            predicted += H[c, i] * ps[i].theta
        y[c] = f[c] - predicted
        for i in range(m):
            acc = 0.0
            for j in range(m):
                acc += P[i, j] * H[c, j]
            PH[i, c] = acc
    S = np.empty((channels, channels))
    for a in range(channels):
        for b in range(channels):
            total = s.noise_var if a == b else 0.0
            for i in range(m):
                total += H[a, i] * PH[i, b]
            S[a, b] = total
    if channels == 1:
        nis = y[0] * y[0] / S[0, 0]
    else:
        nis = 0.0
        w = np.linalg.solve(S, y)
        for c in range(channels):
            nis += y[c] * w[c]
    nis_average, s.nis_index, s.nis_count, s.nis_sum = _window_push(
        fr.nis_ring, s.nis_index, s.nis_count, s.nis_sum, nis / channels)
    # the block's score for the correlation-consistent covariance: H^T w with w the innovations
    # whitened by S and scaled to R (white noise: the scores sum to R G, as the residuals')
    w = np.empty(channels)
    if channels == 1:
        w[0] = y[0] * math.sqrt(s.noise_var / S[0, 0])
    else:
        values = np.empty(channels)
        vectors = np.empty((channels, channels))
        symmetric_eigen(S.copy(), values, vectors)
        for a in range(channels):
            total = 0.0
            for b in range(channels):
                inner = 0.0
                for c in range(channels):
                    inner += vectors[c, b] * y[c]
                total += vectors[a, b] * inner / math.sqrt(values[b])
            w[a] = total * math.sqrt(s.noise_var)
    score = np.zeros(m)
    for c in range(channels):
        for i in range(m):
            score[i] += H[c, i] * w[c]
    # the block is kept for a possible re-estimation after a change
    size = fr.history_time.shape[0]
    slot = s.history_index
    fr.history_time[slot] = t
    for c in range(channels):
        fr.history_force[slot, c] = f[c]
        for i in range(m):
            fr.history_regressor[slot, c, i] = H[c, i]
    s.history_index = (slot + 1) % size
    if s.history_count < size:
        s.history_count += 1
    # 2. change detection (only once the estimate has something to compare with)
    g = s.cusum + nis - channels * p.change_drift
    if g <= 0.0 or s.samples < m:
        g = 0.0
        s.cusum_zero_s = t
    s.cusum = g
    decay = math.exp(-dt / p.memory_s) if p.memory_s > 0.0 else 1.0
    if g > p.change_threshold:
        start = s.cusum_zero_s
        s.noise_carry = s.noise_var
        s.pending_change |= CHANGE_CUSUM
        s.pending_g = g
        # the estimate starts again from the blocks since the change
        _rebuild_since(fr, start)
        _noise(fr)
        _solve(fr)
        fr.nis_ring[:] = 0.0
        s.cusum_zero_s = t
    else:
        # 3. the block into the statistics, 4. the noise level, and the estimate
        _add_block(fr, t, f, H, decay)
        _add_score(fr, score, decay)
        _solve(fr)
        _noise(fr)
        _solve(fr)
    s.has_update = True
    s.last_time_s = t
    s.samples += 1
    _outputs(fr, t, f, H, y[0], S[0, 0], nis, nis_average)
    out = fr.output[0]
    out.change = s.pending_change
    out.change_g = s.pending_g
    s.pending_change = 0

@kernel
def filter_update(fr, t, H, f):
    """Add one measurement row (time t s, regressor H (p, m), force f (p,) N: p channels, one
    for a model along a direction, three for a force vector); when its block is complete, use
    the block's mean (:func:`_use_block`).

    Returns ADDED (the row joined its block), UPDATED (a block was used: the figures are in
    ``fr.output`` and ``fr.parameter_output``), or REJECT_NON_FINITE / REJECT_TIME_BACKWARDS
    with the state untouched (the refusal counted in ``state.rejected``)."""
    code = filter_add(fr.params[0], fr.state[0], fr.block_force, fr.block_regressor, t, H, f)
    if code == UPDATED:
        filter_use_block(fr)
    return code


@kernel
def filter_add(p, s, block_force, block_regressor, t, H, f):
    """The first half of :func:`filter_update`, on the records it needs (p: PARAMS, s: STATE
    records; the block's sums): the row's checks and its addition to the block. Returns ADDED,
    a REJECT_* code, or UPDATED when the block is complete: then :func:`filter_use_block` must
    follow. (The Pipeline's step calls it per sample and builds the filter's 17 arrays only
    for a complete block: each array argument of a compiled call costs an atomic reference
    count increment and decrement.)"""
    channels, m = H.shape[0], H.shape[1]
    total = t
    for c in range(channels):
        total += f[c]
        for i in range(m):
            total += H[c, i]
    if not math.isfinite(total):
        s.rejected += 1
        return REJECT_NON_FINITE
    if s.has_row and t < s.last_row_s:
        s.rejected += 1
        return REJECT_TIME_BACKWARDS
    s.has_row = True
    s.last_row_s = t
    if s.block_count == 0:
        s.block_start_s = t
    s.block_count += 1
    s.block_time_sum += t
    for c in range(channels):
        block_force[c] += f[c]
        for i in range(m):
            block_regressor[c, i] += H[c, i]
    if t - s.block_start_s < p.block_s:
        return ADDED
    return UPDATED


@kernel
def filter_use_block(fr):
    """The second half of :func:`filter_update`: the complete block's mean through the filter
    (:func:`_use_block`), the block's sums cleared."""
    s = fr.state[0]
    n = float(s.block_count)
    mean_h = fr.block_regressor / n
    mean_f = fr.block_force / n
    mean_t = s.block_time_sum / n
    fr.block_regressor[:, :] = 0.0
    fr.block_force[:] = 0.0
    s.block_count = 0
    s.block_time_sum = 0.0
    _use_block(fr, mean_t, mean_f, mean_h)

def change_text(bits: int, g: float, threshold: float, text: str = "") -> str:
    """The ``change`` words of an update from its CHANGE_* bits (``text``: restarts asked for
    by name through :meth:`EnvironmentFilter.restart`)."""
    parts = [text] if bits & CHANGE_TEXT and text else []
    if bits & CHANGE_REGAINED:
        parts.append("new contact: estimate started again")
    if bits & CHANGE_CUSUM:
        parts.append(f"object changed (innovation CUSUM {g:.1f} > {threshold:g}): estimated "
                     "again from the change on")
    return "; ".join(parts)


class FilterStep(NamedTuple):
    """One record per block update; all SI, the parameters in the model's order and units.

    theta (m,): estimate (projected onto the bounds). std (m,): standard deviations.
    innovation: f - h theta before the block, N. innovation_var: S = h P h^T + R, N^2. nis:
    innovation^2 / S. nis_average: mean NIS over the last filter.nis_time s. nis_bounds: its
    two-sided 95 % chi-square interval. measurement_var: R, the noise variance of a block
    mean, N^2. excitation (m,): RMS of each regressor over the blocks the estimate rests on.
    excited, converged (m,) bool (see the module docstring). change: "" or why a change was
    declared at (or just before) this update. samples: blocks since the last reset.
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


def _capacities(s: Settings) -> tuple[int, int]:
    """Blocks held by the NIS window and by the history, from their times in s."""
    block = max(float(s["filter.update_interval"]), 1e-3)
    nis = max(1, min(int(math.ceil(float(s["filter.nis_time"]) / block)), 100_000))
    history = max(2, min(int(math.ceil(float(s["filter.history_time"]) / block)) + 1, 100_000))
    return nis, history


def _lags(s: Settings) -> int:
    """Blocks in filter.correlation_time."""
    block = max(float(s["filter.update_interval"]), 1e-3)
    return max(1, min(int(math.ceil(float(s["filter.correlation_time"]) / block)), 1000))


def configure(fr: FilterRecords, s: Settings, model: ObjectModel) -> None:
    """Write the filter.* settings into the configuration records (checked for cross-setting
    rules; raises SettingsError naming the bad value)."""
    mean, std = model.prior(s)   # filter.initial_mean/std, or the cartesian.* settings
    nonnegative = bool(s["filter.nonnegative"])
    if nonnegative:
        for i, (x, nonneg) in enumerate(zip(mean, model.nonnegative, strict=True)):
            if nonneg and x < 0.0:
                raise SettingsError(
                    f"filter.initial_mean[{i}]: {x!r} {model.parameter_units[i]}"
                    f" ({model.parameter_names[i]}) is negative while filter.nonnegative is"
                    f" true; expected a value >= 0")
    excited, converged = float(s["filter.excited_fraction"]), float(s["filter.converged_fraction"])
    if converged > excited:
        raise SettingsError(f"filter.converged_fraction: {converged!r} is above "
                            f"filter.excited_fraction ({excited!r}); expected a value <= it")
    p = fr.params[0]
    p["block_s"] = float(s["filter.update_interval"])
    p["measurement_std0"] = float(s["filter.measurement_std"])
    p["learn_noise"] = bool(s["filter.learn_noise"])
    p["memory_s"] = float(s["filter.memory"])
    p["change_threshold"] = float(s["filter.change_threshold"])
    p["change_drift"] = float(s["filter.change_drift"])
    p["excited_fraction"] = excited
    p["converged_fraction"] = converged
    p["correlation"] = bool(s["filter.correlation_correction"])
    p["lags"] = _lags(s)
    p["model_error"] = float(s["filter.model_error"])
    pp = fr.parameter_params
    pp["prior_mean"] = mean
    pp["prior_std"] = std
    pp["prior_var"] = np.square(pp["prior_std"])
    pp["nonnegative"] = [nonnegative and x for x in model.nonnegative]


def new_records(s: Settings, model: ObjectModel,
                views: FilterRecords | None = None) -> FilterRecords:
    """Records for ``model`` configured from ``s`` and reset to the prior: the filter's own, or
    ``views`` (the Pipeline's storage) with windows sized for ``s``."""
    m, channels = model.size, model.channels
    nis, history = _capacities(s)
    lags = _lags(s) if bool(s["filter.correlation_correction"]) else 0
    windows = dict(nis_bounds=nis_bounds_table(nis * channels, channels, lags),
                   nis_ring=np.zeros(nis),
                   history_time=np.zeros(history), history_force=np.zeros((history, channels)),
                   history_regressor=np.zeros((history, channels, m)),
                   block_force=np.zeros(channels), block_regressor=np.zeros((channels, m)),
                   lag_ring=np.zeros((_lags(s), m)), hac=np.zeros((m, m)))
    if views is None:
        fr = FilterRecords(PARAMS.one(), PARAMETER_PARAMS.many(m), STATE.one(),
                           PARAMETERS.many(m), np.zeros((m, m)), np.zeros((m, m)),
                           output=OUTPUT.one(), parameter_output=PARAMETER_OUTPUT.many(m),
                           **windows)
    else:
        fr = views._replace(**windows)
    configure(fr, s, model)
    filter_reset(fr)
    return fr


class EnvironmentFilter:
    """The object's parameters theta of an object model (default: along the direction,
    theta = [mass kg, damping N·s/m, stiffness N/m, static_force N]); see the module docstring
    for the method.

    Call :meth:`update` once per measurement row with the time t (s), the regressor h (m,) (for
    the default model [x'' m/s^2, x' m/s, x m, 1]) and the force f (N); rows are gathered into
    blocks of ``filter.update_interval`` s, and :meth:`update` returns the :class:`FilterStep` of
    the last block used (None before the first). The filter reads only the ``filter.*``
    settings.

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
        self._text = ""            # pending restart reasons asked for by name
        self._last: FilterStep | None = None
        self._last_key: tuple[int, int] | None = None
        self.reset("start")

    # ----------------------------------------------------------------------------------------
    # state handling

    def reset(self, reason: str = "reset") -> None:
        """Back to the prior (filter.initial_mean, filter.initial_std); the noise level learned
        so far is kept as a prior; the rejected count is kept."""
        filter_reset(self.records)
        self.reset_reason = reason   # why the filter last started from its prior
        self._resets += 1
        self._text = ""
        self._last, self._last_key = None, None

    def restart(self, reason: str) -> None:
        """A new object is expected: the estimate starts from the prior again, and ``reason`` is
        reported in the next step's ``change``."""
        filter_restart(self.records, CHANGE_TEXT)
        self._text = f"{self._text}; {reason}" if self._text else reason

    def update_settings(self, settings: Settings) -> None:
        """Apply new filter.* settings at run time without losing the estimate.

        The statistics, the estimate and the noise level are kept. A changed filter.nis_time
        restarts the NIS window, a changed filter.history_time or filter.update_interval the
        block history. The prior (initial_mean, initial_std) is used at the next reset. Raises
        SettingsError (state untouched) for a bad combination."""
        old = self.records
        new = new_records(settings, self.model)   # checks everything before anything changes
        s = old.state[0]
        # the NIS interval depends on filter.correlation_time too: always the new table
        keep: dict[str, np.ndarray] = {"nis_bounds": new.nis_bounds}
        if new.nis_ring.shape != old.nis_ring.shape:
            s["nis_index"] = s["nis_count"] = 0
            s["nis_sum"] = 0.0
            keep.update(nis_ring=new.nis_ring)
        if new.lag_ring.shape != old.lag_ring.shape:
            s["lag_index"] = s["lag_count"] = 0
            keep.update(lag_ring=new.lag_ring)
        if new.history_time.shape != old.history_time.shape:
            s["history_index"] = s["history_count"] = 0
            keep.update(history_time=new.history_time, history_force=new.history_force,
                        history_regressor=new.history_regressor)
        old.params[:] = new.params
        old.parameter_params[:] = new.parameter_params
        self.records = old._replace(**keep)
        self._change_threshold = float(settings["filter.change_threshold"])

    # ----------------------------------------------------------------------------------------
    # read-only views

    @property
    def theta(self) -> np.ndarray:
        """(m,) current estimate, in the model's units, before the non-negativity projection
        (a copy)."""
        return self.records.parameters["theta"].copy()

    @property
    def covariance(self) -> np.ndarray:
        """(m, m) current covariance of theta, the model's units squared (a copy)."""
        return self.records.covariance.copy()

    @property
    def measurement_var(self) -> float:
        """Current noise variance R of a block mean, N^2."""
        return float(self.records.state[0]["noise_var"])

    @property
    def samples(self) -> int:
        """Blocks used since the last reset."""
        return int(self.records.state[0]["samples"])

    @property
    def rejected(self) -> int:
        """Rows refused (non-finite input, time going backwards) since start."""
        return int(self.records.state[0]["rejected"])

    @property
    def change_threshold(self) -> float:
        return self._change_threshold

    @property
    def last(self) -> FilterStep | None:
        """The :class:`FilterStep` of the last block used (None before the first one after a
        reset); the same object until the next block."""
        n = self.samples
        if n == 0:
            return None
        if self._last_key != (self._resets, n):
            self._last = self._step("")
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

    def refusal(self, code: int, t: float, h: np.ndarray, f) -> SampleRejected:
        """The SampleRejected naming the bad input of a row the compiled code refused (h:
        (p, m) or (m,), f: (p,) or a number)."""
        h = np.atleast_2d(np.asarray(h, dtype=float))
        forces = np.atleast_1d(np.asarray(f, dtype=float))
        if code == REJECT_TIME_BACKWARDS:
            return SampleRejected(
                "time_backwards",
                f"environment filter: t = {t:.6f} s is older than the previous "
                f"{float(self.records.state[0]['last_row_s']):.6f} s")
        if not math.isfinite(t):
            return SampleRejected("non_finite_output", f"environment filter: time t is {t!r} s")
        for c in range(h.shape[0]):
            for i, label in enumerate(self.model.regressor_labels):
                if not math.isfinite(h[c, i]):
                    return SampleRejected(
                        "non_finite_output",
                        f"environment filter: regressor {label} is {float(h[c, i])!r}")
        bad = [float(x) for x in forces if not math.isfinite(x)]
        return SampleRejected("non_finite_output",
                              f"environment filter: force f is {bad[0] if bad else forces!r} N")

    def update(self, t: float, h, f) -> FilterStep | None:
        """Add one row: t: time in s (must not decrease); h: (m,) regressor (for the default
        model [x'' m/s^2, x' m/s, x m, 1]), or (p, m) for a model of p channels; f: force
        along the direction, N (or (p,)). Returns the
        :class:`FilterStep` of the last block used (also kept in :attr:`last`), None before the
        first. Raises SampleRejected('non_finite_output') for a non-finite t, h or f and
        SampleRejected('time_backwards') when t is older than the previous row; the state is
        then untouched and :attr:`rejected` counts it.
        """
        channels, m = self.model.channels, self.model.size
        h = np.array(h, dtype=float).reshape(-1, m) if np.size(h) == channels * m \
            else np.array(h, dtype=float)
        if h.shape != (channels, m):
            raise ValueError(f"environment filter: regressor h has shape {h.shape}; expected "
                             f"({channels}, {m}) = {list(self.model.regressor_labels)}")
        forces = np.array(f, dtype=float).reshape(channels)
        t = float(t)
        code = filter_update(self.records, t, h, forces)
        if code == UPDATED:
            step = self._step(self._text)
            self._text = ""
            self._last, self._last_key = step, (self._resets, self.samples)
            return step
        if code != ADDED:
            raise self.refusal(code, t, h, forces)
        return self.last

    @staticmethod
    def _project(theta, P, excited, nonnegative=(True, True, True, False)) -> list[float]:
        """:func:`filter_project` on plain sequences: theta (m,), P (m, m) or (m*m,) row-major,
        excited and nonnegative flags (m,); returns the projected theta."""
        th = np.array(theta, dtype=float)
        m = len(th)
        filter_project(th, np.array(P, dtype=float).reshape(m, m),
                       np.array(excited, dtype=np.bool_), np.array(nonnegative, dtype=np.bool_))
        return th.tolist()
