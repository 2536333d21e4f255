"""Identification of the robot's own dynamics against outside references.

* Pinocchio: the joint-torque regressor times the URDF's parameters equals ``pinocchio.rnea``;
  the log-Cholesky map (``pinocchio.LogCholeskyParameters``) inverts ours; rigid transforms of
  inertias (``SE3.act``).
* MuJoCo (an independent engine, test/identification_world.py): noise-free free motion of a
  perturbed robot carrying a tool recovers its base parameters to 1e-6 relative, and the
  identified URDF's M(q) and g(q) (Pinocchio) equal MuJoCo's on held-out configurations.
* Physical consistency of every identified link and tool as Traversaro, Brossette, Escande and
  Nori state it (IROS 2016): positive mass, principal moments about the centre of mass
  non-negative and satisfying the triangle inequalities, checked here from the eigenvalues
  (numpy), independently of the log-Cholesky construction.
* Textbook closed forms: a solid cuboid's inertia (m/12 (b^2 + c^2), ...).
* Real robots' URDFs from PyPI example-robot-data (UR5, xArm7, Panda) beside our Marten.
"""
from __future__ import annotations

import identification_world as W
import numpy as np
import pinocchio as pin
import pytest
import real_robots

from interaction_estimator.core.model import RobotModel
from interaction_estimator.offline.excitation import fit_to_limits, resolve
from interaction_estimator.offline.identification import (
    Options,
    RawRun,
    Tool,
    exact,
    identify_model,
    prepare,
)
from interaction_estimator.offline.identification import inertia as inr
from interaction_estimator.offline.identification.regressor import (
    base_parameters,
    random_states,
    stacked_regressor,
)
from interaction_estimator.sim import marten

ROBOTS = {"marten": (marten.arm_urdf(), "tool_tip"),
          "ur5": (real_robots.urdf_text("ur5"), "tool0"),
          "xarm7": (real_robots.urdf_text("xarm7"), "link_eef"),
          "panda": (real_robots.urdf_text("panda"), "panda_hand_tcp")}


def body_parameters(model: pin.Model) -> np.ndarray:
    return np.concatenate([model.inertias[j].toDynamicParameters()
                           for j in range(1, model.njoints)])


@pytest.mark.parametrize("name", sorted(ROBOTS))
def test_regressor_times_parameters_is_pinocchio_rnea(name):
    urdf, frame = ROBOTS[name]
    model = RobotModel(urdf, frame).model
    data = model.createData()
    pi = body_parameters(model)
    Q, V, A = random_states(model, 20, seed=4)
    for q, v, a in zip(Q, V, A):
        Y = pin.computeJointTorqueRegressor(model, data, q, v, a)
        ref = pin.rnea(model, model.createData(), q, v, a)
        np.testing.assert_allclose(Y @ pi, ref, rtol=1e-12, atol=1e-10 * np.abs(ref).max())


@pytest.mark.parametrize("name", sorted(ROBOTS))
def test_base_parameters_give_the_same_torques_at_new_states(name):
    urdf, frame = ROBOTS[name]
    model = RobotModel(urdf, frame).model
    base = base_parameters(model, [str(j) for j in range(1, model.njoints)], seed=0)
    Y = stacked_regressor(model, *random_states(model, 40, seed=11))   # states not used above
    pi = body_parameters(model)
    tau = Y @ pi
    np.testing.assert_allclose(Y[:, base.independent] @ (base.matrix @ pi), tau,
                               atol=1e-9 * np.abs(tau).max())
    # the base columns are independent at the new states (numpy's rank), and no column can be
    # added: the remaining columns lie in their span
    assert np.linalg.matrix_rank(Y[:, base.independent]) == base.count
    assert np.linalg.matrix_rank(Y) == base.count


def test_log_cholesky_inverse_and_transform_match_pinocchio():
    rng = np.random.default_rng(2)
    for k in range(20):
        # physical bodies: Pinocchio's closed-form solids, placed anywhere
        size = rng.uniform(0.02, 0.5, 3)
        body = [pin.Inertia.FromBox, pin.Inertia.FromEllipsoid][k % 2](
            rng.uniform(0.1, 5.0), *size)
        body = pin.SE3.Random().act(body)
        pi = body.toDynamicParameters()
        theta = inr.to_log_cholesky(pi, 1e-12)
        np.testing.assert_allclose(pin.LogCholeskyParameters(theta).toDynamicParameters(), pi,
                                   rtol=1e-10, atol=1e-12)
        M = pin.SE3.Random()
        np.testing.assert_allclose(inr.transform_matrix(M.rotation, M.translation) @ pi,
                                   M.act(body).toDynamicParameters(), atol=1e-12)


def test_consistency_conditions_on_textbook_bodies():
    # solid cuboid 2 kg, 0.3 x 0.2 x 0.1 m: I = m/12 (b^2 + c^2), ... about its centre
    m, a, b, c = 2.0, 0.3, 0.2, 0.1
    i_c = np.diag([m / 12 * (b * b + c * c), m / 12 * (a * a + c * c), m / 12 * (a * a + b * b)])
    good = inr.parameters(m, np.array([0.1, 0.0, 0.05]), i_c)
    assert inr.consistency_violation(good) == ""
    assert "not positive" in inr.consistency_violation(inr.parameters(-1.0, np.zeros(3), i_c))
    assert "triangle" in inr.consistency_violation(
        inr.parameters(m, np.zeros(3), np.diag([0.001, 0.001, 0.05])))
    assert "negative" in inr.consistency_violation(
        inr.parameters(m, np.zeros(3), np.diag([-0.001, 0.02, 0.02])))
    np.testing.assert_allclose(inr.summary(good)[2], i_c, atol=1e-15)


def traversaro_consistent(pi: np.ndarray) -> bool:
    """Traversaro et al. 2016 conditions from the eigenvalues, written out here."""
    m = pi[0]
    if not m > 0:
        return False
    c = pi[1:4] / m
    io = inr.tensor(pi[4:])
    ic = io - m * (c @ c * np.eye(3) - np.outer(c, c))
    j = np.sort(np.linalg.eigvalsh(ic))
    tol = 1e-12 * np.trace(io)
    return j[0] >= -tol and j[2] <= j[0] + j[1] + tol


# --------------------------------------------------------------------------------------------
# MuJoCo: a perturbed robot with a tool, moved along an excitation-style trajectory


def excitation_reference(robot: RobotModel, urdf: str, seed: int, held=(), ranges=None):
    """A random finite-Fourier-series trajectory fitted to the robot's limits (the excitation
    command's own construction, without its search), returned as a function of time."""
    limits = resolve(robot.joint_names, urdf, 0.3, {}, 4.0, ranges or {},
                     {h: None for h in held})
    rng = np.random.default_rng(seed)
    n, L = len(limits), 5
    a, b = rng.standard_normal((L, n)), rng.standard_normal((L, n))
    a[-1] = -a[:-1].sum(axis=0)
    b[-1] = -(np.arange(1, L)[:, None] * b[:-1]).sum(axis=0) / L
    traj = fit_to_limits(a, b, 10.0, limits)

    def ref(t: float):
        q, v, acc = traj.evaluate(np.array([t]))
        return q[0], v[0], acc[0]
    return ref, traj


def true_robot(name: str, seed: int, tool_link: str, tool_mass: float):
    urdf, frame = ROBOTS[name]
    truth, _ = W.perturb(W.kinematic_only(urdf), seed)
    return W.add_tool(truth, tool_link, tool_mass, (0.01, -0.015, 0.03),
                      (0.004, 0.005, 0.002)), frame


CASES = {"marten": ("tool_tip", 1.5), "ur5": ("tool0", 1.8), "xarm7": ("link_eef", 1.2)}


@pytest.fixture(scope="module", params=sorted(CASES))
def noise_free(request):
    name = request.param
    tool_link, tool_mass = CASES[name]
    truth, frame = true_robot(name, 7, tool_link, tool_mass)
    nominal = ROBOTS[name][0]
    robot = RobotModel(nominal, frame)
    ref, traj = excitation_reference(robot, nominal, seed=3)
    world = W.load(truth)
    run = W.track(world, ref, 20.0)
    step = 5
    data = exact(run["time"][::step], run["position"][::step], run["velocity"][::step],
                 run["acceleration"][::step], run["effort"][::step])
    result = identify_model(robot, nominal, data, 1, Options(),
                            [Tool("payload", tool_link)])
    return name, truth, nominal, frame, robot, result, world, traj


def test_noise_free_motion_recovers_the_base_parameters(noise_free):
    name, truth, nominal, frame, robot, result, world, traj = noise_free
    # the truth's base parameters: Pinocchio's bodies of the true URDF (tool included)
    true_model = RobotModel(truth, frame).model
    beta_true = result.base.matrix @ body_parameters(true_model)
    rel = np.abs(result.final.beta - beta_true) / np.abs(beta_true).max()
    assert rel.max() < 1e-6, (name, rel.max())


def test_identified_urdf_has_mujocos_mass_matrix_and_gravity(noise_free):
    name, truth, nominal, frame, robot, result, world, traj = noise_free
    identified = RobotModel(result.urdf(nominal, ["test"]), frame)
    m, d = identified.model, identified.data
    rng = np.random.default_rng(99)
    q_all, _, _ = traj.evaluate(np.linspace(0, traj.period, 400))
    lo, hi = q_all.min(axis=0), q_all.max(axis=0)
    for _ in range(15):   # held-out configurations: random within the range the motion covered
        q = rng.uniform(lo, hi)
        M = pin.crba(m, d, q)
        M = np.triu(M) + np.triu(M, 1).T
        g = pin.computeGeneralizedGravity(m, d, q)
        M_ref, g_ref = world.mass_matrix(q), world.gravity(q)
        assert np.abs(M - M_ref).max() < 1e-6 * np.abs(M_ref).max(), name
        assert np.abs(g - g_ref).max() < 1e-6 * np.abs(g_ref).max(), name


def test_every_identified_link_and_tool_is_physically_consistent(noise_free):
    name, truth, nominal, frame, robot, result, world, traj = noise_free
    assert any(r.status == "identified" for r in result.links)
    for r in result.links:
        assert traversaro_consistent(r.pi), (name, r.name)
    # and as Pinocchio reads them back from the written URDF: every link with mass
    written = RobotModel(result.urdf(nominal, ["test"]), frame)
    for j in range(1, written.model.njoints):
        assert traversaro_consistent(written.model.inertias[j].toDynamicParameters())


def test_noisy_motion_through_the_smoothing_differentiator():
    # the same robot with sensor noise (effort 0.1 N·m, velocity 0.003 rad/s, a bias), the
    # accelerations from the Savitzky-Golay differentiator: the held-out residual falls to the
    # noise level and the tool is found
    truth, frame = true_robot("marten", 11, "tool_tip", 1.6)
    nominal = ROBOTS["marten"][0]
    robot = RobotModel(nominal, frame)
    ref, traj = excitation_reference(robot, nominal, seed=5)
    run = W.track(W.load(truth), ref, 40.0)
    rng = np.random.default_rng(0)
    v = run["velocity"] + 0.003 * rng.standard_normal(run["velocity"].shape)
    e = run["effort"] + 0.1 * rng.standard_normal(run["effort"].shape) + 0.7
    data = prepare([RawRun(0, run["time"], run["position"], v, e)], robot)
    result = identify_model(robot, nominal, data, 1, Options(), [Tool("payload", "tool_tip")])
    assert np.all(result.residual_after < 0.5 * result.residual_before)
    assert np.all(result.residual_after < 0.2), result.residual_after  # N·m; noise 0.1 white
    np.testing.assert_allclose(result.bias[0], 0.7, atol=0.15)
    # the identified model's M(q) and g(q) against MuJoCo's on configurations of the motion's
    # range (not in the data): within 3 % of their largest entries, where the URDF as given
    # is off by more than 10 % (a tool's mass is not identifiable apart from the links before
    # it, the base parameters group them: the check is on the dynamics, not on the split)
    world = W.load(truth)
    identified = RobotModel(result.urdf(nominal, ["test"]), frame)
    rng = np.random.default_rng(5)
    q_all, _, _ = traj.evaluate(np.linspace(0, traj.period, 400))
    worst = {"identified": 0.0, "urdf": 0.0}
    for _ in range(15):
        q = rng.uniform(q_all.min(axis=0), q_all.max(axis=0))
        M_ref, g_ref = world.mass_matrix(q), world.gravity(q)
        for label, model in (("identified", identified), ("urdf", robot)):
            M = pin.crba(model.model, model.data, q)
            M = np.triu(M) + np.triu(M, 1).T
            g = pin.computeGeneralizedGravity(model.model, model.data, q)
            worst[label] = max(worst[label], np.abs(M - M_ref).max() / np.abs(M_ref).max(),
                               np.abs(g - g_ref).max() / np.abs(g_ref).max())
    assert worst["identified"] < 0.03 and worst["urdf"] > 0.1, worst


def test_a_link_the_data_cannot_tell_apart_is_kept_from_the_urdf(noise_free):
    # the first link of an arm on a fixed base with a vertical first axis: only its inertia
    # about that axis acts on the torques, and only summed with the next links' parameters (a
    # base parameter groups them, Gautier and Khalil 1990); the wider priors of the next links
    # take the sum, this link is kept and written exactly as in the URDF, and the base
    # parameters are still exact (the test above)
    name, truth, nominal, frame, robot, result, world, traj = noise_free
    first = result.layout.bodies[0]
    link = {r.name: r for r in result.links}[first.link]
    assert link.status == "kept" and link.determined < 0.5, (name, link.determined)
    assert any(f"{first.link}: not excited" in n for n in result.notes)
    written = RobotModel(result.urdf(nominal, ["test"]), frame).model
    j = written.getJointId(first.joint)
    np.testing.assert_array_equal(written.inertias[j].toDynamicParameters(),
                                  robot.model.inertias[j].toDynamicParameters())
