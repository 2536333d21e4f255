"""The robots of the Monte-Carlo validation and their sensors' datasheet values.

Five robots: our fictional Marten (arm, and arm on its holonomic base) and three real robots'
published URDFs from the PyPI package ``example-robot-data`` (pinned in requirements-test.txt):
Franka Panda (a mimic joint in the gripper), Universal Robots UR5 (transmissions) and PAL TIAGo
(48 joints: torso, arm, head, a hand of many small joints, wheels; transmissions, a few links
whose inertia is not physically valid). Each URDF is used as published; the estimator gets the
text itself (``package://`` meshes and all).

The sensor values are what a parameter file is written from (see ``scenarios.parameter_file``):
a datasheet gives a bound, the individual robot's noise lies somewhere below it. Sources are
named beside each value; where none was at hand the value says so.
"""
from __future__ import annotations

from dataclasses import dataclass
from importlib import metadata
from pathlib import Path

from ...sim import marten


@dataclass(frozen=True)
class SensorSheet:
    """What a robot's datasheet says about its joint sensors.

    effort_noise (lo, hi): standard deviation of the published efforts, N·m (N for prismatic
    joints); velocity_noise (lo, hi): of the published velocities, rad/s (m/s); encoder_bits:
    resolution of the position encoders (revolute joints); bias_max: largest constant offset of
    an effort, N·m. A run draws its noise log-uniformly in (lo, hi) and its biases uniformly in
    +/- bias_max; the parameter file gets ``hi`` (the datasheet's bound).
    """

    effort_noise: tuple[float, float]
    velocity_noise: tuple[float, float]
    encoder_bits: int
    bias_max: float
    source: str


@dataclass(frozen=True)
class RobotEntry:
    """One robot: URDF file, contact frame, start posture (joint name -> rad or m; joints not
    named start at 0 or mid-range), and its sensors."""

    name: str
    urdf_path: Path
    contact_frame: str
    q0: dict
    sensors: SensorSheet

    def urdf_text(self) -> str:
        return self.urdf_path.read_text(encoding="utf-8")


def example_robot_data_dir() -> Path:
    """Where PyPI ``example-robot-data`` puts its robots (cmeel layout, inside site-packages)."""
    try:
        dist = metadata.distribution("example-robot-data")
    except metadata.PackageNotFoundError:
        raise RuntimeError("the validation needs the PyPI package example-robot-data (pinned in "
                           "requirements-test.txt): run `make setup`") from None
    path = Path(str(dist.locate_file("cmeel.prefix/share/example-robot-data/robots")))
    if not path.is_dir():
        raise RuntimeError(f"example-robot-data is installed but {path} is missing")
    return path


# Marten is fictional: its "datasheet" is the sensor levels the project's issues set for it
# (effort noise 0.1 N·m, velocity noise 0.003 rad/s, 18-bit encoders, biases up to 2 N·m).
MARTEN_SENSORS = SensorSheet(
    effort_noise=(0.03, 0.1), velocity_noise=(0.001, 0.003), encoder_bits=18, bias_max=2.0,
    source="Marten is fictional: the levels the project's issues set for it")

# Link-side joint torque sensors of a 7-axis cobot (Panda class): noise of a few hundredths of
# a N·m, offsets of a few tenths. Recalled from memory as orders of magnitude for strain-gauge
# joint torque sensors, not checked against a datasheet.
TORQUE_SENSOR_ARM = SensorSheet(
    effort_noise=(0.02, 0.08), velocity_noise=(0.0005, 0.003), encoder_bits=19, bias_max=0.5,
    source="recalled from memory (strain-gauge joint torque sensors, 7-axis cobot), not checked")

# Efforts from motor currents (UR5 CB-series, TIAGo): several tenths of a N·m of noise, offsets
# of up to a few N·m. Common practice, no source. (Motor friction is not simulated: the
# validation's efforts are link-side, see sim/mujoco_world/common.physics_urdf.)
CURRENT_BASED = SensorSheet(
    effort_noise=(0.1, 0.5), velocity_noise=(0.001, 0.006), encoder_bits=17, bias_max=2.0,
    source="common practice, no source (efforts from motor currents)")


def robots() -> dict[str, RobotEntry]:
    """The catalogue, by name."""
    erd = example_robot_data_dir()
    marten_q0 = {"marten_shoulder_yaw": 0.1, "marten_shoulder_pitch": 0.5,
                 "marten_upper_arm_roll": 0.2, "marten_elbow_pitch": 1.2,
                 "marten_forearm_roll": -0.3, "marten_wrist_pitch": 0.6,
                 "marten_wrist_roll": 0.1}
    return {
        "marten_arm": RobotEntry("marten_arm", Path(marten.ARM_URDF), marten.CONTACT_FRAME,
                                 marten_q0, MARTEN_SENSORS),
        "marten_mobile": RobotEntry("marten_mobile", Path(marten.MOBILE_URDF),
                                    marten.CONTACT_FRAME, marten_q0, MARTEN_SENSORS),
        # start postures: bent, away from joint limits (>= 1 rad margin on the Panda and UR5)
        # and from singularities (condition number of the 6 x n contact Jacobian 8-10)
        "panda": RobotEntry(
            "panda", erd / "panda_description/urdf/panda.urdf", "panda_hand_tcp",
            {"panda_joint1": 0.0, "panda_joint2": -0.4, "panda_joint3": 0.0,
             "panda_joint4": -2.0, "panda_joint5": 0.0, "panda_joint6": 1.6,
             "panda_joint7": 0.785, "panda_finger_joint1": 0.02, "panda_finger_joint2": 0.02},
            TORQUE_SENSOR_ARM),
        "ur5": RobotEntry(
            "ur5", erd / "ur_description/urdf/ur5_robot.urdf", "tool0",
            {"shoulder_pan_joint": 0.3, "shoulder_lift_joint": -1.6, "elbow_joint": 1.6,
             "wrist_1_joint": -1.57, "wrist_2_joint": -1.57, "wrist_3_joint": 0.0},
            CURRENT_BASED),
        "tiago": RobotEntry(
            "tiago", erd / "tiago_description/robots/tiago.urdf", "hand_grasping_frame",
            {"torso_lift_joint": 0.15, "arm_1_joint": 0.7, "arm_2_joint": 0.3,
             "arm_3_joint": -1.5, "arm_4_joint": 1.7, "arm_5_joint": -1.5, "arm_6_joint": 0.5,
             "arm_7_joint": 0.0},
            CURRENT_BASED),
    }


ROBOT_NAMES = ("marten_arm", "marten_mobile", "panda", "ur5", "tiago")
