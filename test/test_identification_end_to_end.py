"""End to end: a robot whose URDF is wrong (link masses off by 10-25 %, centres of mass by
1-2 cm, a 1.5 kg tool at the flange the URDF lacks), commissioned with the excitation command's
motion and ``tune``; the force estimate on a task it has not seen is then as good as with the
exact model.

Reference: MuJoCo (an independent physics engine) simulates the true robot: the commissioning
motion (joint computed torque along the excitation command's trajectory) and a task (a known
force at the flange, mujoco_world.arm.run_applied_force); its applied force is the ground truth.
Robots: our Marten and two real robots' published URDFs from PyPI example-robot-data (UR5,
xArm7). Sensors: effort noise 0.1 N·m, velocity noise 0.003 rad/s, 18-bit encoders, a constant
bias per joint of up to 1.5 N·m (the levels of the package's other accuracy tests).

The bound: force RMSE with the identified model within 1.25x of the exact model's (the issue's
target), with the same tuned settings. The published URDF is clearly worse (so the test has
something to find).
"""
from __future__ import annotations

import json

import identification_world as W
import numpy as np
import pytest
import real_robots

from interaction_estimator import cli
from interaction_estimator.core.model import RobotModel
from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.samples import Sample
from interaction_estimator.io.bag_writer import BagWriter
from interaction_estimator.io.cdr import (
    JOINT_STATE,
    STRING,
    WRENCH_STAMPED,
    JointStateEncoder,
    encode_string,
    encode_wrench_stamped,
)
from interaction_estimator.io.parameter_file import parameters_from_yaml
from interaction_estimator.offline import tune as T
from interaction_estimator.offline.excitation import optimize, resolve
from interaction_estimator.offline.identification import Tool
from interaction_estimator.offline.tune.model import ModelRequest
from interaction_estimator.sim import marten
from interaction_estimator.sim.mujoco_world.arm import example_force, run_applied_force

ROBOTS = {  # URDF, flange (tool mount and contact frame), task start posture (rad)
    "marten": (marten.arm_urdf(), "tool_tip", None),
    "ur5": (real_robots.urdf_text("ur5"), "tool0", [0.0, -1.3, 1.6, -1.9, -1.57, 0.3]),
    "xarm7": (real_robots.urdf_text("xarm7"), "link_eef", [0.0, 0.3, 0.0, 1.2, 0.0, 0.9, 0.0]),
}
QUANTUM = 2 * np.pi / 2 ** 18   # rad, 18-bit encoders
START = 1.0                     # s, stamps start here (a zero stamp means "unset")


def sensed(position, velocity, effort, bias, seed):
    rng = np.random.default_rng(seed)
    return (np.round(position / QUANTUM) * QUANTUM,
            velocity + 0.003 * rng.standard_normal(velocity.shape),
            effort + 0.1 * rng.standard_normal(effort.shape) + bias)


class Case:
    """The true robot, the commissioning run and two task runs (one for tune, one unseen)."""

    def __init__(self, name: str):
        urdf, self.flange, q0 = ROBOTS[name]
        self.name = name
        self.published = W.kinematic_only(urdf)
        truth, _ = W.perturb(self.published, 21)
        self.truth = W.add_tool(truth, self.flange, 1.5, (0.01, -0.01, 0.04),
                                (0.004, 0.005, 0.002))
        robot = RobotModel(self.published, self.flange)
        self.names = robot.joint_names
        self.bias = np.random.default_rng(5).uniform(-1.5, 1.5, len(self.names))
        # the commissioning motion as the excitation command makes it (a short search)
        limits = resolve(self.names, self.published, 0.3, {}, 4.0, {}, {})
        motion = optimize(robot, self.published, limits, 10.0, 5, seed=0, starts=8,
                          iterations=3).trajectory

        def ref(t):
            q, v, a = motion.evaluate(np.array([t]))
            return q[0], v[0], a[0]
        run = W.track(W.load(self.truth), ref, 30.0)
        self.commissioning = (run["time"], *sensed(run["position"], run["velocity"],
                                                   run["effort"], self.bias, 1))
        self.tasks = []
        for seed in (1, 2):
            r = run_applied_force(self.truth, example_force(free_time=1.5, peak=30.0),
                                     duration=7.0, free_time=1.5, seed=seed, q0=q0,
                                     contact_frame=self.flange)
            assert tuple(r.joint_names) == self.names
            self.tasks.append((r, sensed(r.position, r.velocity, r.effort, self.bias,
                                         seed + 10)))

    def recording(self, label, time, q, v, e) -> T.Recording:
        return T.Recording(label, [Sample(float(t) + START, self.names, q[k], v[k], e[k])
                                   for k, t in enumerate(time)], self.published)

    def task_recording(self, i: int) -> T.Recording:
        r, (q, v, e) = self.tasks[i]
        return self.recording(f"task {i}", r.time, q, v, e)

    def force_rmse(self, urdf: str, settings) -> float:
        """N, on the unseen task, from 0.5 s after the contact began."""
        r, (q, v, e) = self.tasks[1]
        pipe = Pipeline(settings, urdf)
        F = np.array([pipe.process(s).force for s in self.recording("unseen", r.time, q, v, e)
                      .samples])
        keep = r.time > 2.0
        return float(np.sqrt(np.mean(np.sum((F[keep] - r.true_force[keep]) ** 2, axis=1))))


@pytest.fixture(scope="module", params=sorted(ROBOTS))
def case(request):
    return Case(request.param)


def test_after_tune_the_force_is_as_good_as_with_the_exact_model(case):
    commissioning = case.recording("commissioning", *case.commissioning)
    result = T.tune([case.task_recording(0), commissioning], case.published,
                    {"contact_frame": case.flange},
                    model=ModelRequest(free_motion=(1,), tools=(Tool("tool", case.flange),)))
    ident = result.model.identification
    settings = result.settings
    exact = case.force_rmse(case.truth, settings)
    published = case.force_rmse(case.published, settings)
    identified = case.force_rmse(result.model.urdf, settings)
    print(f"{case.name}: force RMSE exact {exact:.3f} N, published {published:.3f} N, "
          f"identified {identified:.3f} N; held-out free-motion residual "
          f"{ident.residual_before.round(3)} -> {ident.residual_after.round(3)} N·m")
    assert identified <= 1.25 * exact, (identified, exact)
    assert published > 1.5 * exact            # the wrong model mattered
    assert np.all(ident.residual_after < ident.residual_before)
    assert [r for r in ident.links if r.kind == "tool"][0].status == "identified"


# --------------------------------------------------------------------------------------------
# the command line, and who uses the URDF it writes


def write_bag(path, case: Case, time, q, v, e, force=None):
    enc = JointStateEncoder()
    root = RobotModel(case.published, case.flange).root_frame
    with BagWriter(path, "mcap") as w:
        w.write("/robot_description", STRING, 0, encode_string(case.published),
                transient_local=True)
        for k, t in enumerate(time):
            ns = int(round((t + START) * 1e9))
            sec, nsec = divmod(ns, 1_000_000_000)
            w.write("/joint_states", JOINT_STATE, ns,
                    enc.encode(sec, nsec, "", case.names, q[k], v[k], e[k]))
            if force is not None:
                w.write("/ground_truth/wrench", WRENCH_STAMPED, ns,
                        encode_wrench_stamped(sec, nsec, root, force[k], (0.0, 0.0, 0.0)))


@pytest.fixture(scope="module")
def marten_files(tmp_path_factory):
    case = Case("marten")
    d = tmp_path_factory.mktemp("commissioning")
    write_bag(d / "commissioning", case, *case.commissioning)
    for i, (r, (q, v, e)) in enumerate(case.tasks):
        write_bag(d / f"task{i}", case, r.time, q, v, e, r.true_force)
    params = d / "base.yaml"
    params.write_text("/**/interaction_estimator:\n  ros__parameters:\n"
                      f"    contact_frame: {case.flange}\n")
    out = d / "tuned" / "marten.yaml"
    out.parent.mkdir()
    code = T.main([str(d / "task0"), "--free-motion", str(d / "commissioning"),
                   "--params", str(params), "--tool-frame", case.flange, "--out", str(out),
                   "--report", str(d / "report")])
    assert code == 0
    return case, d, out


def test_tune_writes_the_urdf_beside_the_file_and_points_at_it(marten_files):
    case, d, out = marten_files
    urdf = out.with_suffix(".urdf")
    assert urdf.exists()
    text = out.read_text()
    assert parameters_from_yaml(text)["robot_description_file"] == "marten.urdf"  # relative
    model = RobotModel(urdf.read_text(), case.flange)               # loads, inertial check too
    assert model.model.existFrame("tool")
    report = (d / "report" / T.REPORT_NAME).read_text()
    assert "Robot model" in report and "held-out" in report


def test_replay_uses_the_identified_urdf_unless_told_otherwise(marten_files, tmp_path, capsys):
    case, d, out = marten_files
    # the bag carries the published URDF; the parameter file's robot_description_file wins
    assert cli.main(["replay", str(d / "task1"), "--params", str(out), "--out",
                     str(tmp_path / "a")]) == 0
    summary = json.loads((tmp_path / "a" / "summary.json").read_text())
    assert summary["source"]["urdf"] == f"robot_description_file {out.with_suffix('.urdf')}"
    identified = summary["force"]["rmse_contact_N"]
    # --urdf wins over everything: the published URDF again
    published_path = tmp_path / "published.urdf"
    published_path.write_text(case.published)
    assert cli.main(["replay", str(d / "task1"), "--params", str(out), "--urdf",
                     str(published_path), "--out", str(tmp_path / "b")]) == 0
    summary_b = json.loads((tmp_path / "b" / "summary.json").read_text())
    assert summary_b["source"]["urdf"] == f"file {published_path}"
    assert summary_b["force"]["rmse_contact_N"] > 1.5 * identified
    capsys.readouterr()


def test_the_node_loads_the_identified_urdf_relative_to_its_parameter_file(marten_files,
                                                                            tmp_path):
    # the real node over DDS on this machine (loopback only, its own domain); it runs in the
    # repository's directory, not the parameter file's
    from ros_harness import NodeProcess, Peer, next_domain

    case, d, out = marten_files
    domain = next_domain()
    node = NodeProcess(["--params-file", str(out)], domain, tmp_path / "node.log")
    peer = Peer(domain)
    try:
        peer.wait_connected(node)
        peer.wait_status(lambda kv, st: kv["state"] == "waiting_for_input", 20, "the model",
                         node)
        assert f"from file {out.with_suffix('.urdf')}" in node.log(), node.log()
    finally:
        peer.close()
        node.stop()
