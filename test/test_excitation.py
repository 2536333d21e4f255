"""The commissioning-motion command against outside references.

* Its own limits, checked on a fine time grid (numpy): positions, speeds and accelerations
  within the URDF's limits less the margin; at rest at the start and at every period's end.
* Derivatives: the written velocity and acceleration are the derivatives of the written
  position (numpy central differences).
* The written JointTrajectory YAML, read by PyYAML and built into rosbags' own
  trajectory_msgs/msg/JointTrajectory message class, serialized to CDR and read back.
* The URDF's limits as written in real robots' published URDFs (PyPI example-robot-data: UR5).
"""
from __future__ import annotations

import csv
import textwrap

import numpy as np
import pytest
import real_robots
import yaml

from interaction_estimator import cli
from interaction_estimator.core.model import RobotModel
from interaction_estimator.offline.excitation import LimitsError, optimize, resolve
from interaction_estimator.offline.excitation.files import CSV_NAME, YAML_NAME
from interaction_estimator.offline.excitation.limits import ros2_joint_limits
from interaction_estimator.offline.excitation.trajectory import Criterion
from interaction_estimator.sim import marten

ARM = marten.ARM_URDF


@pytest.fixture(scope="module")
def arm_motion():
    urdf = ARM.read_text()
    robot = RobotModel(urdf, "tool_tip")
    limits = resolve(robot.joint_names, urdf, 0.2, {}, 3.0, {}, {})
    return robot, urdf, limits, optimize(robot, urdf, limits, 8.0, 4, seed=1, starts=6,
                                         iterations=3)


def test_motion_stays_within_the_limits_less_the_margin(arm_motion):
    robot, urdf, limits, result = arm_motion
    traj = result.trajectory
    t = np.linspace(0.0, 2 * traj.period, 20001)
    q, v, a = traj.evaluate(t)
    for i, lim in enumerate(limits):
        assert lim.lower - 1e-9 <= q[:, i].min() and q[:, i].max() <= lim.upper + 1e-9
        assert np.abs(v[:, i]).max() <= lim.velocity + 1e-9
        assert np.abs(a[:, i]).max() <= lim.acceleration + 1e-9
        # margin 0.2 of the URDF's own values (marten_arm.urdf: velocity 2.0 rad/s; 3 rad/s²)
        assert lim.velocity == pytest.approx(0.8 * 2.0)
        assert lim.acceleration == pytest.approx(0.8 * 3.0)
    # each joint uses its limits: one of its three bounds is reached (to the grid)
    for i, lim in enumerate(limits):
        used = max((q[:, i].max() - q[:, i].min()) / (lim.upper - lim.lower),
                   np.abs(v[:, i]).max() / lim.velocity, np.abs(a[:, i]).max() / lim.acceleration)
        assert used > 0.99
    # at rest where it starts and at every period's end
    for t_rest in (0.0, traj.period, 2 * traj.period):
        _, v0, a0 = traj.evaluate(np.array([t_rest]))
        assert np.abs(v0).max() < 1e-12 and np.abs(a0).max() < 1e-12


def test_velocity_and_acceleration_are_the_derivatives(arm_motion):
    *_, result = arm_motion
    h = 1e-5
    t = np.linspace(0.3, 7.7, 50)
    q_p, v_p, _ = result.trajectory.evaluate(t + h)
    q_m, v_m, _ = result.trajectory.evaluate(t - h)
    _, v, a = result.trajectory.evaluate(t)
    np.testing.assert_allclose((q_p - q_m) / (2 * h), v, atol=1e-6)
    np.testing.assert_allclose((v_p - v_m) / (2 * h), a, atol=1e-5)


def test_the_search_lowers_the_condition_number(arm_motion):
    robot, urdf, limits, result = arm_motion
    crit = Criterion(robot, urdf, 100)
    from interaction_estimator.offline.excitation import fit_to_limits
    rng = np.random.default_rng(0)
    random_conditions = []
    for _ in range(6):
        a, b = rng.standard_normal((2, 4, len(limits)))
        a[-1] = -a[:-1].sum(axis=0)
        b[-1] = -(np.arange(1, 4)[:, None] * b[:-1]).sum(axis=0) / 4
        random_conditions.append(crit.condition(fit_to_limits(a, b, 8.0, limits)))
    assert result.condition < np.median(random_conditions)
    assert result.condition == pytest.approx(crit.condition(result.trajectory))


def _run(argv, capsys):
    code = cli.main([str(a) for a in argv])
    cap = capsys.readouterr()
    return code, cap.out, cap.err


def test_command_writes_csv_and_a_joint_trajectory(tmp_path, capsys):
    code, out, err = _run(["excitation", "--urdf", ARM, "--out", tmp_path / "m",
                           "--max-acceleration", "3", "--max-acceleration",
                           "marten_wrist_roll=2", "--hold", "marten_forearm_roll=0.3",
                           "--period", "6", "--harmonics", "3", "--periods", "2",
                           "--rate", "50", "--iterations", "2"], capsys)
    assert code == 0, err
    assert "condition number" in out and "marten_elbow_pitch" in out and "held at 0.3" in out
    rows = list(csv.DictReader((tmp_path / "m" / CSV_NAME).open()))
    assert len(rows) == 2 * 6 * 50 + 1
    assert float(rows[-1]["time"]) == pytest.approx(12.0)
    assert {float(r["position_marten_forearm_roll"]) for r in rows} == {0.3}
    wrist = np.array([float(r["acceleration_marten_wrist_roll"]) for r in rows])
    assert np.abs(wrist).max() <= 0.8 * 2.0 + 1e-9
    # the YAML as ROS 2 tools read it: PyYAML, then rosbags' own message classes
    from rosbags.typesys import Stores, get_typestore
    store = get_typestore(Stores.ROS2_JAZZY)
    doc = yaml.safe_load((tmp_path / "m" / YAML_NAME).read_text())
    Traj = store.types["trajectory_msgs/msg/JointTrajectory"]
    Point = store.types["trajectory_msgs/msg/JointTrajectoryPoint"]
    Header = store.types["std_msgs/msg/Header"]
    Time = store.types["builtin_interfaces/msg/Time"]
    Duration = store.types["builtin_interfaces/msg/Duration"]
    points = [Point(np.array(p["positions"], float), np.array(p["velocities"], float),
                    np.array(p["accelerations"], float), np.array(p["effort"], float),
                    Duration(**p["time_from_start"])) for p in doc["points"]]
    msg = Traj(Header(Time(**doc["header"]["stamp"]), doc["header"]["frame_id"]),
               doc["joint_names"], points)
    back = store.deserialize_cdr(store.serialize_cdr(msg, Traj.__msgtype__), Traj.__msgtype__)
    assert list(back.joint_names) == list(RobotModel(ARM.read_text(), "tool_tip").joint_names)
    assert len(back.points) == len(rows)
    stamps = [p.time_from_start.sec + 1e-9 * p.time_from_start.nanosec for p in back.points]
    assert np.all(np.diff(stamps) > 0) and stamps[0] > 0
    np.testing.assert_allclose(back.points[10].positions,
                               [float(rows[10][f"position_{j}"]) for j in back.joint_names])


def test_a_urdf_without_limits_is_refused_naming_the_joints(tmp_path, capsys):
    # the mobile Marten: its base yaw is continuous (no position range), and URDF gives no
    # acceleration limits at all
    code, _, err = _run(["excitation", "--urdf", marten.MOBILE_URDF, "--out", tmp_path / "m"],
                        capsys)
    assert code == 2
    assert "position range for ['marten_base_yaw']" in err
    assert "acceleration limit for ['marten_base_x'" in err
    assert "--hold" in err and "--range" in err and "expected" in err.lower()
    assert not (tmp_path / "m").exists()
    # an arm of continuous joints (no position limits anywhere)
    import re
    urdf = re.sub(r'lower="[^"]*" upper="[^"]*" ', "",
                  ARM.read_text().replace('type="revolute"', 'type="continuous"'))
    (tmp_path / "endless.urdf").write_text(urdf)
    code, _, err = _run(["excitation", "--urdf", tmp_path / "endless.urdf", "--out",
                         tmp_path / "n", "--max-acceleration", "3"], capsys)
    joints = list(RobotModel(urdf, "tool_tip").joint_names)
    assert code == 2 and f"position range for {joints}" in err, err


def test_limits_from_a_ros2_joint_limits_file_and_ranges(tmp_path):
    path = tmp_path / "joint_limits.yaml"
    path.write_text(textwrap.dedent("""\
        joint_limits:
          marten_elbow_pitch:
            has_position_limits: true
            min_position: -1.0
            max_position: 1.5
            has_velocity_limits: true
            max_velocity: 1.0
            has_acceleration_limits: true
            max_acceleration: 2.5
          marten_wrist_roll:
            has_acceleration_limits: false
            max_acceleration: 99.0
        """))
    urdf = ARM.read_text()
    joints = RobotModel(urdf, "tool_tip").joint_names
    limits = {lim.name: lim for lim in resolve(
        joints, urdf, 0.0, {}, 4.0, {"marten_shoulder_yaw": (-0.5, 0.5)}, {},
        ros2_joint_limits(path))}
    elbow = limits["marten_elbow_pitch"]
    assert (elbow.lower, elbow.upper, elbow.velocity, elbow.acceleration) == (-1.0, 1.5, 1.0, 2.5)
    assert limits["marten_wrist_roll"].acceleration == 4.0     # the flag is false: not used
    assert (limits["marten_shoulder_yaw"].lower, limits["marten_shoulder_yaw"].upper) == (-0.5,
                                                                                          0.5)
    with pytest.raises(LimitsError, match="reaches outside"):
        resolve(joints, urdf, 0.0, {}, 4.0, {"marten_shoulder_yaw": (-9.0, 0.5)}, {})
    with pytest.raises(LimitsError, match="not moving joints"):
        resolve(joints, urdf, 0.0, {}, 4.0, {}, {"gripper": 0.0})


def test_a_published_arm(tmp_path, capsys):
    # UR5 as published: limits +-2 pi on most joints; the command uses them, less the margin
    path = real_robots.urdf_path("ur5")
    code, out, err = _run(["excitation", "--urdf", path, "--out", tmp_path / "ur5",
                           "--max-acceleration", "2", "--periods", "1", "--iterations", "1",
                           "--harmonics", "3"], capsys)
    assert code == 0, err
    rows = list(csv.DictReader((tmp_path / "ur5" / CSV_NAME).open()))
    elbow = np.array([float(r["position_elbow_joint"]) for r in rows])
    assert np.abs(elbow).max() <= 0.8 * np.pi + 1e-9
