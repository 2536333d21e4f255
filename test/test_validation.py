"""The Monte-Carlo validation (interaction_estimator/offline/validation) against outside references,
and a seeded subset of its runs through the estimator.

References named beside each check:
* numpy.linalg.lstsq: batch least squares (noise-free data must give the truth back exactly).
* Recursive least squares from a diffuse prior equals batch least squares (Ljung, System
  Identification, 1999, 11.2), here against numpy.linalg.lstsq.
* Newton's second law on MuJoCo's slide joint, integrated by its semi-implicit Euler step, and
  the principle of virtual work (external joint torque = J^T F) with MuJoCo's own Jacobian.
* Pinocchio (crba, rnea), an independent rigid-body engine, on the real robots' published URDFs
  (PyPI example-robot-data): the MuJoCo copies must have the same dynamics.
* scipy.stats.chi2: the NEES bounds (Bar-Shalom, Li and Kirubarajan, 2001, 5.4).
* The integrated autocorrelation time of an AR(1) process, (1 + phi) / (1 - phi) (closed form,
  e.g. Sokal, Monte Carlo Methods in Statistical Mechanics, 1997).

The subset's checks of the estimator hold it to what it meets today (thresholds marked
"today"); they are to be raised to issue 17's targets as the estimation work lands.
"""

from __future__ import annotations

import math

import numpy as np
import pinocchio as pin
import pytest
from scipy import stats

from interaction_estimator.io.parameter_file import load_parameter_file
from interaction_estimator.offline.validation import methods, scenarios, scoring, table
from interaction_estimator.offline.validation.__main__ import parse_seeds
from interaction_estimator.offline.validation.robots import ROBOT_NAMES, robots
from interaction_estimator.offline.validation.runner import evaluate_runs
from interaction_estimator.sim.mujoco_world.object_world import ObjectWorld
from interaction_estimator.sim.mujoco_world.schedule import (
    ContactPhase,
    FreePhase,
    MultiSine,
    ObjectParams,
)

G0 = 9.80665  # m/s^2, standard gravity (CGPM 1901)
SUBSET = range(0, 35)  # 35 seeds: 7 per robot


# ---------------------------------------------------------------------------------------------
# The harness against outside references
# ---------------------------------------------------------------------------------------------


def test_batch_fit_recovers_noise_free_truth_exactly():
    # numpy.linalg.lstsq on exact data h . theta: the truth comes back to round-off
    rng = np.random.default_rng(1)
    H = np.column_stack(
        [rng.normal(size=500), rng.normal(size=500), rng.normal(size=500), np.ones(500)]
    )
    theta = np.array([2.5, 0.0, 300.0, -12.0])
    est, std = methods.batch_fit(H, H @ theta)
    np.testing.assert_allclose(est, theta, rtol=0, atol=1e-9)
    assert np.all(std < 1e-9)
    # fewer rows than parameters: no fit
    assert np.isnan(methods.batch_fit(H[:4], (H @ theta)[:4])[0]).all()


def test_naive_rls_equals_batch_least_squares_and_restarts_after_a_gap():
    # RLS from a diffuse prior = batch least squares of the same rows (Ljung 1999, 11.2)
    rng = np.random.default_rng(2)
    k = 800
    H = np.column_stack(
        [rng.normal(0, 2, k), rng.normal(0, 0.3, k), rng.normal(0, 0.05, k), np.ones(k)]
    )
    theta = np.array([4.0, 20.0, 500.0, 3.0])
    f = H @ theta + rng.normal(0, 0.5, k)
    t = np.arange(k) * 1e-3
    trace = methods.NaiveRLS().run(np.arange(k), t, H, f, k)
    ref, res, _, _ = np.linalg.lstsq(H, f, rcond=None)
    np.testing.assert_allclose(trace.theta[-1], ref, rtol=1e-5, atol=1e-6)
    s2 = float(res[0]) / (k - 4)
    # the residual sum accumulated from the finite prior P_0 = 1e6 I: equal to 1e-3
    np.testing.assert_allclose(
        trace.std[-1], np.sqrt(s2 * np.diag(np.linalg.inv(H.T @ H))), rtol=2e-3
    )
    # a gap longer than restart_gap starts afresh: the second half alone
    t2 = t.copy()
    t2[k // 2 :] += 5.0
    trace2 = methods.NaiveRLS(restart_gap=1.0).run(np.arange(k), t2, H, f, k)
    ref2 = np.linalg.lstsq(H[k // 2 :], f[k // 2 :], rcond=None)[0]
    np.testing.assert_allclose(trace2.theta[-1], ref2, rtol=1e-5, atol=1e-6)


def test_nees_bounds_are_scipy_chi_square_and_tell_over_from_under_confidence():
    rng = np.random.default_rng(3)
    m = 4000
    err = rng.normal(size=(m, 4))  # independent standard normal errors
    mask = np.ones((m, 4), bool)
    ok = scoring.nees_check(err, np.ones((m, 4)), mask)
    d = ok["dof_eff"]
    assert ok["lo"] == pytest.approx(stats.chi2.ppf(0.025, d) / d)
    assert ok["hi"] == pytest.approx(stats.chi2.ppf(0.975, d) / d)
    assert d == pytest.approx(4 * m, rel=0.1)  # white: about every square counts
    assert ok["inside"]
    assert not scoring.nees_check(err, 0.5 * np.ones((m, 4)), mask)["inside"]  # overconfident
    low = scoring.nees_check(err, 2.0 * np.ones((m, 4)), mask)
    assert not low["inside"] and low["value"] < low["lo"]  # too cautious
    assert scoring.nees_check(err, np.ones((m, 4)), np.zeros((m, 4), bool)) is None


def test_integrated_autocorrelation_time_of_ar1():
    # AR(1) x_t = phi x_{t-1} + e_t: tau = (1 + phi) / (1 - phi) (closed form)
    rng = np.random.default_rng(4)
    phi, n = 0.9, 200_000
    e = rng.normal(size=n)
    x = np.empty(n)
    x[0] = e[0]
    for i in range(1, n):
        x[i] = phi * x[i - 1] + e[i]
    assert scoring.integrated_autocorrelation_time(x) == pytest.approx(
        (1 + phi) / (1 - phi), rel=0.15
    )
    assert scoring.integrated_autocorrelation_time(rng.normal(size=5000)) == pytest.approx(
        1.0, abs=0.15
    )


def test_scale_and_excitation_from_the_truth_regressor():
    # a hold (the object does not move) excites only the static force; a multi-sine all four
    rng = np.random.default_rng(5)
    t = np.arange(0, 8, 1e-3)
    wig = 1e-7 * rng.normal(size=(len(t), 3))
    H_hold = np.column_stack([wig, np.ones(len(t))])
    f = 10.0 + 0.01 * rng.normal(size=len(t))
    s = scoring.scales(f, H_hold)
    assert s[3] == pytest.approx(0.05 * math.sqrt(np.mean(f * f)))  # 5 % of the RMS force
    theta = np.array([2.0, 0.0, 0.0, 10.0])
    noise = np.array([0.01, 1e-3, 1e-5, 0.0])  # m/s^2, m/s, m: the sensors' level
    exc, _ = scoring.excitation(H_hold, 0.05, np.maximum(np.abs(theta), s), noise)
    assert exc.tolist() == [False, False, False, True]
    # the scaled bound alone would count the micrometre wiggle (the scale grows as it shrinks)
    assert scoring.excitation(H_hold, 0.05, np.maximum(np.abs(theta), s))[0].all()
    w = 2 * np.pi * np.array([0.3, 0.9, 1.7])
    a = np.array([0.02, 0.01, 0.005])
    x = np.sin(np.outer(t, w)) @ a
    xd = np.cos(np.outer(t, w)) @ (a * w)
    xdd = -np.sin(np.outer(t, w)) @ (a * w * w)
    H = np.column_stack([xdd, xd, x, np.ones(len(t))])
    theta = np.array([3.0, 20.0, 400.0, 5.0])
    d = np.maximum(np.abs(theta), scoring.scales(H @ theta, H))
    exc, bound = scoring.excitation(H, 0.05, d, noise)
    assert exc.all() and np.all(bound < scoring.EXCITED_STD * d)
    # a single sine: x'' = -w^2 x, mass and stiffness cannot be told apart
    H1 = np.column_stack(
        [
            -(w[0] ** 2) * np.sin(w[0] * t),
            w[0] * np.cos(w[0] * t),
            np.sin(w[0] * t),
            np.ones(len(t)),
        ]
    ) * [0.02, 0.02, 0.02, 1.0]
    d1 = np.maximum(np.abs(theta), scoring.scales(H1 @ theta, H1))
    exc1, _ = scoring.excitation(H1, 0.05, d1, noise)
    assert exc1.tolist() == [False, True, False, True]


def test_time_to_convergence():
    t = np.arange(10.0)
    flag = np.array([0, 0, 1, 1, 0, 1, 1, 1, 1, 1], bool)
    assert scoring.time_to_convergence(t, flag, 0.0) == 5.0
    assert math.isinf(scoring.time_to_convergence(t, ~flag, 0.0))


def test_generator_draws_the_issues_ranges():
    specs = [scenarios.make_spec(s) for s in range(300)]
    objs = [p for sp in specs for _, p in sp.objects]
    mass = np.array([p.mass for p in objs])
    assert mass.min() >= 0.3 and mass.max() <= 30.0
    for name, hi in (("damping", 100.0), ("stiffness", 2000.0), ("static_force", 40.0)):
        v = np.array([getattr(p, name) for p in objs])
        assert np.abs(v).max() <= hi
        assert 0.25 <= np.mean(v == 0.0) <= 0.42, name  # exact zeros in about a third
    assert {sp.robot for sp in specs} == set(ROBOT_NAMES)
    assert {sp.rate for sp in specs} == set(scenarios.RATES)
    assert {sp.motion for sp in specs} == set(scenarios.MOTIONS)
    assert {sp.change for sp in specs} == set(scenarios.CHANGES)
    # a seed names the same run every time
    again = scenarios.make_spec(17)
    assert again.summary() == specs[17].summary()


def test_parameter_files_follow_one_rule(tmp_path):
    cat = robots()
    seen = {}
    for seed in range(40):
        spec = scenarios.make_spec(seed)
        entry = cat[spec.robot]
        path = tmp_path / f"{seed}.yaml"
        path.write_text(scenarios.parameter_file(spec, entry), encoding="utf-8")
        st = load_parameter_file(path)
        assert st["contact_frame"] == entry.contact_frame
        np.testing.assert_allclose(st["direction.vector"], spec.direction, atol=1e-12)
        # the datasheet's bounds, whatever this robot's own noise happened to be
        assert st["observer.effort_noise"] == entry.sensors.effort_noise[1]
        assert st["observer.velocity_noise"] == entry.sensors.velocity_noise[1]
        key = (spec.robot, spec.rate)
        values = {
            k: st[k]
            for k in (
                "observer.effort_noise",
                "observer.velocity_noise",
                "observer.max_gap",
                "health.min_rate",
            )
        }
        assert seen.setdefault(key, values) == values  # same robot and rate: same file


def test_seed_lists():
    assert parse_seeds("3,17,40-42") == [3, 17, 40, 41, 42]
    with pytest.raises(Exception, match="neither a number nor a range"):
        parse_seeds("4-x")


@pytest.mark.parametrize("name", ["panda", "ur5", "tiago"])
def test_real_robots_in_mujoco_have_pinocchios_dynamics(name):
    # The MuJoCo copy (meshes, transmissions and joint dynamics dropped, invalid inertias of
    # links welded to the base repaired) against Pinocchio on the published URDF as it is.
    entry = robots()[name]
    text = entry.urdf_text()
    world = ObjectWorld(text, entry.contact_frame, (1.0, 0.0, 0.0), q0=entry.q0)
    r = world.robot
    model = pin.buildModelFromXML(text)
    model.gravity.linear = np.array([0.0, 0.0, -G0])
    data = model.createData()
    joints = [model.joints[model.getJointId(nm)] for nm in r.joint_names]
    vidx = np.array([j.idx_v for j in joints])
    assert sorted(vidx.tolist()) == list(range(model.nv)) == list(range(r.n))
    rng = np.random.default_rng(6)
    import mujoco

    for _ in range(5):
        q = world.q0 + np.where(world.chain, rng.uniform(-0.3, 0.3, r.n), 0.0)
        v = rng.uniform(-1.0, 1.0, r.n)
        r.set_state(q, v)
        mujoco.mj_forward(r.model, r.data)
        qp = np.zeros(model.nq)
        for j, x in zip(joints, q):
            if j.nq == 2:
                qp[j.idx_q : j.idx_q + 2] = np.cos(x), np.sin(x)
            else:
                qp[j.idx_q] = x
        vp = np.zeros(model.nv)
        vp[vidx] = v
        M = pin.crba(model, data, qp)
        M = np.triu(M) + np.triu(M, 1).T
        bias = pin.rnea(model, data, qp, vp, np.zeros(model.nv))
        np.testing.assert_allclose(r.mass_matrix(), M[np.ix_(vidx, vidx)], rtol=1e-6, atol=1e-9)
        np.testing.assert_allclose(r.bias(), bias[vidx], rtol=1e-6, atol=1e-8)
    if name == "tiago":
        assert any("inertia not physically valid" in n for n in world.notes)


def test_object_world_bookkeeping_with_a_mimic_joint_and_a_change():
    # Panda (a mimic joint in its gripper) moving an object whose parameters change mid-contact:
    # Newton's second law on the slide, u . F = m x'' + c x' + k x + f0, holds to round-off,
    # and the attachment's own constraint torque is J_p^T (-F) (virtual work).
    entry = robots()["panda"]
    u = np.array([0.2, -0.5, 0.84])
    world = ObjectWorld(
        entry.urdf_path, entry.contact_frame, u, q0=entry.q0, gravity_on_object=True
    )
    motion = MultiSine([0.015, 0.01], [0.6, 1.5], [0.0, 1.0], 0.3, 0.4, 3.0)
    phases = [
        FreePhase(0.8, seed=1),
        ContactPhase(
            3.0,
            motion,
            (
                (0.0, ObjectParams(1.2, 8.0, 250.0, 4.0)),
                (1.5, ObjectParams(2.0, 0.0, 600.0, -6.0)),
            ),
        ),
    ]
    run = world.simulate(phases, 500.0)
    c = run.attached
    assert set(run.episode[c].tolist()) == {0, 1}
    pred = np.sum(run.regressor() * run.object_parameters, axis=1)
    f = run.force_along
    assert np.max(np.abs(f[c] - pred[c])) < 1e-8 * max(1.0, np.max(np.abs(f[c])))
    # the weight along u is part of the static force when gravity acts on the object
    assert run.object_parameters[c][0, 3] == pytest.approx(4.0 + 1.2 * G0 * world.u[2])
    u_n = world.u
    for row, k in enumerate(run.jacobian_index):
        if c[k]:
            np.testing.assert_allclose(
                run.external_torque[k], run.jacobian[row].T @ (-run.force[k]), rtol=1e-6, atol=1e-6
            )
    assert np.max(np.abs(run.other_constraint_torque)) < 0.05  # the mimic coupling, small
    assert np.allclose(u_n, u / np.linalg.norm(u))


# ---------------------------------------------------------------------------------------------
# A seeded subset of runs (short variant) through the whole validation
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def subset(request):
    cache = request.config.cache.mkdir("validation_runs")  # simulations kept between sessions
    return evaluate_runs(SUBSET, cache, jobs=2, short=True)


def test_subset_runs_and_covers_the_generator(subset):
    failed = [(r["seed"], r.get("error")) for r in subset if "error" in r]
    assert not failed
    assert {r["spec"]["robot"] for r in subset} == set(ROBOT_NAMES)
    kinds = {ep["kind"] for r in subset for ep in r["episodes"]}
    assert kinds == {"first", "after_step", "after_swap"}
    eps = [ep for r in subset for ep in r["episodes"]]
    assert any(all(ep["identifiable"]) for ep in eps)
    assert any(not any(ep["excited"]) or not all(ep["excited"]) for ep in eps)
    lines, fig = table.build_table(subset)
    text = table.render(lines)
    assert "PASS" in text or "FAIL" in text
    assert fig["runs"] == len(SUBSET) and fig["failed_runs"] == 0


def test_subset_batch_fit_matches_the_rls_on_the_same_rows(subset):
    # without a change the naive RLS has seen exactly the episode's rows: it must end where the
    # batch fit of those rows is (Ljung 1999, 11.2; numpy.linalg.lstsq). The rows are 0.1 s block
    # means, so a short contact gives 25-50 of them, and the RLS's prior P_0 = 1e6 I (a ridge term)
    # still pulls a weakly determined column by a few 1e-3 of its scale: compared where the batch
    # fit itself is within 30 %, to 0.5 % + 2 % of its largest error (our tolerance, no source)
    checked = 0
    for r in subset:
        if r["spec"]["change"] != "none":
            continue
        ep = r["episodes"][0]
        b, q = np.array(ep["batch"]["error"]), np.array(ep["rls"]["error"])
        if ep["batch"]["rows"] > 20 and np.all(np.isfinite(b)) and np.all(b < 0.3):
            np.testing.assert_allclose(q, b, atol=5e-3 + 2e-2 * b.max())
            checked += 1
    assert checked >= 5


def test_subset_estimator_today(subset):
    eps = [ep for r in subset for ep in r["episodes"]]
    felt = [ep for ep in eps if ep["felt"] and math.isfinite(ep["onset_delay"])]
    # force along u within 5 % of the peak (median over felt contacts found), today
    rmse = np.median([ep["force_rmse"] / ep["force_peak"] for ep in felt])
    assert rmse <= 0.05
    # parameters of identifiable episodes: median error <= 5 % (issue target 1.5 %), today
    full = [ep for ep in eps if all(ep["identifiable"])]
    err = [x for ep in full for x in ep["estimator"]["error"]]
    assert np.median(err) <= 0.05
    # a parameter the motion does not excite is rarely reported converged: <= 5 % of its
    # samples (issue target 1 %), today
    conv = sum(ep["estimator"]["nonexcited_converged"] for ep in eps)
    total = sum(ep["estimator"]["nonexcited_samples"] for ep in eps)
    assert total > 0 and conv / total <= 0.05
    # more honest than the naive RLS: for every parameter the truth lies inside +/- 3 std of
    # its converged samples more often (issue target >= 95 %), today
    for i in range(4):
        share = {
            m: sum(ep[m]["inside3"][i] for ep in eps)
            / max(1, sum(ep[m]["converged_samples"][i] for ep in eps))
            for m in ("estimator", "rls")
        }
        assert share["estimator"] >= share["rls"], i
