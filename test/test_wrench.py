"""WrenchMap and Projection against numpy/scipy references."""
import numpy as np
import pytest
from scipy.signal import savgol_filter

from interaction_estimator.core.direction import Direction
from interaction_estimator.core.kinematics import AlongKinematics
from interaction_estimator.core.wrench import WrenchMap


def test_force_is_least_squares_solution_with_robot_sign():
    # tau_ext = J^T F_ext; without damping the map equals numpy's least-squares solution of
    # J^T F = tau (numpy.linalg.lstsq). The robot applies F = -F_ext.
    rng = np.random.default_rng(1)
    jac = rng.normal(size=(6, 7))
    f_ext = np.array([3.0, -12.0, 5.5])
    tau = jac[:3].T @ f_ext
    w = WrenchMap(full_wrench=False, damping=0.0).solve(jac, tau)
    ref = np.linalg.lstsq(jac[:3].T, tau, rcond=None)[0]
    np.testing.assert_allclose(w.force, -ref, atol=1e-10)
    np.testing.assert_allclose(w.force, -f_ext, atol=1e-10)
    assert w.condition == pytest.approx(np.linalg.cond(jac[:3]), rel=1e-9)


def test_full_wrench_and_damping_match_closed_form():
    rng = np.random.default_rng(2)
    jac = rng.normal(size=(6, 9))
    wrench = rng.normal(size=6)
    tau = jac.T @ wrench
    lam = 0.05
    w = WrenchMap(full_wrench=True, damping=lam).solve(jac, tau)
    # damped least squares, closed form (J J^T + lambda^2 I)^-1 J tau (Nakamura and Hanafusa 1986)
    ref = np.linalg.solve(jac @ jac.T + lam**2 * np.eye(6), jac @ tau)
    np.testing.assert_allclose(np.concatenate([w.force, w.torque]), -ref, atol=1e-10)


def test_savitzky_golay_acceleration_matches_scipy():
    dt = 1e-3
    kin = AlongKinematics(window=0.031, polyorder=2, nominal_dt=dt)
    t = np.arange(200) * dt
    vel = 0.2 * np.sin(3.0 * t) + 0.05 * t
    for ti, vi in zip(t, vel):
        kin.push(ti, vi * dt, vi, 0.0)
    # scipy.signal.savgol_filter, same window and order, first derivative, at the window centre
    ref = savgol_filter(vel, kin.n, 2, deriv=1, delta=dt, mode="interp")[-1 - kin.half]
    assert kin.acceleration() == pytest.approx(ref, rel=1e-9)
    assert kin.acceleration() == pytest.approx(0.6 * np.cos(3.0 * t[-1 - kin.half]) + 0.05,
                                               rel=2e-3)  # the analytic derivative
    assert kin.lag == pytest.approx(kin.half * dt)


def test_estimated_direction_follows_motion_with_hysteresis():
    d = Direction("estimated", [1, 0, 0], window=0.2, hysteresis_deg=10.0, min_travel=0.005)
    line = np.array([0.0, 0.6, -0.8])
    for _ in range(300):
        u = d.update(1e-3, np.eye(3), 0.1 * line)
    np.testing.assert_allclose(u, line, atol=1e-9)
    for _ in range(300):  # a 5 degree turn stays inside the hysteresis band
        tilt = np.array([0.0, 0.6 * np.cos(0.087) + 0.8 * np.sin(0.087),
                         -0.8 * np.cos(0.087) + 0.6 * np.sin(0.087)])
        u = d.update(1e-3, np.eye(3), 0.1 * tilt)
    np.testing.assert_allclose(u, line, atol=1e-9)


def test_contact_frame_direction_rotates_with_frame():
    d = Direction("contact", [0, 0, 2.0], 1.0, 10.0, 0.01)
    rot = np.array([[1, 0, 0], [0, 0, -1], [0, 1, 0]], float)  # 90 deg about x
    np.testing.assert_allclose(d.update(1e-3, rot, np.zeros(3)), [0, -1, 0], atol=1e-12)


def test_weighted_map_is_generalized_least_squares():
    # With weights W = 1/sigma^2 the map is the Gauss-Markov estimate: ordinary least squares
    # (numpy.linalg.lstsq) on the rows scaled by 1/sigma.
    rng = np.random.default_rng(3)
    jac = rng.normal(size=(6, 10))
    tau = rng.normal(size=10)
    sigma = rng.uniform(0.05, 5.0, 10)
    w = 1.0 / sigma**2
    w *= len(w) / w.sum()
    got = WrenchMap(full_wrench=False, damping=0.0).solve(jac, tau, w)
    ref = np.linalg.lstsq(jac[:3].T / sigma[:, None], tau / sigma, rcond=None)[0]
    np.testing.assert_allclose(got.force, -ref, atol=1e-10)


@pytest.mark.parametrize("seed", range(6))
def test_jacobi_eigensolver_matches_numpy_eigh(seed):
    # The wrench map's and the direction's symmetric eigensolver against numpy.linalg.eigh
    # (LAPACK): eigenvalues, the reconstruction V diag(w) V^T = A, and, on positive definite
    # matrices up to a condition number of 1e8, the smallest eigenvalue to high relative
    # accuracy (Demmel and Veselic, SIAM J. Matrix Anal. Appl. 1992: Jacobi's method is
    # relatively accurate on such matrices when they are well scaled).
    from interaction_estimator.core.wrench import symmetric_eigen

    rng = np.random.default_rng(seed)
    for m in (3, 6):
        Q, _ = np.linalg.qr(rng.normal(size=(m, m)))
        w_true = np.logspace(0, -8 * rng.uniform(0.2, 1.0), m)
        A = (Q * w_true) @ Q.T
        A = 0.5 * (A + A.T)
        w, V = np.empty(m), np.empty((m, m))
        symmetric_eigen(A.copy(), w, V)
        ref = np.linalg.eigh(A)[0]
        np.testing.assert_allclose(w[-1], ref[-1], rtol=1e-12)
        np.testing.assert_allclose(w, ref, rtol=1e-6, atol=1e-15 * ref[-1])
        np.testing.assert_allclose((V * w) @ V.T, A, atol=1e-13 * ref[-1])
        np.testing.assert_allclose(V.T @ V, np.eye(m), atol=1e-12)
    # a symmetric indefinite matrix (the direction's moment matrix is only semi-definite)
    B = rng.normal(size=(3, 3))
    B = B + B.T
    w, V = np.empty(3), np.empty((3, 3))
    symmetric_eigen(B.copy(), w, V)
    np.testing.assert_allclose(w, np.linalg.eigh(B)[0], atol=1e-12)


@pytest.mark.parametrize("n, order, deriv", [(5, 2, 1), (7, 2, 0), (31, 3, 1), (61, 2, 1)])
def test_savitzky_golay_weights_equal_scipy(n, order, deriv):
    # Reference: scipy.signal.savgol_coeffs (use='dot', unit spacing), the weights the
    # kinematics now compute with numpy least squares.
    from scipy.signal import savgol_coeffs

    from interaction_estimator.core.kinematics import savgol_weights
    np.testing.assert_allclose(savgol_weights(n, order, deriv),
                               savgol_coeffs(n, order, deriv=deriv, use="dot"), atol=1e-14)
