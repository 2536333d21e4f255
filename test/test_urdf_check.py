"""A URDF with an unreadable or non-physical inertial element is refused, link and value named,
by the model, the replay, tune and the node; never read as zero.

References:
* Pinocchio's own URDF parser, which reads ``ixx="np.float64(0.0103)"`` as 0 (shown below, so
  that the check is known to guard against something real);
* the conditions of physical consistency of a rigid body's inertia: positive semi-definite,
  principal moments satisfying the triangle inequalities (Traversaro, Brossette, Escande and
  Nori, IROS 2016), checked here on closed-form bodies (a thin rod lies on the boundary:
  moments 0, mL²/12, mL²/12, textbook);
* real robots' published URDFs from PyPI example-robot-data, which must stay accepted.
"""
from __future__ import annotations

import re
import textwrap

import numpy as np
import pinocchio as pin
import pytest
import real_robots

from interaction_estimator import cli
from interaction_estimator.core.model import ModelError, RobotModel
from interaction_estimator.core.urdf_check import inertial_problems
from interaction_estimator.io.bag_writer import BagWriter
from interaction_estimator.io.cdr import JOINT_STATE, STRING, JointStateEncoder, encode_string
from interaction_estimator.offline import tune as T
from interaction_estimator.sim import marten
from interaction_estimator.sim.recording import write_simulated_bag
from interaction_estimator.sim.simulator import simulate

NOT_A_NUMBER = "np.float64(0.0103)"


def with_inertial(urdf: str, link: str, mass: str | None = None, **inertia: str) -> str:
    """The URDF with ``link``'s mass and/or inertia attributes replaced (text edit)."""
    block = re.search(rf'<link name="{link}">.*?</inertial>', urdf, re.S)
    assert block, link
    text = block.group(0)
    if mass is not None:
        text = re.sub(r'<mass value="[^"]*"', f'<mass value="{mass}"', text)
    for key, value in inertia.items():
        text, n = re.subn(rf'{key}="[^"]*"', f'{key}="{value}"', text)
        assert n == 1, key
    return urdf[:block.start()] + text + urdf[block.end():]


ARM = marten.arm_urdf()


@pytest.mark.parametrize("case, urdf, expected", [
    ("not a number", with_inertial(ARM, "marten_link2", ixx=NOT_A_NUMBER),
     f"link 'marten_link2': inertia ixx='{NOT_A_NUMBER}' is not a finite number"),
    ("nan mass", with_inertial(ARM, "marten_link3", mass="nan"),
     "link 'marten_link3': mass value='nan' is not a finite number"),
    ("negative mass", with_inertial(ARM, "marten_link4", mass="-2.2"),
     "link 'marten_link4': mass -2.2 kg is negative"),
    ("triangle", with_inertial(ARM, "marten_link2", ixx="0.001", iyy="0.001", izz="0.05"),
     "link 'marten_link2': inertia principal moments 0.001, 0.001, 0.05 violate the triangle"),
    ("not positive semi-definite", with_inertial(ARM, "marten_link5", ixx="-0.001"),
     "link 'marten_link5': inertia a negative principal moment (-0.001)"),
    ("off-diagonal makes it indefinite", with_inertial(ARM, "marten_link1", ixy="0.02"),
     "link 'marten_link1': inertia a negative principal moment"),
])
def test_bad_inertial_values_are_named(case, urdf, expected):
    problems = inertial_problems(urdf)
    assert len(problems) == 1 and expected in problems[0], problems
    assert "expected" in problems[0]
    with pytest.raises(ModelError, match=re.escape(expected)):
        RobotModel(urdf, "tool_tip")


def test_pinocchio_alone_reads_an_unreadable_value_as_zero():
    # the reason for the check: Pinocchio's parser takes the link with ixx = 0 (its complaint
    # goes to stderr), a robot that does not exist
    urdf = with_inertial(ARM, "marten_link2", ixx=NOT_A_NUMBER)
    model = pin.buildModelFromXML(urdf)
    link2 = model.getJointId("marten_shoulder_pitch")
    # body of joint 2 = link2 (Marten has no fixed links on it): its inertia about the CoM
    assert model.inertias[link2].inertia[0, 0] == 0.0


def test_missing_elements_and_origin_are_named():
    urdf = ARM.replace('<inertia ixx="0.050250" ixy="0" ixz="0" iyy="0.050250" iyz="0" '
                       'izz="0.004500"/>', '<inertia ixx="0.050250" ixy="0" ixz="0" '
                       'iyy="0.050250" iyz="0"/>')
    assert any("link 'marten_link2': inertia izz=None" in p for p in inertial_problems(urdf))
    urdf = re.sub(r'(<link name="marten_link3">\s*<inertial>\s*)<origin xyz="[^"]*"',
                  r'\1<origin xyz="0 0 zero"', ARM)
    assert any("link 'marten_link3': inertial origin xyz='0 0 zero'" in p
               for p in inertial_problems(urdf))


def test_boundary_bodies_and_rounding_are_accepted():
    # thin rod along x, m = 2 kg, L = 0.6 m: moments 0, mL^2/12, mL^2/12 (textbook closed form)
    rod = 2.0 * 0.6 ** 2 / 12
    assert inertial_problems(with_inertial(ARM, "marten_link2", ixx="0", iyy=f"{rod}",
                                           izz=f"{rod}")) == []
    # the same, written with four digits: rounding leaves a violation of 1e-5 relative
    assert inertial_problems(with_inertial(ARM, "marten_link2", ixx="0", iyy="0.0600",
                                           izz="0.06000004")) == []
    # zero mass and zero inertia: a frame, fine
    assert inertial_problems(with_inertial(ARM, "marten_link2", mass="0", ixx="0", iyy="0",
                                           izz="0")) == []


@pytest.mark.parametrize("name", sorted(real_robots.ARMS))
def test_published_arm_urdfs_are_accepted(name):
    urdf = real_robots.urdf_text(name)
    assert inertial_problems(urdf) == []
    RobotModel(urdf, real_robots.ARMS[name][1])


def test_every_problem_of_a_urdf_is_listed():
    urdf = with_inertial(with_inertial(ARM, "marten_link2", ixx=NOT_A_NUMBER), "marten_link4",
                         mass="-1")
    problems = inertial_problems(urdf)
    assert len(problems) == 2
    assert "marten_link2" in problems[0] and "marten_link4" in problems[1]


# --------------------------------------------------------------------------------------------
# the three ways in refuse it


@pytest.fixture(scope="module")
def bad_files(tmp_path_factory):
    d = tmp_path_factory.mktemp("bad_urdf")
    bad = with_inertial(marten.mobile_urdf(), "marten_link2", ixx=NOT_A_NUMBER)
    (d / "bad.urdf").write_text(bad)
    run = simulate("drawer", duration=3.5, seed=0)
    write_simulated_bag(d / "good_bag", run)
    # the same joint states with the bad URDF as the recorded robot_description
    enc = JointStateEncoder()
    with BagWriter(d / "bag_with_bad_description", "mcap") as w:
        w.write("/robot_description", STRING, 0, encode_string(bad), transient_local=True)
        for k, t in enumerate(run.time):
            ns = 1_000_000_000 + int(round(t * 1e9))
            w.write("/joint_states", JOINT_STATE, ns,
                    enc.encode(ns // 1_000_000_000, ns % 1_000_000_000, "", run.joint_names,
                               run.position[k], run.velocity[k], run.effort[k]))
    return d


def _run_cli(argv, capsys):
    code = cli.main([str(a) for a in argv])
    return code, capsys.readouterr().err


@pytest.mark.parametrize("source", ["--urdf", "bag description"])
def test_replay_refuses(bad_files, tmp_path, capsys, source):
    if source == "--urdf":
        argv = ["replay", bad_files / "good_bag", "--urdf", bad_files / "bad.urdf"]
    else:
        argv = ["replay", bad_files / "bag_with_bad_description"]
    code, err = _run_cli(argv + ["--out", tmp_path / "out"], capsys)
    assert code == 2, err
    assert f"link 'marten_link2': inertia ixx='{NOT_A_NUMBER}' is not a finite number" in err
    assert not (tmp_path / "out" / "estimates.csv").exists()


def test_tune_refuses(bad_files, tmp_path, capsys):
    out = tmp_path / "tuned.yaml"
    code = T.main([str(bad_files / "good_bag"), "--urdf", str(bad_files / "bad.urdf"),
                   "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert f"link 'marten_link2': inertia ixx='{NOT_A_NUMBER}'" in err
    assert not out.exists()


def test_node_refuses_with_the_link_named(bad_files, tmp_path):
    # the real node over DDS on this machine only (the harness sets the discovery range and a
    # domain of its own)
    from ros_harness import NodeProcess, Peer, level, next_domain

    params = tmp_path / "p.yaml"
    params.write_text(textwrap.dedent(f"""\
        /**/interaction_estimator:
          ros__parameters:
            robot_description_file: {bad_files / 'bad.urdf'}
        """))
    domain = next_domain()
    node = NodeProcess(["--params-file", str(params)], domain, tmp_path / "node.log")
    peer = Peer(domain)
    try:
        peer.wait_connected(node)
        st = peer.wait_status(lambda kv, st: kv["state"] == "model_error", 20, "model_error",
                              node)
        assert level(st) == 2
        assert "link 'marten_link2'" in st.message and NOT_A_NUMBER in st.message
        assert node.alive()
    finally:
        peer.close()
        node.stop()


def test_diagonal_entries_of_real_robots_are_never_zeroed():
    # the accepted URDFs reach Pinocchio unchanged: its body inertias equal the file's values
    # (Panda: link1, a moving body without fixed children)
    model = RobotModel(real_robots.urdf_text("panda"), "panda_hand_tcp").model
    inertia = model.inertias[model.getJointId("panda_joint1")]
    assert np.all(np.linalg.eigvalsh(inertia.inertia) > 0)
