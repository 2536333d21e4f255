"""The cartesian object model (environment.model cartesian): its measurement rows, its estimate
against batch least squares, its semidefinite projection, its excitation per direction, and the
settings that contradict it.

References: the model's own equation F = M x'' + D x' + K x + f_s evaluated with numpy;
numpy.linalg.lstsq of the same rows stacked (with a diffuse prior and a known noise level the
estimate is their least-squares fit and its covariance R (H^T H)^-1: Bishop, Pattern Recognition
and Machine Learning, 2006, sec. 3.3); the nearest positive semidefinite matrix in the Frobenius
norm (Higham, Linear Algebra Appl. 103, 1988) found independently by scipy.optimize.minimize
over a Cholesky-type factor L (A ~ L L^T).
"""
import numpy as np
import pytest
from scipy.optimize import minimize

from interaction_estimator.core.environment import EnvironmentFilter
from interaction_estimator.core.object_models import (
    CARTESIAN,
    MATCH_NONE,
    cartesian_row,
    new_records,
    project_semidefinite,
)
from interaction_estimator.core.settings import Settings, SettingsError

PLAIN = {
    "environment.model": "cartesian",
    "filter.update_interval": 0.0,
    "filter.learn_noise": False,
    "filter.nonnegative": False,
    "filter.change_threshold": 1e8,
    "filter.correlation_correction": False,
    "filter.model_error": 0.0,
    "cartesian.initial_std": [1e5, 1e6, 1e7, 1e6],   # diffuse
}
PAIRS = ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2))


def random_spd(rng, scale):
    A = rng.normal(0.0, 1.0, (3, 3))
    return scale * (A @ A.T + 0.5 * np.eye(3))


def entries(S):
    return [S[a, b] for a, b in PAIRS]


def theta_of(M, D, K, f):
    return np.array(entries(M) + entries(D) + entries(K) + list(f))


def rows(a, v, x):
    """The model's regressor (3, 21) for acceleration a, velocity v, displacement x (the
    compiled row builder, without the observer-matching filter)."""
    records = new_records(CARTESIAN, MATCH_NONE, 0.0)
    cartesian_row(records.params[0], records.state[0], records.rows, 1e-3,
                  np.asarray(a, float), np.asarray(v, float), np.asarray(x, float))
    return records.rows["regressor"].copy()


def test_rows_reproduce_the_model_with_symmetric_matrices():
    # Reference: F = M a + D v + K x + f_s with numpy's matrix products, for random symmetric
    # M, D, K: the six-entry parametrisation keeps symmetry by construction.
    rng = np.random.default_rng(3)
    for _ in range(20):
        M, D, K = random_spd(rng, 2.0), random_spd(rng, 30.0), random_spd(rng, 500.0)
        f = rng.normal(0.0, 5.0, 3)
        a, v, x = rng.normal(0, 1, 3), rng.normal(0, 0.2, 3), rng.normal(0, 0.05, 3)
        H = rows(a, v, x)
        np.testing.assert_allclose(H @ theta_of(M, D, K, f), M @ a + D @ v + K @ x + f,
                                   rtol=1e-12, atol=1e-12)


def fixture_rows(rng, n, explore_z=True, noise=0.2):
    M, D, K = random_spd(rng, 1.5), random_spd(rng, 20.0), random_spd(rng, 400.0)
    f = np.array([2.0, -1.0, 3.0])
    theta = theta_of(M, D, K, f)
    t = np.arange(n) * 1e-2
    data = []
    for k in range(n):
        a, v, x = rng.normal(0, 1, 3), rng.normal(0, 0.2, 3), rng.normal(0, 0.03, 3)
        if not explore_z:
            a[2] = v[2] = x[2] = 0.0
        H = rows(a, v, x)
        data.append((t[k], H, H @ theta + rng.normal(0.0, noise, 3)))
    return theta, data


def test_diffuse_prior_equals_batch_least_squares():
    # Issue 19: with a diffuse prior (and nothing forgotten) the cartesian estimate equals
    # numpy.linalg.lstsq of the same rows stacked, and its covariance R (H^T H)^-1.
    rng = np.random.default_rng(11)
    theta, data = fixture_rows(rng, 300)
    flt = EnvironmentFilter(Settings({**PLAIN, "filter.measurement_std": 0.2}), CARTESIAN)
    for t, H, f in data:
        step = flt.update(t, H, f)
    A = np.vstack([H for _, H, _ in data])
    b = np.concatenate([f for _, _, f in data])
    ref, *_ = np.linalg.lstsq(A, b, rcond=None)
    np.testing.assert_allclose(step.theta, ref, rtol=1e-6, atol=1e-6)
    cov = 0.2**2 * np.linalg.inv(A.T @ A)
    np.testing.assert_allclose(step.std, np.sqrt(np.diag(cov)), rtol=1e-6)
    np.testing.assert_allclose(step.theta, theta, atol=6 * np.sqrt(np.diag(cov)).max())


def test_unexplored_direction_is_not_excited_and_never_converged():
    # Issue 19: a direction the motion has not explored (no x'', x', x along z at all) leaves
    # the entries whose regressor is zero - mass_zz, damping_zz, stiffness_zz - not excited and
    # never converged; the others converge.
    rng = np.random.default_rng(12)
    _, data = fixture_rows(rng, 400, explore_z=False)
    flt = EnvironmentFilter(Settings({**PLAIN, "filter.measurement_std": 0.2}), CARTESIAN)
    names = CARTESIAN.parameter_names
    seen_converged = np.zeros(len(names), bool)
    for t, H, f in data:
        step = flt.update(t, H, f)
        if step is not None:
            seen_converged |= step.converged
    for name in ("mass_zz", "damping_zz", "stiffness_zz"):
        i = names.index(name)
        assert not step.excited[i] and not seen_converged[i], name
    for name in ("mass_xx", "damping_xy", "stiffness_yy", "static_force_z"):
        assert step.converged[names.index(name)], name


def test_semidefinite_projection_is_the_nearest_in_frobenius_norm():
    # Reference: scipy.optimize.minimize of ||A - L L^T||_F over L (3x3, its lower triangle),
    # from several starts; the projection's distance must equal the optimum's, its result be
    # positive semidefinite and symmetric, and a semidefinite matrix be left alone.
    rng = np.random.default_rng(5)
    for _ in range(6):
        S = rng.normal(0.0, 1.0, (3, 3))
        S = S + S.T   # indefinite in general
        values = np.array(entries(S) * 2, float)
        changed = project_semidefinite(values, 6)
        P = np.empty((3, 3))
        for k, (a, b) in enumerate(PAIRS):
            P[a, b] = P[b, a] = values[6 + k]
        assert changed == (np.linalg.eigvalsh(S).min() < 0.0)
        assert np.linalg.eigvalsh(P).min() >= -1e-12
        np.testing.assert_array_equal(values[:6], entries(S))   # only the block asked for

        def cost(p, S=S):
            L = np.zeros((3, 3))
            L[np.tril_indices(3)] = p
            return np.sum((S - L @ L.T) ** 2)

        best = min((minimize(cost, rng.normal(0, 1, 6), method="BFGS",
                             options={"gtol": 1e-12}) for _ in range(5)), key=lambda r: r.fun)
        assert np.sum((S - P) ** 2) == pytest.approx(best.fun, rel=1e-6, abs=1e-9)
    spd = random_spd(rng, 3.0)
    values = np.array(entries(spd), float)
    assert not project_semidefinite(values, 0)
    np.testing.assert_array_equal(values, entries(spd))


@pytest.mark.parametrize("change, reason", [
    ({"wrench.mode": "wrench"}, "wrench.mode: 'wrench' contradicts environment.model"),
    ({"direction.mode": "estimated"}, "direction.mode: 'estimated' contradicts"),
    ({"direction.mode": "contact"}, "direction.mode: 'contact' contradicts"),
])
def test_contradicting_settings_are_refused_with_the_reason(change, reason):
    with pytest.raises(SettingsError, match=reason):
        Settings({"environment.model": "cartesian", **change})
    Settings(change)   # the same setting is fine for the default model
    base = Settings({"environment.model": "cartesian"})
    with pytest.raises(SettingsError, match=reason):   # a change at run time: refused too
        base.replace(change)


def test_prior_from_the_cartesian_settings():
    s = Settings({"environment.model": "cartesian", "cartesian.initial_diagonal": [2, 10, 300],
                  "cartesian.initial_static_force": [1, 2, 3],
                  "cartesian.initial_std": [5, 50, 500, 20]})
    mean, std = CARTESIAN.prior(s)
    names = CARTESIAN.parameter_names
    expect = {"mass_xx": 2, "mass_xy": 0, "damping_yy": 10, "stiffness_zz": 300,
              "stiffness_xz": 0, "static_force_y": 2}
    for name, value in expect.items():
        assert mean[names.index(name)] == value
    assert std[names.index("mass_yz")] == 5 and std[names.index("static_force_x")] == 20
    with pytest.raises(SettingsError, match="cartesian.initial_diagonal"):
        Settings({"cartesian.initial_diagonal": [-1.0, 0.0, 0.0]})
