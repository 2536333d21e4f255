"""Tests of the environment-parameter filter against outside references.

References used: filterpy's KalmanFilter (reference implementation), numpy.linalg.lstsq and
scipy.optimize.lsq_linear (batch least squares), scipy.stats.chi2 (chi-square bounds). The
motions are invented (a Marten arm pushing our own drawers and carts); the expected numbers come
from the references, never from this package.
"""
from __future__ import annotations

import numpy as np
import pytest
from filterpy.kalman import KalmanFilter
from scipy.optimize import lsq_linear
from scipy.stats import chi2

from interaction_estimator.core.environment import (
    PARAMETER_NAMES,
    PARAMETER_UNITS,
    EnvironmentFilter,
)
from interaction_estimator.core.samples import SampleRejected
from interaction_estimator.core.settings import Settings, SettingsError

# every row its own block, the noise level fixed, no bounds: the plain linear-Gaussian update
PLAIN = {
    "filter.update_interval": 0.0,
    "filter.learn_noise": False,
    "filter.nonnegative": False,
    "filter.change_threshold": 1e8,
    "filter.correlation_correction": False,
    "filter.model_error": 0.0,
}
DIFFUSE = [1e4, 1e5, 1e6, 1e5]   # prior standard deviations far wider than any object


def motion(t: np.ndarray, amplitudes=(0.04, 0.015), freqs=(0.6, 1.9), offset=0.0):
    """Invented drawer motion, a sum of sines: x (m), x' (m/s), x'' (m/s^2), analytically."""
    x = np.full_like(t, offset)
    v = np.zeros_like(t)
    a = np.zeros_like(t)
    for amp, fr in zip(amplitudes, freqs, strict=True):
        w = 2.0 * np.pi * fr
        x += amp * np.sin(w * t)
        v += amp * w * np.cos(w * t)
        a -= amp * w * w * np.sin(w * t)
    return x, v, a


def rows(x, v, a):
    return np.column_stack([a, v, x, np.ones_like(x)])


def run(flt: EnvironmentFilter, t, H, f):
    return [flt.update(t[k], H[k], f[k]) for k in range(len(t))]


def block_means(t, H, f, block):
    """Means over consecutive blocks as the filter forms them: a block closes at the first row
    at least ``block`` s after the block's first row."""
    out_t, out_h, out_f = [], [], []
    start = 0
    for k in range(len(t)):
        if t[k] - t[start] >= block:
            out_t.append(t[start:k + 1].mean())
            out_h.append(H[start:k + 1].mean(axis=0))
            out_f.append(f[start:k + 1].mean())
            start = k + 1
    return np.array(out_t), np.array(out_h), np.array(out_f)


def test_interface_names():
    # Contract of the brief / DESIGN.md section 3 (no outside source): names and SI units.
    assert PARAMETER_NAMES == ("mass", "damping", "stiffness", "static_force")
    assert PARAMETER_UNITS == ("kg", "N·s/m", "N/m", "N")


def test_equals_filterpy_kalman_filter_with_a_stationary_object():
    rng = np.random.default_rng(11)
    n = 400
    t = np.cumsum(rng.uniform(0.5e-3, 3e-3, n))  # irregular intervals, s
    H = np.column_stack([rng.normal(0, 2.0, n), rng.normal(0, 0.3, n), rng.normal(0, 0.05, n),
                         np.ones(n)])
    theta_true = np.array([2.5, 15.0, 300.0, 4.0])
    f = H @ theta_true + rng.normal(0, 0.7, n)
    mean0 = [1.0, 5.0, 100.0, 0.0]
    std0 = [3.0, 20.0, 400.0, 10.0]
    r_std = 0.8
    flt = EnvironmentFilter(Settings({**PLAIN, "filter.initial_mean": mean0,
                                      "filter.initial_std": std0,
                                      "filter.measurement_std": r_std}))
    # Reference: filterpy.kalman.KalmanFilter (R. Labbe, filterpy 2.0), F = I, Q = 0 (nothing
    # forgotten), R fixed, h_k the measurement matrix of step k.
    kf = KalmanFilter(dim_x=4, dim_z=1)
    kf.x = np.array(mean0, dtype=float).reshape(4, 1)
    kf.P = np.diag(np.square(std0))
    kf.F = np.eye(4)
    kf.Q = np.zeros((4, 4))
    kf.R = np.array([[r_std ** 2]])
    for k in range(n):
        kf.predict()
        kf.update(np.array([[f[k]]]), H=H[k].reshape(1, 4))
        step = flt.update(t[k], H[k], f[k])
        np.testing.assert_allclose(step.theta, kf.x.ravel(), rtol=1e-8, atol=1e-9)
        np.testing.assert_allclose(step.std, np.sqrt(np.diag(kf.P)), rtol=1e-7)


def test_blocks_equal_batch_least_squares_of_the_block_means():
    # With a diffuse prior the estimate is the least-squares fit of every block mean so far
    # (reference: numpy.linalg.lstsq on block means made here), and the blocks are formed by
    # time: the same data at 1 kHz and 250 Hz give the same estimate within the noise.
    rng = np.random.default_rng(5)
    theta = np.array([4.0, 12.0, 150.0, 3.0])
    estimates = {}
    for rate in (1000.0, 250.0):
        t = np.arange(0.0, 20.0, 1.0 / rate)
        x, v, a = motion(t)
        H = rows(x, v, a)
        f = H @ theta + rng.normal(0, 0.5, len(t))
        flt = EnvironmentFilter(Settings({**PLAIN, "filter.update_interval": 0.1,
                                          "filter.initial_std": DIFFUSE}))
        steps = run(flt, t, H, f)
        _, Hb, fb = block_means(t, H, f, 0.1)
        ref, *_ = np.linalg.lstsq(Hb, fb, rcond=None)
        assert flt.samples == len(fb)
        np.testing.assert_allclose(steps[-1].theta, ref, rtol=1e-6, atol=1e-6)
        estimates[rate] = steps[-1].theta
    np.testing.assert_allclose(estimates[1000.0], estimates[250.0], rtol=0.03)


def test_learned_noise_is_the_batch_residual_variance():
    # The noise of a block mean, learned from the residuals: the unbiased residual variance of
    # the least-squares fit, SSE / (n - m) (e.g. Seber and Lee, Linear Regression Analysis,
    # 2003, 3.3); reference numpy.
    rng = np.random.default_rng(2)
    t = np.arange(0.0, 30.0, 1e-3)
    x, v, a = motion(t)
    H = rows(x, v, a)
    f = H @ np.array([2.0, 8.0, 90.0, 1.0]) + rng.normal(0, 1.5, len(t))
    s = Settings({"filter.update_interval": 0.05, "filter.initial_std": DIFFUSE,
                  "filter.measurement_std": 2.0, "filter.nonnegative": False,
                  "filter.change_threshold": 1e8})
    flt = EnvironmentFilter(s)
    run(flt, t, H, f)
    _, Hb, fb = block_means(t, H, f, 0.05)
    ref, *_ = np.linalg.lstsq(Hb, fb, rcond=None)
    sse = float(np.sum((fb - Hb @ ref) ** 2))
    n = len(fb)
    expected = sse / (n - 4)
    assert flt.measurement_var == pytest.approx(expected, rel=1e-3)
    # and it is the true variance of a 50-sample mean, inside the chi-square interval
    # (scipy.stats.chi2) of n - 4 degrees of freedom
    true_var = 1.5 ** 2 / 50
    lo, hi = chi2.ppf([0.0005, 0.9995], n - 4) / (n - 4)
    assert lo < sse / (n - 4) / true_var < hi


@pytest.mark.parametrize("seed", range(4))
def test_nis_inside_chi_square_interval_on_its_own_model(seed):
    # Consistency of a filter on data from its own model: the NIS averaged over the window lies
    # inside its two-sided 95 % chi-square interval (Bar-Shalom, Li and Kirubarajan 2001, 5.4),
    # and the bounds are scipy's.
    rng = np.random.default_rng(100 + seed)
    t = np.arange(0.0, 20.0, 1e-3)
    x, v, a = motion(t)
    H = rows(x, v, a)
    f = H @ np.array([3.0, 20.0, 400.0, 5.0]) + rng.normal(0, 0.5, len(t))
    # white noise, and the filter told so (no correlation correction): the plain interval
    flt = EnvironmentFilter(Settings({"filter.nis_time": 10.0,
                                      "filter.correlation_correction": False}))
    step = run(flt, t, H, f)[-1]
    n = 100   # 10 s of 0.1 s blocks
    lo, hi = chi2.ppf(0.025, n) / n, chi2.ppf(0.975, n) / n
    assert step.nis_bounds == pytest.approx((lo, hi), rel=1e-9)
    assert lo - 0.1 < step.nis_average < hi + 0.1


@pytest.mark.parametrize("lags", [0, 3, 10])
def test_nis_interval_of_correlated_innovations_holds_95_percent(lags):
    # Innovations correlated over `lags` blocks with the Bartlett weights 1 - k / (lags + 1):
    # exactly the autocorrelation of a moving sum of lags + 1 white values (an MA(lags) process;
    # Box and Jenkins, Time Series Analysis, 1970, ch. 3). Simulated here, the mean of n blocks'
    # NIS leaves the table's interval on each side in about 2.5 % of windows, as a 95 % interval
    # must; the white interval (lags = 0, scipy.stats.chi2) is left far more often once lags > 0.
    from interaction_estimator.core.environment import nis_bounds_table
    rng = np.random.default_rng(40 + lags)
    n, windows = 50, 4000
    white = rng.normal(0.0, 1.0, (windows, n + lags))
    y = np.lib.stride_tricks.sliding_window_view(white, lags + 1, axis=1).sum(axis=2)
    mean_nis = np.mean(y ** 2 / (lags + 1), axis=1)       # NIS = y^2 / var(y)
    table = nis_bounds_table(n, 1, lags)
    lo, hi = table["lower"][n], table["upper"][n]
    below, above = np.mean(mean_nis < lo), np.mean(mean_nis > hi)
    # binomial sampling error of 4000 windows: +/- 0.5 % (1 sigma 0.25 %); the chi-square match
    # of the variance (Satterthwaite 1946) is an approximation, lightest in the lower tail when
    # few blocks are independent (lags 10: 0.9 % below, 3.0 % above, measured): 0.5-5 % per side
    assert 0.005 <= below <= 0.05 and 0.005 <= above <= 0.05, (below, above)
    white_lo, white_hi = chi2.ppf([0.025, 0.975], n) / n
    if lags == 0:
        assert (lo, hi) == pytest.approx((white_lo, white_hi), rel=1e-9)
    else:
        assert np.mean((mean_nis < white_lo) | (mean_nis > white_hi)) > 0.15


def test_constant_velocity_push_excites_stiffness_only():
    # A push at constant speed into a spring: x ramps, x' is constant, x'' is zero. The data
    # determine the stiffness; mass (x'' = 0) and damping (collinear with the constant static
    # force) stay undetermined and are neither excited nor converged. Reference for the
    # stiffness: numpy lstsq on x and 1 (the damping absorbed into the constant).
    rng = np.random.default_rng(4)
    t = np.arange(0.0, 6.0, 1e-3)
    x = 0.05 * t
    H = rows(x, np.full_like(t, 0.05), np.zeros_like(t))
    f = H @ np.array([5.0, 30.0, 38.0, 2.0]) + rng.normal(0, 0.3, len(t))
    step = run(EnvironmentFilter(Settings()), t, H, f)[-1]
    ref, *_ = np.linalg.lstsq(np.column_stack([x, np.ones_like(x)]), f, rcond=None)
    assert step.theta[2] == pytest.approx(ref[0], rel=0.01)
    assert list(step.excited) == [False, False, True, False]
    assert list(step.converged) == [False, False, True, False]


def test_a_zero_stiffness_converges_to_about_zero():
    # A cart without a spring: the stiffness' truth is 0; judged by what it does to the force it
    # converges (its std small against the value whose force would be 5 % of the RMS force),
    # and the estimate is within 3 std of 0 and never negative.
    rng = np.random.default_rng(8)
    t = np.arange(0.0, 20.0, 1e-3)
    x, v, a = motion(t, amplitudes=(0.1, 0.03), freqs=(0.4, 1.3))
    H = rows(x, v, a)
    f = H @ np.array([12.0, 25.0, 0.0, 6.0]) + rng.normal(0, 0.5, len(t))
    step = run(EnvironmentFilter(Settings()), t, H, f)[-1]
    assert step.converged[2] and step.excited[2]
    assert 0.0 <= step.theta[2] <= 3.0 * step.std[2]
    assert step.converged.all()


def test_nonnegativity_is_the_bounded_least_squares_solution():
    # A drawer with zero damping and noisy data that pull the damping negative. Reference: the
    # bounded least-squares fit of the same block means, scipy.optimize.lsq_linear (the
    # minimizer of the same quadratic cost subject to the bounds).
    rng = np.random.default_rng(9)
    t = np.arange(0.0, 5.0, 1e-3)
    x, v, a = motion(t)
    H = rows(x, v, a)
    f = H @ np.array([3.0, 0.0, 60.0, 1.0]) + rng.normal(0, 3.0, len(t))
    flt = EnvironmentFilter(Settings({"filter.initial_std": DIFFUSE,
                                      "filter.change_threshold": 1e8}))
    step = run(flt, t, H, f)[-1]
    _, Hb, fb = block_means(t, H, f, 0.1)
    free, *_ = np.linalg.lstsq(Hb, fb, rcond=None)
    ref = lsq_linear(Hb, fb, bounds=([0, 0, 0, -np.inf], [np.inf] * 4), method="bvls",
                     tol=1e-12)
    assert free[1] < 0.0 and step.theta[1] >= 0.0
    np.testing.assert_allclose(step.theta, ref.x, rtol=1e-4, atol=1e-4)


@pytest.mark.parametrize("seed", range(10))
def test_projection_is_the_bounded_least_squares_solution(seed):
    # Damping and stiffness both negative, with correlated uncertainty: the multi-constraint
    # path, where a bound may bind or, once another binds, no longer be needed. Reference: the
    # P^-1-weighted projection onto mass, damping, stiffness >= 0 is the bounded least-squares
    # problem min |L^T (x - theta)|^2 with P^-1 = L L^T (Simon and Chia 2002), solved by
    # scipy.optimize.lsq_linear.
    rng = np.random.default_rng(seed)
    G = rng.normal(size=(4, 4)) * np.array([1.0, 1.0, 10.0, 2.0])[:, None]
    P = G @ G.T + np.diag([0.5, 0.5, 50.0, 2.0])
    theta = np.array([2.0, -0.8, -30.0, 3.0])
    out = EnvironmentFilter._project(theta.tolist(), P.ravel().tolist(), (True,) * 4)
    L = np.linalg.cholesky(np.linalg.inv(P))
    ref = lsq_linear(L.T, L.T @ theta, bounds=([0, 0, 0, -np.inf], [np.inf] * 4),
                     method="bvls", tol=1e-12)
    np.testing.assert_allclose(out, ref.x, rtol=1e-9, atol=1e-9)


def test_a_changed_object_is_detected_and_estimated_again():
    # A drawer whose damping doubles (a brake engages) at t = 10 s: detected (CUSUM of the NIS,
    # Page 1954) within 1 s, no alarm before, and 3 s after the change the estimate is the
    # least-squares fit of the data after the change (reference numpy lstsq on its block
    # means) and within 5 % of the new damping.
    rng = np.random.default_rng(13)
    t = np.arange(0.0, 16.0, 1e-3)
    x, v, a = motion(t, amplitudes=(0.05, 0.02), freqs=(0.7, 1.7))
    H = rows(x, v, a)
    theta_a = np.array([3.0, 20.0, 200.0, 2.0])
    theta_b = theta_a * np.array([1.0, 2.0, 1.0, 1.0])
    jump = t >= 10.0
    f = np.where(jump, H @ theta_b, H @ theta_a) + rng.normal(0, 0.5, len(t))
    flt = EnvironmentFilter(Settings())
    steps = run(flt, t, H, f)
    declared = [k for k, s in enumerate(steps) if s is not None and s.change
                and (k == 0 or steps[k - 1] is not s)]
    k_jump = int(np.argmax(jump))
    assert not [k for k in declared if k < k_jump]
    after = [k for k in declared if k >= k_jump]
    assert after and t[after[0]] - 10.0 < 1.0
    assert "object changed" in steps[after[0]].change
    k3 = int(np.searchsorted(t, 13.0))
    assert steps[k3].theta[1] == pytest.approx(40.0, rel=0.05)
    assert steps[-1].converged.all()
    _, Hb, fb = block_means(t[k_jump:], H[k_jump:], f[k_jump:], 0.1)
    ref, *_ = np.linalg.lstsq(Hb, fb, rcond=None)
    np.testing.assert_allclose(steps[-1].theta, ref, rtol=0.01, atol=0.05)


@pytest.mark.parametrize("bad, name", [
    ((float("nan"), [0.1, 0.2, 0.01, 1.0], 3.0), "time t"),
    ((0.002, [0.1, float("inf"), 0.01, 1.0], 3.0), "h[1]"),
    ((0.002, [0.1, 0.2, 0.01, 1.0], float("nan")), "force f"),
])
def test_non_finite_input_is_rejected_and_state_untouched(bad, name):
    flt = EnvironmentFilter(Settings({"filter.update_interval": 0.0}))
    flt.update(0.0, np.array([0.1, 0.2, 0.01, 1.0]), 3.0)
    flt.update(0.001, np.array([-0.1, 0.1, 0.012, 1.0]), 2.0)
    before = (flt.theta, flt.covariance, flt.measurement_var, flt.samples, flt.last)
    with pytest.raises(SampleRejected) as err:
        flt.update(bad[0], np.array(bad[1]), bad[2])
    # Contract of samples.SampleRejected (project rule: bad samples counted, never dropped).
    assert err.value.reason == "non_finite_output"
    assert name in str(err.value)
    assert flt.rejected == 1
    np.testing.assert_array_equal(flt.theta, before[0])
    np.testing.assert_array_equal(flt.covariance, before[1])
    assert (flt.measurement_var, flt.samples, flt.last) == before[2:]
    # The next good sample is processed normally.
    assert flt.update(0.002, np.array([0.0, 0.1, 0.013, 1.0]), 2.5).samples == 3


def test_time_going_backwards_is_rejected():
    flt = EnvironmentFilter(Settings({"filter.update_interval": 0.0}))
    flt.update(1.0, np.array([0.1, 0.2, 0.01, 1.0]), 3.0)
    with pytest.raises(SampleRejected) as err:
        flt.update(0.5, np.array([0.1, 0.2, 0.01, 1.0]), 3.0)
    assert err.value.reason == "time_backwards" and "0.5" in str(err.value)
    assert flt.rejected == 1 and flt.samples == 1


@pytest.mark.parametrize("values, pieces", [
    ({"filter.initial_std": [1.0, 1.0, -5.0, 1.0]}, ["filter.initial_std[2]", "-5.0", "[1e-09"]),
    ({"filter.measurement_std": -2.0}, ["filter.measurement_std", "-2.0", "[1e-06, 1e+06]"]),
    ({"filter.initial_mean": [0.0] * 5}, ["filter.initial_mean", "5 numbers", "4 numbers"]),
    ({"filter.change_threshold": 0.0}, ["filter.change_threshold", "0.0", "(0, 1e+09)"]),
    ({"filter.update_interval": 20.0}, ["filter.update_interval", "20.0", "[0, 10]"]),
    ({"filter.nis_time": 0.0}, ["filter.nis_time", "0.0", "[0.1, 3600]"]),
])
def test_out_of_range_settings_are_refused_with_name_value_and_range(values, pieces):
    # Project rule (developer guide): every user error names the value and what is expected.
    with pytest.raises(SettingsError) as err:
        Settings(values)
    for piece in pieces:
        assert piece in str(err.value)


@pytest.mark.parametrize("old, new", [
    ("filter.nis_window", "filter.nis_time"),
    ("filter.matching_window", "filter.learn_noise"),
    ("filter.process_std", "filter.change_threshold"),
    ("filter.converged_std", "filter.converged_fraction"),
    ("filter.excitation_min", "filter.excited_fraction"),
])
def test_retired_settings_are_refused_naming_their_replacement(old, new):
    # Issue 17, bad input: a setting in samples (or a threshold in kg, N/m) that is gone is
    # refused with a message that names what replaces it, never read with a new meaning.
    with pytest.raises(SettingsError) as err:
        Settings({old: 1})
    assert old in str(err.value) and new in str(err.value)


def test_negative_prior_refused_when_nonnegative():
    # Cross-setting rule of this module (no outside source): a prior outside the constraint.
    with pytest.raises(SettingsError) as err:
        EnvironmentFilter(Settings({"filter.initial_mean": [1.0, -3.0, 0.0, 0.0]}))
    assert "filter.initial_mean[1]" in str(err.value) and "-3.0" in str(err.value)
    assert ">= 0" in str(err.value)
    EnvironmentFilter(Settings({"filter.initial_mean": [1.0, -3.0, 0.0, 0.0],
                                "filter.nonnegative": False}))  # allowed without the constraint


def test_restart_reset_and_runtime_settings():
    # Interface contract of the brief (no outside source).
    t = np.arange(0.0, 3.0, 1e-3)
    x, v, a = motion(t)
    H = rows(x, v, a)
    f = H @ np.array([3.0, 20.0, 400.0, 5.0])
    s = Settings()
    flt = EnvironmentFilter(s)
    run(flt, t, H, f)
    theta = flt.theta
    # runtime change keeps the estimate
    flt.update_settings(s.replace({"filter.change_threshold": 50.0, "filter.nis_time": 2.0}))
    np.testing.assert_array_equal(flt.theta, theta)
    assert flt.change_threshold == 50.0
    # a restart goes back to the prior and says why at the next block
    flt.restart("new object")
    np.testing.assert_array_equal(flt.theta, s["filter.initial_mean"])
    np.testing.assert_array_equal(flt.covariance, np.diag(np.square(s["filter.initial_std"])))
    steps = [flt.update(3.0 + k * 1e-3, H[k], f[k]) for k in range(200)]
    changes = [st.change for st in steps if st is not None and st.change]
    assert changes and changes[0] == "new object"
    flt.reset("reset")
    assert flt.samples == 0 and flt.last is None


def test_three_channels_equal_batch_least_squares_of_stacked_rows():
    # A model whose measurement is a force vector (three rows per sample, as a 3-D object model
    # has): here an isotropic object, F = m a + d v + k x + f0 (1,1,1) per axis. With every row
    # its own block and a diffuse prior the estimate is the least-squares fit of all rows stacked
    # (reference: numpy.linalg.lstsq), and the NIS bounds count three degrees of freedom per
    # block (scipy.stats.chi2).
    from dataclasses import replace

    from interaction_estimator.core.object_models import ALONG_DIRECTION
    model = replace(ALONG_DIRECTION, name="isotropic_test", channels=3)
    rng = np.random.default_rng(21)
    t = np.arange(0.0, 4.0, 1e-2)
    theta = np.array([2.0, 6.0, 80.0, 1.5])
    rows_all, f_all = [], []
    flt = EnvironmentFilter(Settings({**PLAIN, "filter.learn_noise": True,
                                      "filter.initial_std": DIFFUSE,
                                      "filter.nis_time": 1.0}), model)
    for tk in t:
        H = np.column_stack([rng.normal(0, 1, 3), rng.normal(0, 0.3, 3),
                             rng.normal(0, 0.05, 3), np.ones(3)])
        f = H @ theta + rng.normal(0, 0.2, 3)
        step = flt.update(tk, H, f)
        rows_all.append(H)
        f_all.append(f)
    ref, *_ = np.linalg.lstsq(np.vstack(rows_all), np.concatenate(f_all), rcond=None)
    np.testing.assert_allclose(step.theta, ref, rtol=1e-6, atol=1e-6)
    n = len(t) * 3   # every block in the window (it holds 1 s at 1 ms blocks), three rows each
    assert step.nis_bounds == pytest.approx((chi2.ppf(0.025, n) / n, chi2.ppf(0.975, n) / n))
