"""Tests of the environment-parameter filter against outside references.

References used: filterpy's KalmanFilter (reference implementation), numpy.linalg.lstsq and
scipy.optimize.lsq_linear (batch least squares), scipy.stats.chi2 (NIS bounds). The motions are
invented (a Marten arm pushing our own drawers and carts); the expected numbers come from the
references, never from this package.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from filterpy.kalman import KalmanFilter
from scipy.optimize import lsq_linear
from scipy.stats import chi2

from interaction_estimator.core.environment import (
    PARAMETER_NAMES,
    PARAMETER_UNITS,
    EnvironmentFilter,
    FilterStep,
)
from interaction_estimator.core.samples import SampleRejected
from interaction_estimator.core.settings import Settings, SettingsError

# Settings that turn every addition off: plain Kalman filter.
PLAIN = {
    "filter.noise_adaptation": "fixed",
    "filter.process_adaptation": "fixed",
    "filter.nonnegative": False,
    "filter.excitation_min": [0.0, 0.0, 0.0, 0.0],
    "filter.change_threshold": 1e8,
}


def motion(t: np.ndarray, amplitudes=(0.04, 0.015), freqs=(0.6, 1.9), offset=0.0):
    """Invented drawer motion, a sum of sines: x (m), x' (m/s), x'' (m/s^2), analytically."""
    x = np.full_like(t, offset)
    v = np.zeros_like(t)
    a = np.zeros_like(t)
    for amp, fr in zip(amplitudes, freqs):
        w = 2.0 * np.pi * fr
        x += amp * np.sin(w * t)
        v += amp * w * np.cos(w * t)
        a -= amp * w * w * np.sin(w * t)
    return x, v, a


def rows(x, v, a):
    return np.column_stack([a, v, x, np.ones_like(x)])


def run(flt: EnvironmentFilter, t, H, f) -> list[FilterStep]:
    return [flt.update(t[k], H[k], f[k]) for k in range(len(t))]


def test_interface_names():
    # Contract of the brief / DESIGN.md section 3 (no outside source): names and SI units.
    assert PARAMETER_NAMES == ("mass", "damping", "stiffness", "static_force")
    assert PARAMETER_UNITS == ("kg", "N·s/m", "N/m", "N")


def test_equals_filterpy_kalman_filter_without_adaptation():
    rng = np.random.default_rng(11)
    n = 600
    t = np.cumsum(rng.uniform(0.5e-3, 3e-3, n))  # irregular intervals, s
    H = np.column_stack([rng.normal(0, 2.0, n), rng.normal(0, 0.3, n), rng.normal(0, 0.05, n),
                         np.ones(n)])
    theta_true = np.array([2.5, 15.0, 300.0, 4.0])
    f = H @ theta_true + rng.normal(0, 0.7, n)
    mean0 = [1.0, 5.0, 100.0, 0.0]
    std0 = [3.0, 20.0, 400.0, 10.0]
    q = np.array([0.2, 1.0, 20.0, 0.5])
    r_std = 0.8
    flt = EnvironmentFilter(Settings({**PLAIN, "filter.initial_mean": mean0,
                                      "filter.initial_std": std0, "filter.process_std": list(q),
                                      "filter.measurement_std": r_std}))
    # Reference: filterpy.kalman.KalmanFilter (R. Labbe, filterpy 2.0), F = I, Q = diag(q^2) dt.
    kf = KalmanFilter(dim_x=4, dim_z=1)
    kf.x = np.array(mean0, dtype=float).reshape(4, 1)
    kf.P = np.diag(np.square(std0))
    kf.F = np.eye(4)
    kf.R = np.array([[r_std ** 2]])
    t_prev = None
    for k in range(n):
        dt = 0.0 if t_prev is None else t[k] - t_prev
        t_prev = t[k]
        kf.Q = np.diag(q ** 2) * dt
        kf.predict()
        kf.update(np.array([[f[k]]]), H=H[k].reshape(1, 4))
        step = flt.update(t[k], H[k], f[k])
        # filterpy is the reference; 1e-10 relative to the scale of each quantity.
        np.testing.assert_allclose(step.theta, kf.x.ravel(), rtol=1e-10, atol=1e-10)
        np.testing.assert_allclose(flt.covariance, kf.P, rtol=1e-10,
                                   atol=1e-10 * np.abs(kf.P).max())
        np.testing.assert_allclose(step.innovation_var, kf.S[0, 0], rtol=1e-10)
        np.testing.assert_allclose(step.innovation, kf.y[0, 0], rtol=1e-10, atol=1e-10)
        assert step.change == ""


def test_zero_process_noise_equals_batch_least_squares():
    rng = np.random.default_rng(5)
    dt = 1e-3
    t = np.arange(3000) * dt
    x, v, a = motion(t)
    H = rows(x, v, a)
    theta_true = np.array([4.0, 25.0, 250.0, -3.0])
    sigma = 0.5
    f = H @ theta_true + rng.normal(0, sigma, len(t))
    flt = EnvironmentFilter(Settings({**PLAIN, "filter.process_std": [0.0] * 4,
                                      "filter.initial_std": [1e5] * 4,
                                      "filter.measurement_std": sigma}))
    last = run(flt, t, H, f)[-1]
    # Recursive least squares = batch least squares for a diffuse prior (Ljung and Soderstrom,
    # Theory and Practice of Recursive Identification, 1983, ch. 2); reference numpy lstsq.
    theta_ls, *_ = np.linalg.lstsq(H, f, rcond=None)
    np.testing.assert_allclose(last.theta, theta_ls, rtol=1e-7)
    # And the covariance is sigma^2 (H^T H)^-1, the least-squares covariance (same source).
    np.testing.assert_allclose(flt.covariance, sigma ** 2 * np.linalg.inv(H.T @ H), rtol=1e-6)
    # Sanity of the data: the estimate is near the truth (same source, 5 sigma).
    assert np.all(np.abs(last.theta - theta_true) < 5 * last.std)


@pytest.mark.parametrize("mode", ["sage_husa", "matching"])
def test_measurement_noise_adaptation_finds_true_variance(mode):
    rng = np.random.default_rng(21)
    dt = 1e-3
    t = np.arange(30000) * dt
    x, v, a = motion(t)
    H = rows(x, v, a)
    sigma = 1.5  # true noise, N; the filter starts from 5 N
    f = H @ np.array([3.0, 20.0, 400.0, 5.0]) + rng.normal(0, sigma, len(t))
    flt = EnvironmentFilter(Settings({"filter.noise_adaptation": mode,
                                      "filter.measurement_std": 5.0,
                                      "filter.fading_factor": 0.999,
                                      "filter.matching_window": 2000}))
    steps = run(flt, t, H, f)
    # Reference: the variance of the synthetic white noise itself (numpy), within 10 %.
    true_var = sigma ** 2
    assert abs(flt.measurement_var - true_var) < 0.1 * true_var
    late = np.array([s.measurement_var for s in steps[-10000:]])
    assert np.all(np.abs(late - true_var) < 0.1 * true_var)
    # R is a variance: positive at every step (definition, no outside source).
    assert min(s.measurement_var for s in steps) > 0.0


@pytest.mark.parametrize("mode", ["sage_husa", "matching"])
def test_measurement_noise_floor_keeps_r_positive(mode):
    # Noise-free data drive the estimate of R towards zero; the floor holds it.
    dt = 1e-3
    t = np.arange(4000) * dt
    x, v, a = motion(t)
    H = rows(x, v, a)
    f = H @ np.array([3.0, 20.0, 400.0, 5.0])
    floor = 0.05
    flt = EnvironmentFilter(Settings({"filter.noise_adaptation": mode,
                                      "filter.measurement_std_floor": floor,
                                      "filter.fading_factor": 0.99,
                                      "filter.matching_window": 100}))
    steps = run(flt, t, H, f)
    r = np.array([s.measurement_var for s in steps])
    # A variance must stay positive (definition); the floor is our setting, floor^2 in N^2.
    assert np.all(r >= floor ** 2 * (1 - 1e-12))
    assert r[-1] == pytest.approx(floor ** 2)  # reached: the data have no noise at all
    assert np.isfinite(steps[-1].theta).all()


def simulate_own_model(rng, t, H, mean0, std0, q, r_std):
    """Data from the filter's model: theta0 ~ N(mean0, diag(std0^2)), random walk, white noise."""
    theta = rng.normal(mean0, std0)
    f = np.empty(len(t))
    t_prev = t[0]
    for k in range(len(t)):
        theta = theta + rng.normal(0.0, q * math.sqrt(t[k] - t_prev))
        t_prev = t[k]
        f[k] = H[k] @ theta + rng.normal(0.0, r_std)
    return f


@pytest.mark.parametrize("case", ["all_excited", "mass_not_excited"])
def test_nis_inside_chi_square_interval_on_own_model(case):
    rng = np.random.default_rng(1234)
    dt = 1e-3
    n = 6000
    t = np.arange(n) * dt
    if case == "all_excited":
        x, v, a = motion(t)
    else:  # tiny accelerations: the mass is a consider parameter (Schmidt-Kalman gain)
        x, v, a = motion(t, amplitudes=(0.04, 0.0), freqs=(0.05, 1.0))
    H = rows(x, v, a)
    mean0 = np.array([3.0, 20.0, 300.0, 5.0])
    std0 = np.array([1.0, 5.0, 50.0, 2.0])
    q = np.array([0.05, 0.5, 5.0, 0.5])
    r_std = 0.5
    f = simulate_own_model(rng, t, H, mean0, std0, q, r_std)
    flt = EnvironmentFilter(Settings({
        "filter.noise_adaptation": "fixed", "filter.nonnegative": False,
        "filter.initial_mean": list(mean0), "filter.initial_std": list(std0),
        "filter.process_std": list(q), "filter.measurement_std": r_std,
        "filter.nis_window": 1000, "filter.change_threshold": 1e8}))
    steps = run(flt, t, H, f)
    if case == "mass_not_excited":
        assert not any(s.excited[0] for s in steps)
    nis = np.array([s.nis for s in steps])
    # Bar-Shalom, Li and Kirubarajan (2001), sec. 5.4: n * mean(NIS) ~ chi2(n) for a consistent
    # filter; two-sided 95 % interval from scipy.stats.chi2.
    lo, hi = chi2.ppf([0.025, 0.975], n) / n
    assert lo < nis.mean() < hi
    # The filter's own window bounds are those of scipy.stats.chi2 for 1000 samples.
    w_lo, w_hi = chi2.ppf([0.025, 0.975], 1000) / 1000
    assert steps[-1].nis_bounds == pytest.approx((w_lo, w_hi), rel=1e-12)
    assert steps[-1].nis_average == pytest.approx(nis[-1000:].mean(), rel=1e-9)
    # Its early bounds use the number of samples seen so far (same source, 10 samples).
    assert steps[9].nis_bounds == pytest.approx(tuple(chi2.ppf([0.025, 0.975], 10) / 10))


def test_constant_velocity_leaves_mass_at_its_prior():
    # A cart pushed at constant speed: x'' is sensor noise only, so the mass is not
    # identifiable (its regressor column is ~0; Ljung 1999, System Identification, sec. 13.2,
    # persistence of excitation).
    rng = np.random.default_rng(3)
    dt = 1e-3
    t = np.arange(5000) * dt
    v = np.full_like(t, 0.2)
    x = 0.2 * t
    a = rng.normal(0.0, 0.005, len(t))
    H = rows(x, v, a)
    theta_true = np.array([6.0, 12.0, 30.0, 4.0])
    f = H @ theta_true + rng.normal(0, 0.3, len(t))
    mean0 = [1.5, 0.0, 0.0, 0.0]
    std0 = [10.0, 100.0, 1000.0, 100.0]
    flt = EnvironmentFilter(Settings({"filter.initial_mean": mean0, "filter.initial_std": std0}))
    steps = run(flt, t, H, f)
    assert not any(s.excited[0] for s in steps)
    assert not any(s.converged[0] for s in steps)
    assert all(s.theta[0] == 1.5 for s in steps)  # exactly the prior, never updated
    assert steps[-1].std[0] >= 10.0  # prior std (plus random walk), never reduced
    assert steps[-1].excited[1:].all()
    # The excited parameters are still estimated: compare with numpy lstsq on the x', x, 1
    # columns (the mass column carries no information), within 5 % of the lstsq value.
    theta_ls, *_ = np.linalg.lstsq(H[:, 1:], f - H[:, 0] * 1.5, rcond=None)
    np.testing.assert_allclose(steps[-1].theta[1:], theta_ls, rtol=0.05)


def test_stationary_push_leaves_stiffness_and_damping_at_their_priors():
    # Pushing a blocked crate: x, x', x'' stay ~0 (noise only); only the static force is seen.
    rng = np.random.default_rng(4)
    dt = 1e-3
    t = np.arange(3000) * dt
    a = rng.normal(0.0, 0.005, len(t))
    v = rng.normal(0.0, 0.002, len(t))
    x = rng.normal(0.0, 1e-4, len(t))
    H = rows(x, v, a)
    f = H @ np.array([5.0, 30.0, 800.0, 12.0]) + rng.normal(0, 0.3, len(t))
    mean0 = [2.0, 10.0, 100.0, 0.0]
    flt = EnvironmentFilter(Settings({"filter.initial_mean": mean0}))
    steps = run(flt, t, H, f)
    last = steps[-1]
    for i in range(3):  # mass, damping, stiffness (no outside source: definition of the gate)
        assert not any(s.excited[i] for s in steps)
        assert not any(s.converged[i] for s in steps)
        assert all(s.theta[i] == mean0[i] for s in steps)
    assert last.excited[3] and last.converged[3]
    # Reference for the static force: the sample mean of f minus the (known) prior terms,
    # numpy; within 3 standard errors.
    expected = np.mean(f - H[:, :3] @ np.array(mean0[:3]))
    assert abs(last.theta[3] - expected) < 3 * 0.3 / math.sqrt(len(t)) + 0.05


def test_nonnegativity_holds_when_data_pull_damping_negative():
    # A motorized cart that pushes back: its "damping" is negative, physically an active object.
    rng = np.random.default_rng(8)
    dt = 1e-3
    t = np.arange(4000) * dt
    x, v, a = motion(t, amplitudes=(0.05, 0.02), freqs=(0.8, 2.1))
    H = rows(x, v, a)
    f = H @ np.array([2.0, -4.0, 150.0, 3.0]) + rng.normal(0, 0.2, len(t))
    base = {"filter.process_std": [0.0] * 4, "filter.initial_std": [1e4] * 4,
            "filter.noise_adaptation": "fixed", "filter.measurement_std": 0.2,
            "filter.change_threshold": 1e8, "filter.excitation_min": [0.0] * 4}
    free = run(EnvironmentFilter(Settings({**base, "filter.nonnegative": False})), t, H, f)
    assert free[-1].theta[1] < -3.0  # the data do pull damping negative
    steps = run(EnvironmentFilter(Settings({**base, "filter.nonnegative": True})), t, H, f)
    theta = np.array([s.theta for s in steps])
    assert theta[:, :3].min() >= 0.0  # the constraint of Simon (2010), at every step
    # Reference: bounded least squares, scipy.optimize.lsq_linear with mass, damping and
    # stiffness >= 0. With zero process noise and a diffuse prior the P^-1-weighted projection
    # of the recursive estimate equals the constrained least-squares solution (Simon and Chia
    # 2002); early transient projections leave an effect far below this tolerance.
    ref = lsq_linear(H, f, bounds=([0, 0, 0, -np.inf], [np.inf] * 4), method="bvls")
    assert ref.x[1] == 0.0  # the bound is active in the reference too
    np.testing.assert_allclose(theta[-1], ref.x, rtol=1e-6, atol=1e-9)


@pytest.mark.parametrize("seed", range(10))
def test_projection_is_the_bounded_least_squares_solution(seed):
    # Damping and stiffness both negative after an update, with correlated uncertainty: the
    # multi-constraint path, where a bound may bind or, once another binds, no longer be needed.
    # Reference: the P^-1-weighted projection onto mass, damping, stiffness >= 0 is the bounded
    # least-squares problem min |L^T (x - theta)|^2 with P^-1 = L L^T (Simon and Chia 2002),
    # solved by scipy.optimize.lsq_linear.
    rng = np.random.default_rng(seed)
    G = rng.normal(size=(4, 4)) * np.array([1.0, 1.0, 10.0, 2.0])[:, None]
    P = G @ G.T + np.diag([0.5, 0.5, 50.0, 2.0])
    theta = np.array([2.0, -0.8, -30.0, 3.0])
    out = EnvironmentFilter._project(theta.tolist(), P.ravel().tolist(), (True,) * 4)
    L = np.linalg.cholesky(np.linalg.inv(P))
    ref = lsq_linear(L.T, L.T @ theta, bounds=([0, 0, 0, -np.inf], [np.inf] * 4),
                     method="bvls", tol=1e-12)
    np.testing.assert_allclose(out, ref.x, rtol=1e-9, atol=1e-9)


def test_damping_jump_is_detected_and_recovered():
    # A drawer whose damping doubles (a brake engages) at t = 8 s.
    rng = np.random.default_rng(13)
    dt = 1e-3
    t = np.arange(16000) * dt
    x, v, a = motion(t, amplitudes=(0.05, 0.02), freqs=(0.7, 1.7))
    H = rows(x, v, a)
    theta_a = np.array([3.0, 20.0, 200.0, 2.0])
    theta_b = theta_a * np.array([1.0, 2.0, 1.0, 1.0])
    jump = t >= 8.0
    f = np.where(jump, H @ theta_b, H @ theta_a) + rng.normal(0, 0.5, len(t))
    flt = EnvironmentFilter(Settings({"filter.measurement_std": 0.5}))
    steps = run(flt, t, H, f)
    declared = [k for k, s in enumerate(steps) if s.change]
    k_jump = int(np.argmax(jump))
    # The CUSUM test of Page (1954) on the NIS: no alarm in the 6 s before the jump (after a
    # 2 s start-up), an alarm within 0.5 s after it.
    assert not [k for k in declared if 2000 <= k < k_jump]
    after = [k for k in declared if k >= k_jump]
    assert after and after[0] - k_jump < 500
    assert "CUSUM" in steps[after[0]].change
    # Recovered: the new damping from the data after the jump, reference numpy lstsq on the
    # last 4 s, within 5 %; and the filter's value within 5 % of the truth.
    late = slice(12000, None)
    theta_ls, *_ = np.linalg.lstsq(H[late], f[late], rcond=None)
    assert steps[-1].theta[1] == pytest.approx(theta_ls[1], rel=0.05)
    assert steps[-1].theta[1] == pytest.approx(40.0, rel=0.05)


@pytest.mark.parametrize("bad, name", [
    ((float("nan"), [0.1, 0.2, 0.01, 1.0], 3.0), "time t"),
    ((0.002, [0.1, float("inf"), 0.01, 1.0], 3.0), "h[1]"),
    ((0.002, [0.1, 0.2, 0.01, 1.0], float("nan")), "force f"),
])
def test_non_finite_input_is_rejected_and_state_untouched(bad, name):
    flt = EnvironmentFilter(Settings())
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
    flt = EnvironmentFilter(Settings())
    flt.update(1.0, np.array([0.1, 0.2, 0.01, 1.0]), 3.0)
    with pytest.raises(SampleRejected) as err:
        flt.update(0.5, np.array([0.1, 0.2, 0.01, 1.0]), 3.0)
    assert err.value.reason == "time_backwards" and "0.5" in str(err.value)
    assert flt.rejected == 1 and flt.samples == 1


@pytest.mark.parametrize("values, pieces", [
    ({"filter.process_std": [0.1, -1.0, 0.0, 0.0]},
     ["filter.process_std[1]", "-1.0", "[0, 1e+06]"]),
    ({"filter.initial_std": [1.0, 1.0, -5.0, 1.0]}, ["filter.initial_std[2]", "-5.0", "[1e-09"]),
    ({"filter.measurement_std": -2.0}, ["filter.measurement_std", "-2.0", "[1e-06, 1e+06]"]),
    ({"filter.measurement_std_floor": 0.0}, ["filter.measurement_std_floor", "0.0", "[1e-06"]),
    ({"filter.fading_factor": 1.0}, ["filter.fading_factor", "1.0", "(0, 1)"]),
    ({"filter.fading_factor": 0.0}, ["filter.fading_factor", "0.0", "(0, 1)"]),
    ({"filter.fading_factor": 1.2}, ["filter.fading_factor", "1.2", "(0, 1)"]),
    ({"filter.excitation_min": [0.1, 0.1, 0.1]}, ["filter.excitation_min", "3 numbers",
                                                  "4 numbers"]),
    ({"filter.initial_mean": [0.0] * 5}, ["filter.initial_mean", "5 numbers", "4 numbers"]),
    ({"filter.noise_adaptation": "kalman"}, ["filter.noise_adaptation", "'kalman'",
                                             "'sage_husa'"]),
    ({"filter.change_threshold": 0.0}, ["filter.change_threshold", "0.0", "(0, 1e+09)"]),
    ({"filter.nis_window": 0}, ["filter.nis_window", "0", "[1, 100000]"]),
])
def test_out_of_range_settings_are_refused_with_name_value_and_range(values, pieces):
    # Project rule (developer guide): every user error names the value and what is expected.
    with pytest.raises(SettingsError) as err:
        Settings(values)
    for piece in pieces:
        assert piece in str(err.value)


def test_negative_prior_refused_when_nonnegative():
    # Cross-setting rule of this module (no outside source): a prior outside the constraint.
    with pytest.raises(SettingsError) as err:
        EnvironmentFilter(Settings({"filter.initial_mean": [1.0, -3.0, 0.0, 0.0]}))
    assert "filter.initial_mean[1]" in str(err.value) and "-3.0" in str(err.value)
    assert ">= 0" in str(err.value)
    EnvironmentFilter(Settings({"filter.initial_mean": [1.0, -3.0, 0.0, 0.0],
                                "filter.nonnegative": False}))  # allowed without the constraint


def test_inflate_reset_and_runtime_settings():
    # Interface contract of the brief (no outside source).
    dt = 1e-3
    t = np.arange(500) * dt
    x, v, a = motion(t)
    H = rows(x, v, a)
    f = H @ np.array([3.0, 20.0, 400.0, 5.0])
    s = Settings({"filter.change_inflation": 10.0})
    flt = EnvironmentFilter(s)
    run(flt, t, H, f)
    P = flt.covariance
    flt.inflate("contact regained")
    np.testing.assert_allclose(flt.covariance, 10.0 * P, rtol=1e-12)  # well below the prior
    step = flt.update(0.5, H[-1], f[-1])
    assert step.change == "contact regained"
    assert flt.update(0.501, H[-1], f[-1]).change == ""
    # The prior bounds the inflation: no variance beyond its prior variance.
    for _ in range(20):
        flt.inflate("again")
    assert np.all(np.diag(flt.covariance) <= np.square(s["filter.initial_std"]) * (1 + 1e-12))
    # Runtime change keeps the estimate and applies the new threshold and noise.
    theta = flt.theta
    flt.update_settings(s.replace({"filter.change_threshold": 50.0,
                                   "filter.noise_adaptation": "fixed",
                                   "filter.measurement_std": 0.7}))
    np.testing.assert_array_equal(flt.theta, theta)
    assert flt.measurement_var == pytest.approx(0.49)
    flt.reset("new object")
    np.testing.assert_array_equal(flt.theta, s["filter.initial_mean"])
    np.testing.assert_array_equal(flt.covariance, np.diag(np.square(s["filter.initial_std"])))
    assert flt.samples == 0 and flt.last is None
