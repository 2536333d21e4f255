"""Momentum observer, bias learning and contact monitor against analytic solutions."""
import numpy as np
import pytest

from interaction_estimator.core.compensation import BiasEstimator
from interaction_estimator.core.contact import ContactMonitor
from interaction_estimator.core.model import RobotModel
from interaction_estimator.core.observer import MomentumObserver

MASS = 2.5  # kg, a single prismatic slider moving horizontally
SLIDER = ('<robot name="slider"><link name="rail"/><joint name="s" type="prismatic">'
          '<parent link="rail"/><child link="cart"/><axis xyz="1 0 0"/>'
          '<limit lower="-100" upper="100" effort="100" velocity="100"/></joint>'
          f'<link name="cart"><inertial><mass value="{MASS}"/><inertia ixx="0.01" ixy="0" '
          'ixz="0" iyy="0.01" iyz="0" izz="0.01"/></inertial></link></robot>')


def run_step(times, force, t_step, gain):
    """A mass pushed by a constant external force from t_step, no actuation: the exact motion
    v = F/m (t - t_step) (Newton's second law), fed to the observer with terms from Pinocchio."""
    model = RobotModel(SLIDER, "cart")
    obs = MomentumObserver(np.array([gain]), max_gap=1.0)
    out = []
    for t in times:
        v = np.array([force / MASS * max(t - t_step, 0.0)])
        x = np.array([0.5 * force / MASS * max(t - t_step, 0.0) ** 2])
        dyn = model.dynamics(x, v)
        beta = np.zeros(1) + dyn.coriolis_transpose_velocity - dyn.gravity
        r, _ = obs.step(t, dyn.mass_matrix @ v, beta)
        out.append(r[0])
    return np.array(out)


def test_step_response_is_first_order_exponential():
    # Analytic: r' = K (tau_ext - r) gives r = tau_ext (1 - exp(-K t)) for a step at t = 0
    # (De Luca and Mattone, ICRA 2005).
    gain, force = 25.0, 7.0
    times = np.arange(0.0, 0.4, 1e-3)
    r = run_step(times, force, 0.0, gain)
    expected = force * (1.0 - np.exp(-gain * times))
    np.testing.assert_allclose(r, expected, atol=1e-9)


def test_step_response_exact_under_irregular_intervals():
    rng = np.random.default_rng(4)
    times = np.concatenate([[0.0], np.cumsum(rng.uniform(2e-4, 4e-3, 300))])
    gain, force = 60.0, -3.0
    r = run_step(times, force, 0.0, gain)
    np.testing.assert_allclose(r, force * (1.0 - np.exp(-gain * times)), atol=1e-9)


def test_gap_restarts_and_keeps_last_residual():
    obs = MomentumObserver(np.array([10.0]), max_gap=0.05)
    obs.step(0.0, np.zeros(1), np.zeros(1))
    r1, _ = obs.step(0.01, np.array([0.01]), np.zeros(1))  # external torque 1 N·m over 10 ms
    r2, restarted = obs.step(0.5, np.array([5.0]), np.zeros(1))
    assert restarted and obs.restarts == 1
    assert r2[0] == pytest.approx(r1[0])       # warm start: no jump from the gap
    assert r1[0] == pytest.approx(1.0 - np.exp(-0.1))  # exact first-order step


def test_bias_learning_time_constant_rate_and_limit():
    # first-order convergence: after 5 time constants the error is exp(-5) of the start
    est = BiasEstimator(np.zeros(2), time_constant=0.2, max_rate=100.0, limit=10.0, learn=True)
    true_bias = np.array([2.0, -1.5])
    for k in range(1, 1001):
        est.update(k * 1e-3, 1e-3, -true_bias)
    np.testing.assert_allclose(est.value, true_bias * (1 - np.exp(-5.0)), rtol=1e-3)
    slow = BiasEstimator(np.zeros(1), 0.01, max_rate=1.0, limit=0.3, learn=True)
    slow.update(0.1, 0.1, np.array([-5.0]))
    assert slow.value[0] == pytest.approx(0.1)   # rate limit 1 N·m/s over 0.1 s
    for k in range(10):
        slow.update(0.2 + k, 1.0, np.array([-5.0]))
    assert slow.value[0] == pytest.approx(0.3)   # size limit
    assert slow.age(12.0) == pytest.approx(12.0 - 9.2)


def test_contact_monitor_hysteresis_and_hold():
    mon = ContactMonitor(2, enter_level=6.0, exit_level=3.0, hold_time=0.01, noise_floor=0.1,
                         noise_time_constant=1.0, release_time=0.01)
    t = 0.0
    states = []
    for level in [1.0] * 5 + [7.0] * 20 + [4.0] * 20 + [2.0] * 20:
        t += 1e-3
        states.append(mon.step(t, np.full(2, level * 0.1)))
    entered = [i for i, s in enumerate(states) if s.event == "contact_begin"]
    left = [i for i, s in enumerate(states) if s.event == "contact_end"]
    assert entered == [15]  # 10 ms after the first sample above 6
    assert left == [55]     # level 4 lies inside the band: contact holds until below 3 for 10 ms
    assert states[30].in_contact and states[44].in_contact and not states[-1].in_contact


def test_kalman_form_equals_filterpy_step_for_step():
    # The Kalman-form observer (state p, tau_ext, tau_ext') against filterpy's KalmanFilter
    # (PyPI filterpy) with the same transition F(dt), process covariance (white jerk: the
    # closed form of Bar-Shalom, Li and Kirubarajan 2001, Sec. 6.2) and momentum measurement,
    # on irregular intervals.
    from filterpy.kalman import KalmanFilter

    from interaction_estimator.core.observer import KalmanMomentumObserver

    w, sv, se, m = 70.0, 0.004, 0.2, 1.7
    obs = KalmanMomentumObserver(np.array([w]), sv, se, max_gap=1.0, settle_steps=0)
    rng = np.random.default_rng(9)
    times = np.concatenate([[0.0], np.cumsum(rng.uniform(5e-4, 2e-3, 400))])
    beta = rng.normal(size=len(times))
    momentum = np.cumsum(rng.normal(scale=0.01, size=len(times)))
    M = np.array([[m]])
    r = (sv * m) ** 2 + 1e-12
    kf = KalmanFilter(dim_x=3, dim_z=1, dim_u=1)
    kf.x = np.array([[momentum[0]], [0.0], [0.0]])
    kf.P = np.diag([r, 100.0, 100.0 * w * w])
    kf.H = np.array([[1.0, 0.0, 0.0]])
    kf.R = np.array([[r]])
    obs.step(times[0], momentum[:1], beta[:1], M)
    for k in range(1, len(times)):
        dt = times[k] - times[k - 1]
        kf.F = np.array([[1, dt, dt * dt / 2], [0, 1, dt], [0, 0, 1]])
        qw = np.array([[dt**5 / 20, dt**4 / 8, dt**3 / 6], [dt**4 / 8, dt**3 / 3, dt**2 / 2],
                       [dt**3 / 6, dt**2 / 2, dt]])
        kf.Q = r * dt * w**6 * qw + np.diag([(se * dt) ** 2, 0.0, 0.0])
        kf.predict(u=np.array([[0.5 * (beta[k] + beta[k - 1])]]), B=np.array([[dt], [0], [0]]))
        kf.update(np.array([[momentum[k]]]))
        got, _ = obs.step(times[k], momentum[k:k + 1], beta[k:k + 1], M)
        assert got[0] == pytest.approx(kf.x[1, 0], rel=1e-9, abs=1e-9)


def test_kalman_form_tracks_a_ramp_without_lag():
    # Disturbance modelled as a doubly integrated random walk: a ramp of external torque is
    # inside the model, so the steady-state error vanishes (internal model principle; Francis
    # and Wonham, Automatica 1976). The first-order form lags a ramp by slope / K_O.
    from interaction_estimator.core.observer import KalmanMomentumObserver

    model = RobotModel(SLIDER, "cart")
    kal = KalmanMomentumObserver(np.array([60.0]), 0.003, 0.1, max_gap=1.0)
    first = MomentumObserver(np.array([60.0]), max_gap=1.0)
    slope = 20.0  # N/s
    for k in range(3001):
        t = k * 1e-3
        # Newton: m x'' = slope t  ->  v = slope t^2 / (2 m), x = slope t^3 / (6 m)
        v = np.array([slope * t * t / (2 * MASS)])
        dyn = model.dynamics(np.array([slope * t**3 / (6 * MASS)]), v)
        beta = dyn.coriolis_transpose_velocity - dyn.gravity
        rk, _ = kal.step(t, dyn.mass_matrix @ v, beta, dyn.mass_matrix)
        rf, _ = first.step(t, dyn.mass_matrix @ v, beta)
    assert rk[0] == pytest.approx(slope * 3.0, abs=1e-3)
    assert rf[0] == pytest.approx(slope * 3.0 - slope / 60.0, abs=1e-3)  # lag slope / K_O
