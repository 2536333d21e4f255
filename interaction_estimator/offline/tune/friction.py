"""Sensor noise, torque bias and joint friction from free motion (least squares on the observer
residual), and the check that the free-motion residual is what the noise explains."""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ...core.settings import Settings, per_joint
from .common import (
    MIN_FREE_TIME,
    MIN_MOVING_TIME,
    MISMATCH_FLOOR,
    MISMATCH_RATIO,
    MOVING_FACTOR,
    Z95,
    TuneError,
)
from .passes import Trace
from .segments import Segment, runs_of, segments_of

# ============================================================================================
# sensor noise (difference-based)


def difference_noise_std(x: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Noise standard deviation per column of x (N, n) from second differences within the runs of
    ``mask``: for white noise of variance s^2 on a signal smooth over three samples, the second
    difference has variance 6 s^2 (Rice 1984; Gasser et al. 1986). Robust scale: 1.4826 x median
    absolute deviation. NaN for columns with fewer than 10 differences."""
    diffs = [np.diff(x[a:b], n=2, axis=0) for a, b in runs_of(mask) if b - a >= 3]
    if not diffs:
        return np.full(x.shape[1], np.nan)
    d = np.concatenate(diffs)
    if len(d) < 10:
        return np.full(x.shape[1], np.nan)
    med = np.median(d, axis=0)
    mad = np.median(np.abs(d - med), axis=0)
    return 1.482602218505602 * mad / math.sqrt(6.0)


# ============================================================================================
# bias and friction: least squares on the observer residual


@dataclass
class JointFit:
    """Identification of one joint. Units: N·m (N), N·m·s/rad (N·s/m), rad/s (m/s).

    bias (nb,) per bag with bias_ci (nb,) 95 % half-widths; viscous, coulomb with 95 %
    half-widths; friction_identified: from these data (else the base values are kept and
    friction_note says why); residual_std: what the fit leaves; explained_std: what the measured
    sensor noise explains through the observer; effort_noise, velocity_noise: sensor noise;
    moving_time: (s with v > threshold, s with v < -threshold)."""

    name: str
    bias: np.ndarray
    bias_ci: np.ndarray
    viscous: float
    viscous_ci: float
    coulomb: float
    coulomb_ci: float
    friction_identified: bool
    friction_note: str
    residual_std: float
    explained_std: float
    effort_noise: float
    velocity_noise: float
    moving_time: tuple[float, float]
    samples: int


def newey_west_covariance(X: np.ndarray, e: np.ndarray, run_id: np.ndarray,
                          lags: int) -> np.ndarray:
    """Heteroskedasticity and autocorrelation consistent covariance of least-squares
    coefficients (Newey and West, Econometrica 1987; Bartlett weights 1 - l/(L+1)); products
    are taken only within the same run of consecutive samples. X (N, p), e (N,), run_id (N,)."""
    u = X * e[:, None]
    S = u.T @ u
    for lag in range(1, lags + 1):
        same = run_id[lag:] == run_id[:-lag]
        if not same.any():
            break
        G = u[lag:][same].T @ u[:-lag][same]
        S += (1.0 - lag / (lags + 1.0)) * (G + G.T)
    XtX_inv = np.linalg.pinv(X.T @ X)
    return XtX_inv @ S @ XtX_inv


def correlation_lags(e: np.ndarray, run_id: np.ndarray, limit: int) -> int:
    """Newey-West bandwidth: 4 x the first lag at which the residual's autocorrelation (within
    runs) falls below 1/e, between 5 and ``limit`` samples."""
    var = float(e @ e) / max(len(e), 1)
    if var <= 0:
        return 5
    for lag in range(1, limit + 1):
        same = run_id[lag:] == run_id[:-lag]
        if same.sum() < 10:
            return min(max(4 * lag, 5), limit)
        rho = float(e[lag:][same] @ e[:-lag][same]) / (same.sum() * var)
        if rho < 1.0 / math.e:
            return min(max(4 * lag, 5), limit)
    return limit


@dataclass
class FreeData:
    """Free-motion samples of all bags, pooled: bag (K,), run (K,) ids of consecutive runs,
    raw (K, nv), columns (K, 5, nv), velocity (K, nv), dt (K,) s."""

    bag: np.ndarray
    run: np.ndarray
    raw: np.ndarray
    columns: np.ndarray
    velocity: np.ndarray
    dt: np.ndarray


def pool_free(taps: Sequence[Trace], masks: Sequence[np.ndarray]) -> FreeData:
    bags, runs, raw, cols, vel, dts = [], [], [], [], [], []
    run_counter = 0
    for b, (tr, m) in enumerate(zip(taps, masks)):
        dt_all = np.diff(tr.time, prepend=tr.time[0])
        for a, z in runs_of(m):
            k = z - a
            bags.append(np.full(k, b))
            runs.append(np.full(k, run_counter))
            run_counter += 1
            raw.append(tr.raw[a:z])
            cols.append(tr.columns[a:z])
            vel.append(tr.velocity[a:z])
            dts.append(dt_all[a:z])
    if not bags:
        raise TuneError("no free-motion samples")  # callers check first; a defect otherwise
    return FreeData(np.concatenate(bags), np.concatenate(runs), np.concatenate(raw),
                    np.concatenate(cols), np.concatenate(vel), np.concatenate(dts))


def _friction_excitation(v: np.ndarray, dt: np.ndarray, threshold: float) -> tuple[float, float]:
    return float(dt[v > threshold].sum()), float(dt[v < -threshold].sum())


def _least_squares(X: np.ndarray, y: np.ndarray, lower: np.ndarray, run_id: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Bounded linear least squares (scipy.optimize.lsq_linear, BVLS) on the columns of X that
    are not all zero; returns (coefficients (p,) with nan for empty columns, 95 % half-widths
    (p,) from the Newey-West covariance, residual (K,))."""
    from scipy.optimize import lsq_linear

    present = X.any(axis=0)
    Xp, lo = X[:, present], lower[present]
    theta = np.full(X.shape[1], np.nan)
    half = np.full(X.shape[1], np.nan)
    if not present.any():
        return theta, half, y.copy()
    sol = lsq_linear(Xp, y, bounds=(lo, np.full(len(lo), np.inf)), method="bvls")
    e = y - Xp @ sol.x
    cov = newey_west_covariance(Xp, e, run_id, correlation_lags(e, run_id, 2000))
    theta[present] = sol.x
    half[present] = Z95 * np.sqrt(np.maximum(np.diag(cov), 0.0))
    return theta, half, e


def fit_joint(j: int, name: str, data: FreeData, n_bags: int, motor: bool,
              base_friction: tuple[float, float], threshold: float,
              noise: tuple[float, float]) -> JointFit:
    """Bias per bag and (motor side, when the joint moved both ways) friction of joint j.

    Regression ``r_raw = b O(1) + f_v O(v) + f_c O(tanh(v/eps))`` (O: the observer, see
    :class:`_ObserverTap`), friction >= 0. A joint whose friction cannot be identified keeps
    the base friction and gets its bias alone; the residual level used to check the model
    always comes from the fit with friction terms (motor side), so that friction the data
    cannot pin down is not mistaken for a wrong model."""
    cols = data.columns[:, :, j]           # (K, 5): O(1), O(v), O(tanh), probe_v, probe_tau
    fv0, fc0 = base_friction
    y = data.raw[:, j] + fv0 * cols[:, 1] + fc0 * cols[:, 2]   # residual with no friction removed
    moving = _friction_excitation(data.velocity[:, j], data.dt, threshold)
    identify = motor and min(moving) >= MIN_MOVING_TIME
    note = ""
    if not motor:
        note = "link-side efforts: no friction to identify"
    elif not identify:
        note = (f"moved only {moving[0]:.2f} s forward and {moving[1]:.2f} s backward faster "
                f"than {threshold:g}; needs {MIN_MOVING_TIME:g} s each way")
    onehot = (data.bag[:, None] == np.arange(n_bags)[None, :]).astype(float)
    X_bias = onehot * cols[:, 0:1]
    free_bias = np.full(n_bags, -np.inf)
    if motor:
        X = np.column_stack([X_bias, cols[:, 1], cols[:, 2]])
        theta, half, e = _least_squares(X, y, np.r_[free_bias, 0.0, 0.0], data.run)
    else:
        theta, half, e = _least_squares(X_bias, y, free_bias, data.run)
    residual = float(np.std(e))
    if identify:
        viscous, coulomb = theta[n_bags], theta[n_bags + 1]
        v_ci, c_ci = half[n_bags], half[n_bags + 1]
        bias, bias_ci = theta[:n_bags], half[:n_bags]
    else:
        y_kept = y - fv0 * cols[:, 1] - fc0 * cols[:, 2]       # keep the base friction
        bias, bias_ci, _ = _least_squares(X_bias, y_kept, free_bias, data.run)
        viscous, coulomb, v_ci, c_ci = fv0, fc0, math.nan, math.nan
    sigma_tau, sigma_v = noise
    explained = math.sqrt(float(np.mean(sigma_v ** 2 * cols[:, 3] ** 2
                                        + sigma_tau ** 2 * cols[:, 4] ** 2)))
    return JointFit(name, bias, bias_ci, float(viscous), float(v_ci), float(coulomb),
                    float(c_ci), identify, note, residual, explained, sigma_tau, sigma_v,
                    moving, int(len(y)))


@dataclass
class Identification:
    """Bias, friction and noise of every joint (model order) and where they came from."""

    joints: list[JointFit]
    effort_noise: float        # N·m, median over joints
    velocity_noise: float      # rad/s, median over joints
    free_segments: list[Segment]
    free_time: float           # s, over all bags

    def bias_of_bag(self, b: int) -> list[float]:
        return [0.0 if not math.isfinite(j.bias[b]) else float(j.bias[b]) for j in self.joints]


def identify(taps: Sequence[Trace], masks: Sequence[np.ndarray], base: Settings,
             joints: Sequence[str]) -> Identification:
    """Bias/friction/noise from the free-motion samples ``masks`` of the tapped traces."""
    data = pool_free(taps, masks)
    motor = base["effort_side"] == "motor"
    eps = base["friction.smoothing_velocity"]
    fv0 = per_joint(base, "friction.viscous", joints)
    fc0 = per_joint(base, "friction.coulomb", joints)
    eff = _pooled_noise([t.effort for t in taps], masks)
    vel = _pooled_noise([t.velocity for t in taps], masks)
    sigma_tau = float(np.nanmedian(eff))
    sigma_v = float(np.nanmedian(vel))
    threshold = max(MOVING_FACTOR * eps, 5.0 * sigma_v)
    fits = [fit_joint(j, name, data, len(taps), motor, (fv0[j], fc0[j]), threshold,
                      (float(eff[j]), float(vel[j])))
            for j, name in enumerate(joints)]
    segs = [s for b, (t, m) in enumerate(zip(taps, masks)) for s in segments_of(b, t.time, m,
                                                                                "free")]
    return Identification(fits, sigma_tau, sigma_v, segs, float(data.dt.sum()))


def _pooled_noise(signals: Sequence[np.ndarray], masks: Sequence[np.ndarray]) -> np.ndarray:
    """Difference-based noise per joint over the free runs of all bags (pooled differences)."""
    x = np.concatenate([s for s in signals])
    m = np.concatenate([np.r_[mk[:-1], False] if len(mk) else mk for mk in masks])
    return difference_noise_std(x, m)


def check_model_fit(ident: Identification, contact_found: bool = True) -> None:
    """Stop when the free-motion residual is far above what the sensor noise explains.

    contact_found: whether the contact monitor found any contact; when it found none, the
    likeliest cause is a bag that starts in contact (the start-up phase then learns the contact
    torque as bias and nothing looks like contact afterwards), and the message says so."""
    bad = [j for j in ident.joints
           if j.residual_std > MISMATCH_RATIO * j.explained_std + MISMATCH_FLOOR]
    if not bad:
        return
    listing = "; ".join(f"{j.name}: {j.residual_std:.3g} left, noise explains "
                        f"{j.explained_std:.3g}" for j in bad)
    spans = ", ".join(f"bag {s.bag + 1} {s.start:.2f}-{s.end:.2f} s"
                      for s in ident.free_segments[:6])
    if not contact_found:
        raise TuneError(
            "no free motion found: the contact monitor saw no contact at all, yet the motion it "
            f"took as free ({spans}) leaves a residual (N·m or N, RMS) more than "
            f"{MISMATCH_RATIO:g} times what the sensor noise explains ({listing}). The bags "
            "probably start in contact (the start-up phase then learns the contact force as "
            "bias), or the URDF does not describe the recorded robot; expected bags that start "
            f"with at least {MIN_FREE_TIME:g} s of the robot moving without touching anything")
    raise TuneError(
        "after removing bias and friction, the free-motion residual (N·m or N, RMS) is more "
        f"than {MISMATCH_RATIO:g} times what the measured sensor noise explains on "
        f"{len(bad)} joint(s) ({listing}). Either the URDF does not describe the robot that "
        f"recorded the bags (masses, inertias, joint list), or the robot was not moving freely "
        f"in the segments taken as free motion ({spans}); expected the recorded robot's URDF "
        "and bags that start with free motion. If the URDF's masses or a tool are off: record "
        "the commissioning motion of `interaction-estimator excitation` (nothing touched) and "
        "run tune again with it after --free-motion (and --tool-frame LINK for a tool the URDF "
        "lacks): the robot's dynamics are then identified and written as a URDF")


