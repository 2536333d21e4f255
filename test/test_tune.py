"""Tests of the tuning command (issues 6 and 17): the robot's bias, friction and sensor noise
from recorded data, and nothing about any object.

References outside the package, named beside each check:
* the simulator's ground truth (interaction_estimator.sim.simulator: known bias, friction
  coefficients, effort and velocity noise, contact time, object parameters, true force);
* rclpy's own parameter-file reader for the ROS 2 types of the written file.

The training set is what a commissioning engineer records: the simulator's ``commissioning``
run (free motion only: every joint, the mobile base's x, y and yaw included, back and forth at
several speeds) and two tasks with contact (drawer, toolbox), all of one robot and one sensor
session (same seed: same bias). The tasks alone (the set without the commissioning run) leave
the base and the shoulder pitch without friction: they stand still or turn one way only.

Runs are short (5-12 s at 1 kHz) to keep the file near a minute and a half on two shared cores.
"""
from __future__ import annotations

import dataclasses
import math
import re
import subprocess
import sys

import numpy as np
import pytest

from interaction_estimator.core.environment import PARAMETER_NAMES
from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.samples import Sample
from interaction_estimator.core.settings import SPEC_BY_NAME, Settings
from interaction_estimator.io.files import write_atomic
from interaction_estimator.io.parameter_file import load_parameter_file, parameters_from_yaml
from interaction_estimator.offline import tune as T
from interaction_estimator.sim.recording import SIMULATED_TIME_OFFSET, write_simulated_bag
from interaction_estimator.sim.simulator import simulate

DURATION = {"drawer": 5.0, "toolbox": 6.0, "commissioning": 12.0}
TASKS = ("drawer", "toolbox")                 # with contact
TRAINING = TASKS + ("commissioning",)         # the commissioning run last: no contact


def cut(run, t0: float, t1: float):
    """The part t0 <= t < t1 (s) of a simulated run (every per-sample array sliced)."""
    keep = (run.time >= t0) & (run.time < t1)
    arrays = {f.name: getattr(run, f.name)[keep] for f in dataclasses.fields(run)
              if isinstance(getattr(run, f.name), np.ndarray)
              and getattr(run, f.name).shape[:1] == run.time.shape}
    return dataclasses.replace(run, **arrays)


def heavier_arm_urdf(urdf: str, factor: float = 2.0) -> str:
    """Marten with the upper arm and forearm (links 2 and 4) heavier: a different robot. (At
    1.5 x the toolbox's 1.6 s of free motion left 4.2 x what the noise explains on the
    shoulder pitch against the refusal's 4 x: too close to call; 2 x leaves 7 x.)"""
    for link in ("marten_link2", "marten_link4"):
        urdf, n = re.subn(rf'(<link name="{link}">\s*<inertial>\s*<origin[^>]*/>\s*'
                          r'<mass value=")([0-9.]+)',
                          lambda m: m.group(1) + f"{float(m.group(2)) * factor:.4f}", urdf)
        assert n == 1, link
    return urdf


OTHER_ROBOT_URDF = """<?xml version="1.0"?>
<robot name="other_bot">
  <link name="base"/>
  <joint name="other_j1" type="revolute"><parent link="base"/><child link="l1"/>
    <axis xyz="0 0 1"/><limit lower="-3" upper="3" effort="50" velocity="2"/></joint>
  <link name="l1"><inertial><origin xyz="0 0 0.1"/><mass value="1.0"/>
    <inertia ixx="0.01" ixy="0" ixz="0" iyy="0.01" iyz="0" izz="0.01"/></inertial></link>
  <joint name="tool_mount" type="fixed"><parent link="l1"/><child link="tool_tip"/>
    <origin xyz="0 0 0.2"/></joint>
  <link name="tool_tip"/>
</robot>
"""


# --------------------------------------------------------------------------------------------
# fixtures: two simulated tasks of the same robot (same seed: same sensor bias), as bags


@pytest.fixture(scope="module")
def runs():
    return {s: simulate(s, duration=DURATION[s], seed=1, rate=1000.0, effort_side="motor")
            for s in TRAINING}


@pytest.fixture(scope="module")
def bags(runs, tmp_path_factory):
    d = tmp_path_factory.mktemp("tune_bags")
    paths = {}
    for s, run in runs.items():
        paths[s] = d / f"{s}_bag"
        write_simulated_bag(paths[s], run)
    return paths


@pytest.fixture(scope="module")
def tuned(bags):
    recs = [T.read_bag(bags[s]) for s in TRAINING]
    result = T.tune(recs, recs[0].urdf, {})
    return result, recs


@pytest.fixture(scope="module")
def tuned_on_tasks(bags):
    """The tasks alone, without the commissioning run: some joints never move both ways."""
    recs = [T.read_bag(bags[s]) for s in TASKS]
    return T.tune(recs, recs[0].urdf, {})


@pytest.fixture(scope="module")
def written(tuned, tmp_path_factory):
    result, _ = tuned
    path = tmp_path_factory.mktemp("tune_out") / "tuned.yaml"
    write_atomic(path, result.parameter_file(["test"]))
    return path


def truth_index(run, name: str) -> int:
    return list(run.joint_names).index(name)


# --------------------------------------------------------------------------------------------
# segments


def test_segments_are_those_of_the_simulation(tuned, runs):
    result, _ = tuned
    for b, s in enumerate(TASKS):
        run = runs[s]
        onset = run.truth["contact_time"] + SIMULATED_TIME_OFFSET   # simulator truth, bag time
        end = run.time[-1] + SIMULATED_TIME_OFFSET
        free = [g for g in result.segments if g.bag == b and g.kind == "free"]
        contact = [g for g in result.segments if g.bag == b and g.kind == "contact"]
        assert free and contact
        assert all(g.end < onset for g in free)                     # simulator truth
        assert sum(g.duration for g in free) > 1.0
        assert onset <= contact[0].start < onset + 0.1               # simulator truth
        assert sum(g.duration for g in contact) > 0.9 * (end - onset)


def test_a_bag_without_contact_serves_bias_friction_and_noise_and_says_so(tuned, runs):
    result, recs = tuned
    b = TRAINING.index("commissioning")
    run = runs["commissioning"]
    assert not run.in_contact.any() and run.truth["contact_time"] is None  # simulator truth
    assert recs[b].truth is None           # the bag says it has no object parameters
    assert result.free_only == [b]
    assert not [g for g in result.segments if g.bag == b and g.kind == "contact"]
    assert not (result.traces[b].phase == T.CONTACT).any()       # no contact found in it
    free = sum(g.duration for g in result.segments if g.bag == b and g.kind == "free")
    assert free > 0.95 * (run.time[-1] - run.time[0] - T.margin(result.base, result.joints))
    text = T.explain(result)
    assert f"bag {b + 1}  no contact: free motion only, used for bias, friction and sensor " \
           "noise" in text
    header = "\n".join(T.file_header(result, "test"))
    assert "bags without contact" in header and "commissioning_bag" in header


# --------------------------------------------------------------------------------------------
# bias, friction and noise against the simulator's truth (the values it injected)


def test_bias_against_simulator_truth(tuned, runs):
    result, _ = tuned
    true_bias = runs["drawer"].truth["bias"]   # simulator truth (same seed: same bias in all)
    b = TRAINING.index("commissioning")
    assert len(result.identification.joints) == 10
    for j in result.identification.joints:
        true = true_bias[truth_index(runs["drawer"], j.name)]
        # the commissioning run moves every joint: its bias within 0.05 N·m (N) on all ten
        assert abs(j.bias[b] - true) < 0.05, (j.name, j.bias[b], true)     # simulator truth
        # the tasks' own biases come from their 1.6 s of free motion: within 0.05, or within
        # the 95 % interval the tool states when that is wider (the base, whose observer
        # residual is noisy, there stands still)
        for k in range(len(TASKS)):
            err, ci = abs(j.bias[k] - true), j.bias_ci[k]
            assert err < max(0.05, ci), (j.name, TASKS[k], err, ci)       # simulator truth


def test_friction_against_simulator_truth(tuned, runs):
    result, _ = tuned
    run = runs["commissioning"]
    covered = 0
    for j in result.identification.joints:
        assert j.friction_identified, (j.name, j.friction_note)
        i = truth_index(run, j.name)
        for est, ci, true in ((j.viscous, j.viscous_ci, run.truth["friction_viscous"][i]),
                              (j.coulomb, j.coulomb_ci, run.truth["friction_coulomb"][i])):
            assert abs(est - true) <= 0.1 * true, (j.name, est, true)     # simulator truth
            covered += abs(est - true) <= ci               # simulator truth in the 95 % CI
    assert len(result.identification.joints) == 10
    assert covered >= 0.75 * 20, covered
    assert not any("friction not identified" in w for w in result.warnings)


def test_joints_that_did_not_move_keep_the_base_friction(tuned_on_tasks):
    # without the commissioning run, the tasks alone: the simulated base stands still and the
    # shoulder pitch turns one way only in free motion (simulator: base_follows is False for
    # the drawer and the toolbox)
    result = tuned_on_tasks
    names = {j.name: j for j in result.identification.joints}
    for name in ("marten_base_x", "marten_base_y", "marten_base_yaw", "marten_shoulder_pitch"):
        assert not names[name].friction_identified
        assert any(name in w and "friction not identified" in w for w in result.warnings)
    assert names["marten_elbow_pitch"].friction_identified       # moved both ways
    # with a base file that has friction for them, that friction is kept (refit only: the
    # recorded passes are reused)
    joints = result.joints
    base = result.base.replace({"joint_names": list(joints),
                                "friction.viscous": [5.0] * len(joints),
                                "friction.coulomb": [3.0] * len(joints)})
    ident = T.identify(result.taps, result.masks, base, joints)
    kept = 0
    for j in ident.joints:
        if not j.friction_identified:
            kept += 1
            assert (j.viscous, j.coulomb) == (5.0, 3.0)
        else:
            assert (j.viscous, j.coulomb) != (5.0, 3.0)
    assert kept >= 4


def test_noise_levels_against_simulator_truth(tuned, runs):
    result, _ = tuned
    truth = runs["commissioning"].truth
    assert len(result.identification.joints) == 10
    for j in result.identification.joints:
        assert abs(j.effort_noise / truth["effort_noise"] - 1) < 0.15, j      # simulator truth
        assert abs(j.velocity_noise / truth["velocity_noise"] - 1) < 0.15, j  # simulator truth
    s = result.settings
    assert abs(s["observer.effort_noise"] / truth["effort_noise"] - 1) < 0.15
    assert abs(s["observer.velocity_noise"] / truth["velocity_noise"] - 1) < 0.15


def written_names(path) -> set[str]:
    """The dotted names a parameter file sets (the package's reader of the ROS 2 layout)."""
    return set(parameters_from_yaml(path.read_text()))


def test_tuned_file_holds_the_robot_only(written, tuned):
    # issue 17, item 8: the file describes the robot; nothing of the drawer or the toolbox
    # (object filter settings, their manipulation directions) is written
    result, recs = tuned
    names = written_names(written)
    assert names, "nothing written"
    assert not [n for n in names if n.startswith("filter.")], names
    assert not [n for n in names if n.startswith("direction.")], names
    assert not [n for n in result.entries if n.startswith(("filter.", "direction."))]
    assert {"bias.initial", "friction.viscous", "friction.coulomb", "observer.effort_noise",
            "observer.velocity_noise", "joint_names"} <= names
    # the bags did recommend their task's direction (the simulator's settings): used for the
    # passes, not written
    assert any("direction.vector" in r.recommended for r in recs)
    assert "tune writes no filter.* entry" in " ".join(T.file_header(result, "test"))


# --------------------------------------------------------------------------------------------
# held-out run of the same robot: tuned file against the default


def _run_pipeline(run, settings):
    pipe = Pipeline(settings, run.urdf)
    return [pipe.process(Sample(float(t), run.joint_names, run.position[k], run.velocity[k],
                                run.effort[k])) for k, t in enumerate(run.time)]


def test_tuned_file_beats_the_default_on_a_held_out_run(written):
    run = simulate("toolbox", duration=DURATION["toolbox"], seed=2, rate=1000.0,
                   effort_side="motor")           # held out: another seed, other noise/bias
    default = Settings(run.settings)
    tuned = Settings(run.settings).replace(parameters_from_yaml(written.read_text()))
    # the robot as the simulator made it: its true bias and friction (simulator truth)
    exact = Settings(run.settings).replace({
        "joint_names": list(run.joint_names),
        "bias.initial": [float(v) for v in run.truth["bias"]],
        "friction.viscous": [float(v) for v in run.truth["friction_viscous"]],
        "friction.coulomb": [float(v) for v in run.truth["friction_coulomb"]]})
    truth = np.array([run.truth[p] for p in PARAMETER_NAMES])      # simulator truth
    after = run.in_contact & (run.time > run.truth["contact_time"] + 0.1)
    out = {}
    for label, settings in (("default", default), ("tuned", tuned), ("exact", exact)):
        est = _run_pipeline(run, settings)
        force = np.array([e.force for e in est])
        rmse = math.sqrt(np.mean(np.sum((force[after] - run.true_force[after]) ** 2, axis=1)))
        out[label] = (rmse, est[-1].parameters, est[-1].parameter_std)
    for label, (rmse, p, std) in out.items():
        print(f"{label}: force RMSE {rmse:.3f} N; parameters {np.round(p, 3)} +/- "
              f"{np.round(std, 3)}; error {np.round(p - truth, 3)}")
    rmse_d, rmse_t, rmse_x = out["default"][0], out["tuned"][0], out["exact"][0]
    assert rmse_t < 0.5 * rmse_d                     # against the simulator's true force
    assert rmse_t < 1.1 * rmse_x                     # as good as the true robot properties
    # the object's parameters are what the object filter makes of the force: with the tuned
    # file, those it makes with the robot's true bias and friction (the file holds nothing
    # else that reaches the filter), within a quarter of their standard deviation
    p_t, (p_x, std_x) = out["tuned"][1], out["exact"][1:]
    assert np.all(np.abs(p_t - p_x) < 0.25 * std_x), (p_t, p_x, std_x)


# --------------------------------------------------------------------------------------------
# the written file


def test_written_file_loads_unchanged_and_is_typed_for_ros(written, tuned):
    result, _ = tuned
    settings = load_parameter_file(written)           # the node's and replay's reader
    for name, entry in result.entries.items():
        assert settings[name] == entry.value
    text = written.read_text()
    assert "null" not in text and "None" not in text and "[]" not in text
    lines = text.splitlines()
    for name in result.entries:                        # each tuned entry has its comment above
        key = name.split(".")[-1]
        i = next(k for k, line in enumerate(lines) if line.strip().startswith(f"{key}:"))
        assert lines[i - 1].strip().startswith("#"), name
    rclpy_parameter = pytest.importorskip("rclpy.parameter")
    from rcl_interfaces.msg import ParameterType
    kinds = {"float": ParameterType.PARAMETER_DOUBLE, "str": ParameterType.PARAMETER_STRING,
             "float_array": ParameterType.PARAMETER_DOUBLE_ARRAY,
             "str_array": ParameterType.PARAMETER_STRING_ARRAY,
             "int": ParameterType.PARAMETER_INTEGER, "bool": ParameterType.PARAMETER_BOOL}
    params = rclpy_parameter.parameter_dict_from_yaml_file(   # rclpy's own reader
        str(written), target_nodes=["/**/interaction_estimator"])
    assert set(params) >= set(result.entries)
    for name, msg in params.items():
        assert msg.value.type == kinds[SPEC_BY_NAME[name].kind], name


def test_tuned_file_is_in_effect_in_a_namespaced_node(bags, tmp_path):
    """The file the tune command writes, given to a node started in a namespace, sets every
    value it holds. References: rclpy's own parameter-file reader for the values in the file,
    and the node's parameters read back over DDS (its get_parameters service); ROS 2 applies a
    section to a node by its fully qualified name, so a bare 'interaction_estimator:' section
    would leave the node at /arm on its defaults."""
    from rclpy.parameter import Parameter, parameter_dict_from_yaml_file
    from ros_harness import NodeProcess, Peer, next_domain
    out = tmp_path / "tuned.yaml"
    assert T.main([str(bags["toolbox"]), "--out", str(out)]) == 0
    assert "\n/**/interaction_estimator:\n  ros__parameters:\n" in out.read_text()
    in_file = {name: Parameter.from_parameter_msg(msg).value for name, msg in
               parameter_dict_from_yaml_file(str(out),
                                             target_nodes=["/**/interaction_estimator"]).items()}
    assert {"friction.viscous", "observer.effort_noise", "bias.initial"} <= set(in_file)
    defaults = Settings()
    assert any(defaults[n] != v for n, v in in_file.items() if not isinstance(v, list))
    domain = next_domain()
    node = NodeProcess(["-r", "__ns:=/arm", "--params-file", str(out)], domain,
                       tmp_path / "node.log")
    peer = Peer(domain, "/arm")
    try:
        Peer.wait_for(peer.get_params.service_is_ready, 60, "the node's parameter service",
                      node)
        for name, value in in_file.items():
            got = peer.get_parameter(name).value
            if isinstance(value, list):
                assert list(got) == value, name
            else:
                assert got == value and type(got) is type(value), name
        assert "has no section for this node" not in node.log()
    finally:
        peer.close()
        node.stop()


def test_command_line_single_bag_with_base_file_and_report(bags, tmp_path):
    base = tmp_path / "base.yaml"
    base.write_text("interaction_estimator:\n  ros__parameters:\n    effort_side: motor\n"
                    "    contact:\n      enter_level: 7.0\n")
    out, report = tmp_path / "tuned.yaml", tmp_path / "report"
    code = T.main([str(bags["toolbox"]), "--out", str(out), "--params", str(base),
                   "--report", str(report)])
    assert code == 0
    settings = load_parameter_file(out)
    assert settings["contact.enter_level"] == 7.0          # the base file's own setting kept
    names = written_names(out)
    assert not [n for n in names if n.startswith(("filter.", "direction."))], names
    page = (report / T.REPORT_NAME).read_text()
    # force and parameter plots on the held-out end of the contact, base against tuned
    assert page.count("<svg") >= 2 and "Held out" in page and "base settings" in page
    assert "force RMSE (N)" in page


def test_command_line_commissioning_bag_and_one_task_with_report(bags, runs, tmp_path, capsys):
    # the README's workflow: one task bag and a commissioning bag (no contact) named free
    # motion (used whole; the robot's dynamics identified from it too)
    out, report = tmp_path / "tuned.yaml", tmp_path / "report"
    code = T.main([str(bags["drawer"]), "--free-motion", str(bags["commissioning"]), "--out",
                   str(out), "--report", str(report)])
    printed = capsys.readouterr().out
    assert code == 0
    assert "bag 2  no contact: free motion only" in printed
    text = out.read_text()
    assert "# bags without contact (free motion only, used for bias, friction and sensor " \
           "noise): commissioning_bag" in text
    assert "# this file describes the robot only" in text and "nan" not in text
    settings = load_parameter_file(out)
    truth = runs["commissioning"].truth                          # simulator truth
    order = [truth_index(runs["commissioning"], n) for n in settings["joint_names"]]
    np.testing.assert_allclose(settings["friction.viscous"],
                               np.asarray(truth["friction_viscous"])[order], rtol=0.1)
    np.testing.assert_allclose(settings["friction.coulomb"],
                               np.asarray(truth["friction_coulomb"])[order], rtol=0.1)
    np.testing.assert_allclose(settings["bias.initial"],        # the last bag: commissioning
                               np.asarray(truth["bias"])[order], atol=0.05)
    page = (report / T.REPORT_NAME).read_text()
    # only the drawer has contact: the end of its contact is held out, never the free bag
    assert "of the contact time of" in page and "drawer_bag" in page.split("Held out:")[1][:400]
    assert "no contact: free motion only" in page


def test_module_runs_on_its_own():
    done = subprocess.run([sys.executable, "-m", "interaction_estimator.offline.tune", "--help"],
                          capture_output=True, text=True, timeout=60)
    assert done.returncode == 0 and "--out" in done.stdout and "--report" in done.stdout


# --------------------------------------------------------------------------------------------
# bad input: a clear message, exit 2, nothing written


def test_a_commissioning_bag_alone_named_free_motion(bags, runs, tmp_path, capsys):
    # no contact needed: the commissioning run alone, named free motion (the README's
    # workflow), is used whole for bias, friction and sensor noise (and the robot's dynamics)
    run = runs["commissioning"]
    assert not run.in_contact.any()                              # simulator truth
    out, report = tmp_path / "tuned.yaml", tmp_path / "report"
    code = T.main(["--free-motion", str(bags["commissioning"]), "--out", str(out),
                   "--report", str(report)])
    cap = capsys.readouterr()
    assert code == 0, cap.err
    assert "bag 1  no contact: free motion only" in cap.out
    names = written_names(out)
    assert not [n for n in names if n.startswith(("filter.", "direction."))], names
    settings = load_parameter_file(out)
    truth = run.truth                                            # simulator truth
    order = [truth_index(run, n) for n in settings["joint_names"]]
    np.testing.assert_allclose(settings["bias.initial"], np.asarray(truth["bias"])[order],
                               atol=0.05)
    np.testing.assert_allclose(settings["friction.viscous"],
                               np.asarray(truth["friction_viscous"])[order], rtol=0.1)
    np.testing.assert_allclose(settings["friction.coulomb"],
                               np.asarray(truth["friction_coulomb"])[order], rtol=0.1)
    assert abs(settings["observer.effort_noise"] / truth["effort_noise"] - 1) < 0.15
    assert abs(settings["observer.velocity_noise"] / truth["velocity_noise"] - 1) < 0.15
    assert out.with_suffix(".urdf").exists()
    page = (report / T.REPORT_NAME).read_text()
    assert "No bag has contact" in page and "<h2>Per joint</h2>" in page


def test_the_free_stretch_of_a_task_bag_alone(runs, tmp_path, capsys):
    # the drawer's first 1.9 s, before the robot reaches the drawer (contact at about 2 s), as
    # an ordinary bag: tuned from what moved, the joints that turned one way only said so
    run = runs["drawer"]
    part = cut(run, 0.0, 1.9)
    assert not part.in_contact.any()                             # simulator truth
    bag = tmp_path / "before_contact_bag"
    write_simulated_bag(bag, part)
    result = T.tune([T.read_bag(bag)], run.urdf, {})
    assert result.free_only == [0] and result.contact_time == 0.0
    assert not [n for n in result.entries if n.startswith(("filter.", "direction."))]
    true_bias = run.truth["bias"]                                # simulator truth
    checked = 0
    for j in result.identification.joints:
        err = abs(j.bias[0] - true_bias[truth_index(run, j.name)])
        if j.friction_identified:              # moved both ways: bias apart from friction
            assert err < max(0.05, j.bias_ci[0]), (j.name, err, j.bias_ci[0])
            checked += 1
        elif max(j.moving_time) >= T.common.MIN_MOVING_TIME:     # one way: it says so
            assert any(j.name in w and "moved one way only" in w for w in result.warnings)
    assert checked >= 3
    out = tmp_path / "tuned.yaml"
    assert T.main([str(bag), "--out", str(out)]) == 0
    assert "bag 1  no contact: free motion only" in capsys.readouterr().out
    assert not [n for n in written_names(out) if n.startswith(("filter.", "direction."))]


def _bad_case(kind: str, runs, bags, tmp_path) -> tuple[list[str], str]:
    toolbox = runs["toolbox"]
    if kind in ("too_short", "no_free_motion"):
        part = {"too_short": (runs["drawer"], 0.0, 0.5),
                "no_free_motion": (toolbox, 2.3, 6.0)}[kind]
        bag = tmp_path / f"{kind}_bag"
        write_simulated_bag(bag, cut(*part))
        return [str(bag)], {"too_short": "too short", "no_free_motion": "no free motion"}[kind]
    urdf = tmp_path / "robot.urdf"
    if kind == "other_robot":
        urdf.write_text(OTHER_ROBOT_URDF)
        return [str(bags["toolbox"]), "--urdf", str(urdf)], "other_j1"
    urdf.write_text(heavier_arm_urdf(toolbox.urdf))
    return [str(bags["toolbox"]), "--urdf", str(urdf)], "URDF does not describe"


@pytest.mark.parametrize("kind", ["too_short", "no_free_motion", "other_robot",
                                  "heavier_arm"])
def test_bad_input_is_refused_and_nothing_is_written(kind, runs, bags, tmp_path, capsys):
    argv, expected = _bad_case(kind, runs, bags, tmp_path)
    out = tmp_path / "tuned.yaml"
    out.write_text("earlier file\n")
    code = T.main(argv + ["--out", str(out), "--report", str(tmp_path / "report")])
    err = capsys.readouterr().err
    assert code == 2
    assert expected in err, err
    assert "expected" in err                         # says what was expected
    assert out.read_text() == "earlier file\n"       # untouched
    assert not (tmp_path / "report").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".partial")]


def test_written_file_loads_in_the_real_node(written, tuned, tmp_path):
    # The ROS 2 node itself (real rclpy over DDS, loopback only: the harness sets
    # ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST and its own domain) takes the tuned file with
    # --params-file, starts, and reports every tuned value as its parameter.
    from ros_harness import NodeProcess, Peer, next_domain

    result, _ = tuned
    domain = next_domain()
    node = NodeProcess(["--params-file", str(written)], domain, tmp_path / "node.log")
    peer = Peer(domain)
    try:
        peer.wait_connected(node)
        assert node.alive(), node.log()
        for name, entry in result.entries.items():
            got = peer.get_parameter(name).value
            expected = entry.value
            if isinstance(expected, list):
                assert list(got) == expected, name   # floats arrive bit for bit
            else:
                assert got == expected, name
    finally:
        peer.close()
        node.stop()
