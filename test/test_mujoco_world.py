"""Checks of the MuJoCo ground-truth harness (interaction_estimator/sim/mujoco_world/) against
independent facts.

References used here:
* Pinocchio (``pin``), a second, independent rigid-body engine: crba (mass matrix), rnea
  (inverse dynamics), frame kinematics and Jacobians of the same URDF.
* MuJoCo's own ``mj_jacSite`` on a model built here, separately from the harness.
* Standard gravity 9.80665 m/s^2 (CGPM, 3rd General Conference on Weights and Measures, 1901).
* Newton's second law for the object on its slide, and the semi-implicit (symplectic) Euler
  scheme MuJoCo documents for its "Euler" integrator: v[k+1] = v[k] + dt a[k],
  q[k+1] = q[k] + dt v[k+1].
* numpy.linalg.lstsq (batch least squares) and scipy.stats.chi2 (sample-variance bounds).
"""
from __future__ import annotations

from pathlib import Path

import mujoco
import numpy as np
import pinocchio as pin
import pytest
from scipy import stats

from interaction_estimator.sim.mujoco_world.arm import (
    example_force,
    run_applied_force,
    run_attached_object,
)
from interaction_estimator.sim.mujoco_world.common import (
    GroundTruthRun,
    _make_spec,
    _Robot,
    corrupt,
    read_urdf,
)

ROBOTS = Path(__file__).resolve().parents[1] / "interaction_estimator" / "sim" / "robots"
ARM = ROBOTS / "marten_arm.urdf"
MOBILE = ROBOTS / "marten_mobile.urdf"
G0 = 9.80665  # m/s^2, CGPM standard gravity


class PinRobot:
    """Pinocchio model of a URDF, fed with JointState-ordered vectors (by joint name)."""

    def __init__(self, urdf_text: str, joint_names):
        self.model = pin.buildModelFromXML(urdf_text)
        self.model.gravity.linear = np.array([0.0, 0.0, -G0])
        self.data = self.model.createData()
        self.frame = self.model.getFrameId("tool_tip")
        self.joints = [self.model.getJointId(nm) for nm in joint_names]
        assert all(j < self.model.njoints for j in self.joints), "joint names must match"
        self.vidx = np.array([self.model.joints[j].idx_v for j in self.joints])

    def q(self, position):
        q = np.zeros(self.model.nq)
        for j, x in zip(self.joints, position):
            jm = self.model.joints[j]
            if jm.nq == 2:  # continuous joint: (cos, sin)
                q[jm.idx_q:jm.idx_q + 2] = np.cos(x), np.sin(x)
            else:
                q[jm.idx_q] = x
        return q

    def v(self, velocity):
        v = np.zeros(self.model.nv)
        v[self.vidx] = velocity
        return v

    def to_names(self, vec):
        return np.asarray(vec)[self.vidx]

    def rnea(self, position, velocity, acceleration):
        return self.to_names(pin.rnea(self.model, self.data, self.q(position), self.v(velocity),
                                      self.v(acceleration)))

    def tip(self, position):
        """World position (3,) and linear Jacobian (3, n) of tool_tip, JointState order."""
        q = self.q(position)
        J = pin.computeFrameJacobian(self.model, self.data, q, self.frame,
                                     pin.ReferenceFrame.LOCAL_WORLD_ALIGNED)
        pin.updateFramePlacements(self.model, self.data)
        return self.data.oMf[self.frame].translation.copy(), J[:3, self.vidx]


def mujoco_site_model(urdf_text: str):
    """A MuJoCo model of the URDF built here (not by the harness), with a site at tool_tip."""
    i = urdf_text.rfind("</robot>")
    spec = mujoco.MjSpec.from_string(
        urdf_text[:i] + '<mujoco><compiler discardvisual="true" fusestatic="false" '
        'balanceinertia="false"/></mujoco>' + urdf_text[i:])
    spec.body("tool_tip").add_site(name="check_site")
    model = spec.compile()
    return model, mujoco.MjData(model), mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_SITE,
                                                          "check_site")


def mujoco_site_jacobian(model, data, site, names, position):
    """mj_jacSite at a JointState-ordered position: (3, n) linear Jacobian."""
    jid = [mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_JOINT, nm) for nm in names]
    data.qpos[[model.jnt_qposadr[j] for j in jid]] = position
    mujoco.mj_kinematics(model, data)
    mujoco.mj_comPos(model, data)
    jacp = np.zeros((3, model.nv))
    mujoco.mj_jacSite(model, data, jacp, None, site)
    return jacp[:, [model.jnt_dofadr[j] for j in jid]]


def newton_euler_residual(run: GroundTruthRun, pr: PinRobot, stride: int = 1):
    """M(q_k) a_k + c(q_k, v_k) + g(q_k) - effort_k - tau_ext_k with a_k from forward differences
    of the recorded velocities (Pinocchio rnea); worst absolute value and the effort scale."""
    a = np.diff(run.velocity, axis=0) / run.dt
    worst = 0.0
    for k in range(0, len(a), stride):
        lhs = pr.rnea(run.position[k], run.velocity[k], a[k])
        worst = max(worst, np.max(np.abs(lhs - run.effort[k] - run.true_external_torque[k])))
    return worst, np.max(np.abs(run.effort))


# ---------------------------------------------------------------------------------------------
# 1. The harness loads the URDF as Pinocchio does: two engines agree on M(q) and bias forces.
# ---------------------------------------------------------------------------------------------

@pytest.mark.parametrize("urdf", [ARM, MOBILE], ids=["arm", "mobile"])
def test_mass_matrix_and_bias_forces_match_pinocchio(urdf):
    text = read_urdf(urdf)
    robot = _Robot(_make_spec(text, 1e-3, "tool_tip"), text)  # the harness's own model
    pr = PinRobot(text, robot.joint_names)
    assert robot.model.opt.gravity[2] == -G0 and robot.n == len(pr.vidx)
    rng = np.random.default_rng(7)
    lo = np.where(np.isfinite(robot.lower), robot.lower, -np.pi)
    hi = np.where(np.isfinite(robot.upper), robot.upper, np.pi)
    lo, hi = np.maximum(lo, -3.0), np.minimum(hi, 3.0)
    for _ in range(20):
        q = rng.uniform(lo, hi)
        v = rng.uniform(-2.0, 2.0, robot.n)
        robot.set_state(q, v)
        mujoco.mj_forward(robot.model, robot.data)
        M_mj, bias_mj = robot.mass_matrix(), robot.bias()
        M_pin = pin.crba(pr.model, pr.data, pr.q(q))
        M_pin = np.triu(M_pin) + np.triu(M_pin, 1).T  # crba fills the upper triangle only
        M_pin = M_pin[np.ix_(pr.vidx, pr.vidx)]
        bias_pin = pr.rnea(q, v, np.zeros(robot.n))  # = C(q, v) v + g(q)
        # Pinocchio crba/rnea as the independent reference; 1e-6 relative (two engines, doubles).
        np.testing.assert_allclose(M_mj, M_pin, rtol=1e-6, atol=1e-6 * np.abs(M_pin).max())
        np.testing.assert_allclose(bias_mj, bias_pin, rtol=1e-6,
                                   atol=1e-6 * np.abs(bias_pin).max())
        # and the contact site sits where Pinocchio puts the tool_tip frame
        np.testing.assert_allclose(robot.site_pos(), pr.tip(q)[0], atol=1e-9)


# ---------------------------------------------------------------------------------------------
# 2. Applied-force runs
# ---------------------------------------------------------------------------------------------

@pytest.fixture(scope="module", params=[ARM, MOBILE], ids=["arm", "mobile"])
def applied(request):
    force = example_force(free_time=1.0, peak=30.0)
    run = run_applied_force(request.param, force, duration=3.0, free_time=1.0)
    return run, force


def test_applied_force_bookkeeping(applied):
    run, force = applied
    N = len(run.time)
    assert N == 3000 and run.position.shape == (N, len(run.joint_names))
    np.testing.assert_allclose(np.diff(run.time), 1e-3, atol=1e-12)  # uniform 1 ms steps
    np.testing.assert_array_equal(run.in_contact, run.time >= 1.0)
    assert np.all(run.true_force[~run.in_contact] == 0.0)
    assert np.all(run.true_external_torque[~run.in_contact] == 0.0)
    expected = np.array([force(t) for t in run.time[run.in_contact]])
    np.testing.assert_allclose(run.true_force[run.in_contact], expected, atol=1e-12)
    peak = np.linalg.norm(run.true_force, axis=1).max()
    assert 20.0 < peak < 40.0  # the brief's force range (a spec, not physics)
    assert np.all(np.ptp(run.position[:, -7:-1], axis=0) > 0.1)  # arm joints really move


def test_applied_force_external_torque_is_jacobian_transpose(applied):
    run, _ = applied
    pr = PinRobot(run.urdf, run.joint_names)
    model, data, site = mujoco_site_model(run.urdf)
    worst_mj = worst_pin = worst_pos = 0.0
    for k in range(0, len(run.time), 10):
        f_ext = -run.true_force[k]
        J_mj = mujoco_site_jacobian(model, data, site, run.joint_names, run.position[k])
        p_pin, J_pin = pr.tip(run.position[k])
        worst_mj = max(worst_mj, np.abs(J_mj.T @ f_ext - run.true_external_torque[k]).max())
        worst_pin = max(worst_pin, np.abs(J_pin.T @ f_ext - run.true_external_torque[k]).max())
        worst_pos = max(worst_pos, np.abs(p_pin - run.contact_position[k]).max())
    # J^T F_ext with MuJoCo's mj_jacSite (a model built here) and with Pinocchio's frame
    # Jacobian (independent engine); forces ~30 N, lever arms < 1 m: 1e-9 N·m is round-off.
    assert worst_mj < 1e-9
    assert worst_pin < 1e-9
    assert worst_pos < 1e-9  # contact_position = Pinocchio forward kinematics of tool_tip


def test_applied_force_newton_euler_balance(applied):
    run, _ = applied
    worst, scale = newton_euler_residual(run, PinRobot(run.urdf, run.joint_names), stride=3)
    # M qdd + C qd + g = effort + J^T F_ext (Pinocchio rnea as reference); MuJoCo's Euler step
    # makes the forward difference the exact acceleration: residual is round-off of 1/dt * eps.
    assert worst < 1e-7 * max(1.0, scale)


def test_applied_force_positions_integrate_velocities(applied):
    run, _ = applied
    q = np.unwrap(run.position, axis=0)  # continuous yaw is reported wrapped
    # semi-implicit Euler: q[k+1] = q[k] + dt v[k+1] (MuJoCo documentation, integrator "Euler")
    np.testing.assert_allclose(np.diff(q, axis=0) / run.dt, run.velocity[1:], atol=1e-9)


# ---------------------------------------------------------------------------------------------
# 3. Attached objects
# ---------------------------------------------------------------------------------------------

def object_balance_error(run: GroundTruthRun):
    """|true_force . u - (m x'' + d x' + k x + f0)| on the contact samples, with x'' the forward
    difference of the object's own slide velocity (Newton's second law for the object)."""
    T = run.truth
    u = np.asarray(T["direction"])
    x, v = run.object_position, run.object_velocity
    a = np.diff(v) / run.dt
    f_model = T["mass"] * a + T["damping"] * v[:-1] + T["stiffness"] * x[:-1] + T["static_force"]
    along = run.true_force[:-1] @ u
    c = run.in_contact[:-1]
    return np.abs(along - f_model)[c].max(), np.abs(along[c]).max()


@pytest.fixture(scope="module")
def lifted():
    return run_attached_object(ARM, mass=2.0, damping=0.0, stiffness=0.0, static_force=0.0,
                                  direction=[0, 0, 1], duration=3.5, free_time=1.0,
                                  gravity_on_object=True)


def test_lifted_payload_weighs_m_times_standard_gravity(lifted):
    run = lifted
    assert run.truth["static_force"] == pytest.approx(2.0 * G0, rel=1e-15)
    hold = (run.time >= 1.25) & (run.time < 1.5)  # make_path's default 0.5 s hold after attach
    fz = run.true_force[hold, 2].mean()
    # weight of 2.0 kg under standard gravity 9.80665 m/s^2 (CGPM): 19.6133 N
    assert fz == pytest.approx(19.6133, abs=2e-3)
    # during the motion, the mean lift force over the contact phase is still m g plus
    # m * (mean acceleration) = m (v_end - v_start) / T (Newton's second law)
    c = run.in_contact
    T = run.time[c][-1] + run.dt - run.time[c][0]
    v_end = run.object_velocity[-1] + run.object_acceleration[-1] * run.dt
    expected = 2.0 * G0 + 2.0 * (v_end - run.object_velocity[c][0]) / T
    assert run.true_force[c, 2].mean() == pytest.approx(expected, abs=1e-9)
    assert np.all(run.true_force[~c] == 0.0)
    # the payload really moves: accelerations of the order of 1 m/s^2, displacements of cm
    assert np.abs(run.object_acceleration).max() > 0.5 and np.ptp(run.object_position) > 0.03


def test_lifted_payload_object_balance(lifted):
    err, scale = object_balance_error(lifted)
    assert scale > 15.0
    assert err < 1e-9  # Newton's second law on the object, forward-difference acceleration


def test_lifted_payload_robot_side(lifted):
    run = lifted
    pr = PinRobot(run.urdf, run.joint_names)
    worst_jt = worst_x = 0.0
    u = np.asarray(run.truth["direction"])
    p_attach = np.asarray(run.truth["attach_point"])
    for k in np.flatnonzero(run.in_contact)[::10]:
        p, J = pr.tip(run.position[k])
        worst_jt = max(worst_jt, np.abs(J.T @ -run.true_force[k]
                                        - run.true_external_torque[k]).max())
        worst_x = max(worst_x, abs((p - p_attach) @ u - run.object_position[k]))
    # the constraint's joint torque on the robot is J^T F_ext with F_ext = -true_force
    # (Pinocchio Jacobian): checks the sign and frame of the recorded force
    assert worst_jt < 1e-8
    # the soft connect constraint keeps the tool on the object: 0.2 mm (common practice, no
    # source: well below the displacement resolution that matters for stiffness estimates)
    assert worst_x < 2e-4
    worst, scale = newton_euler_residual(run, pr, stride=3)
    assert worst < 1e-7 * max(1.0, scale)  # robot's Newton-Euler balance, Pinocchio rnea


@pytest.mark.parametrize("urdf,params", [
    (ARM, dict(mass=1.5, damping=12.0, stiffness=300.0, static_force=4.0,
               direction=[1.0, 0.5, -0.3], free_time=1.0)),
    (MOBILE, dict(mass=3.0, damping=20.0, stiffness=150.0, static_force=-5.0,
                  direction=[0.0, 1.0, 0.0], free_time=1.0)),
    (ARM, dict(mass=1.0, damping=5.0, stiffness=100.0, static_force=2.0,
               direction=[1.0, 0.0, 0.0], free_time=0.0)),
], ids=["arm-oblique", "mobile-lateral", "arm-attached-from-start"])
def test_spring_damper_object_is_recovered_by_least_squares(urdf, params):
    run = run_attached_object(urdf, duration=4.0, **params)
    err, scale = object_balance_error(run)
    assert err < 1e-9 * max(1.0, scale)
    # batch least squares (numpy.linalg.lstsq) of f = [x'', x', x, 1] theta on the object's
    # slide state returns the parameters the object was built with
    u = np.asarray(run.truth["direction"])
    c = run.in_contact[:-1]
    x, v = run.object_position[:-1][c], run.object_velocity[:-1][c]
    a = (np.diff(run.object_velocity) / run.dt)[c]
    H = np.column_stack([a, v, x, np.ones_like(x)])
    theta, *_ = np.linalg.lstsq(H, run.true_force[:-1][c] @ u, rcond=None)
    truth = [params["mass"], params["damping"], params["stiffness"], params["static_force"]]
    np.testing.assert_allclose(theta, truth, rtol=1e-6)
    assert np.linalg.cond(H / np.abs(H).max(axis=0)) < 100  # the path excites all four
    # the robot side of the same force: J^T F_ext (Pinocchio) = recorded external torque
    pr = PinRobot(run.urdf, run.joint_names)
    for k in np.flatnonzero(run.in_contact)[::50]:
        _, J = pr.tip(run.position[k])
        np.testing.assert_allclose(J.T @ -run.true_force[k], run.true_external_torque[k],
                                   atol=1e-8)


# ---------------------------------------------------------------------------------------------
# 4. corrupt()
# ---------------------------------------------------------------------------------------------

def test_corrupt_statistics_and_copy(applied):
    run, _ = applied
    n = len(run.joint_names)
    bias = np.linspace(-0.5, 0.5, n)
    noisy = corrupt(run, effort_noise=0.2, velocity_noise=0.01, encoder_bits=16, bias=bias,
                       seed=3)
    assert noisy.effort is not run.effort and run.corruption == {}
    np.testing.assert_array_equal(noisy.true_force, run.true_force)
    de = noisy.effort - run.effort - bias
    dv = noisy.velocity - run.velocity
    N = de.size
    # sample variance of N Gaussian draws: (N-1) s^2 / sigma^2 ~ chi2(N-1) (scipy.stats),
    # two-sided bounds at probability 1e-6
    lo, hi = stats.chi2.ppf([0.5e-6, 1 - 0.5e-6], N - 1) / (N - 1)
    assert lo < de.var(ddof=1) / 0.2**2 < hi
    assert lo < dv.var(ddof=1) / 0.01**2 < hi
    # mean of the bias-free noise: |mean| < 5 sigma / sqrt(N_per_joint) per joint
    assert np.all(np.abs(de.mean(axis=0)) < 5 * 0.2 / np.sqrt(len(de)))
    step = 2 * np.pi / 2**16
    ang = np.array([k != "prismatic" for k in run.joint_kinds])
    qn = noisy.position[:, ang] / step
    np.testing.assert_allclose(qn, np.round(qn), atol=1e-6)  # multiples of the encoder step
    assert np.abs(noisy.position[:, ang] - run.position[:, ang]).max() <= step / 2 + 1e-12
    np.testing.assert_array_equal(noisy.position[:, ~ang], run.position[:, ~ang])
    again = corrupt(run, effort_noise=0.2, velocity_noise=0.01, encoder_bits=16, bias=bias,
                       seed=3)
    np.testing.assert_array_equal(again.effort, noisy.effort)  # seeded
