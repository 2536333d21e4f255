"""Marten: the project's own fictional mobile manipulator, for the demo and the tests.

A 7-joint arm (about 0.95 m reach, 14.4 kg) on a holonomic base written as three URDF joints
(``marten_base_x`` and ``marten_base_y`` prismatic, ``marten_base_yaw`` continuous), so the mobile
variant has 10 joints. The arm-only variant fixes the arm's base to the world. Masses and inertias
are invented but plausible (links as solid cylinders). Not a model of any real product.

Two more of our own, whose base is published as real mobile bases are: by odometry and an IMU
(``base.source: odometry``), with the URDF's root link as the base:

* ``marten_rover``: the arm on a differential-drive base (``rover_base``: 42 kg, two driven
  wheels of 0.1 m radius on continuous joints, two frictionless caster balls), an IMU
  (``rover_imu``) mounted upside down and turned by 90 degrees;
* ``marten_orb``: the arm on a body that balances on one ball (``orb_body``, its origin at the
  ball's centre; the ball and its drive are not in the URDF: they belong to the base, which the
  estimator does not need), an IMU (``orb_imu``) turned by -90 degrees about the vertical.

``python -m interaction_estimator.sim.marten`` rewrites the URDF files in ``robots/``.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

ROBOTS_DIR = Path(__file__).with_name("robots")
ARM_URDF = ROBOTS_DIR / "marten_arm.urdf"
MOBILE_URDF = ROBOTS_DIR / "marten_mobile.urdf"
ROVER_URDF = ROBOTS_DIR / "marten_rover.urdf"
ORB_URDF = ROBOTS_DIR / "marten_orb.urdf"
ROVER_BASE, ROVER_IMU = "rover_base", "rover_imu"
ROVER_WHEELS = ("rover_wheel_left", "rover_wheel_right")
ROVER_WHEEL_RADIUS = 0.1      # m
ROVER_HALF_TRACK = 0.25       # m, wheel to the base's centre line
ROVER_CASTERS = ((0.30, 0.0), (-0.30, 0.0))   # m, caster ball centres (x, y) in rover_base
ROVER_CASTER_RADIUS = 0.05    # m
ORB_BODY, ORB_IMU = "orb_body", "orb_imu"
ORB_BALL_RADIUS = 0.12        # m
CONTACT_FRAME = "tool_tip"

ARM_JOINTS = (
    "marten_shoulder_yaw", "marten_shoulder_pitch", "marten_upper_arm_roll", "marten_elbow_pitch",
    "marten_forearm_roll", "marten_wrist_pitch", "marten_wrist_roll",
)
BASE_JOINTS = ("marten_base_x", "marten_base_y", "marten_base_yaw")


@dataclass(frozen=True)
class Link:
    name: str
    mass: float       # kg
    length: float     # m, along the link's z axis (cylinder)
    radius: float     # m
    joint: str        # joint that moves this link
    axis: str         # "0 0 1" or "0 1 0"
    offset_z: float   # m, joint origin above the parent link's frame
    effort: float     # N·m, limit
    lower: float      # rad
    upper: float      # rad


ARM = (
    Link("marten_link1", 3.2, 0.16, 0.060, ARM_JOINTS[0], "0 0 1", 0.10, 150.0, -2.9, 2.9),
    Link("marten_link2", 3.6, 0.40, 0.050, ARM_JOINTS[1], "0 1 0", 0.16, 150.0, -2.0, 2.0),
    Link("marten_link3", 2.4, 0.10, 0.045, ARM_JOINTS[2], "0 0 1", 0.40, 80.0, -2.9, 2.9),
    Link("marten_link4", 2.2, 0.34, 0.040, ARM_JOINTS[3], "0 1 0", 0.10, 80.0, -2.6, 2.6),
    Link("marten_link5", 1.4, 0.08, 0.035, ARM_JOINTS[4], "0 0 1", 0.34, 30.0, -2.9, 2.9),
    Link("marten_link6", 1.0, 0.08, 0.035, ARM_JOINTS[5], "0 1 0", 0.08, 30.0, -2.0, 2.0),
    Link("marten_link7", 0.6, 0.06, 0.030, ARM_JOINTS[6], "0 0 1", 0.08, 15.0, -2.9, 2.9),
)
TOOL_OFFSET = 0.09  # m beyond the last link's frame


def _inertial(mass: float, length: float, radius: float, com_z: float) -> str:
    ixx = mass * (3 * radius**2 + length**2) / 12.0
    izz = mass * radius**2 / 2.0
    return (f'    <inertial>\n      <origin xyz="0 0 {com_z:.4f}" rpy="0 0 0"/>\n'
            f'      <mass value="{mass:.4f}"/>\n'
            f'      <inertia ixx="{ixx:.6f}" ixy="0" ixz="0" iyy="{ixx:.6f}" iyz="0" '
            f'izz="{izz:.6f}"/>\n    </inertial>\n')


def _arm(parent: str) -> str:
    out = []
    prev = parent
    for link in ARM:
        out.append(
            f'  <joint name="{link.joint}" type="revolute">\n'
            f'    <parent link="{prev}"/>\n    <child link="{link.name}"/>\n'
            f'    <origin xyz="0 0 {link.offset_z:.4f}" rpy="0 0 0"/>\n'
            f'    <axis xyz="{link.axis}"/>\n'
            f'    <limit lower="{link.lower}" upper="{link.upper}" effort="{link.effort}" '
            f'velocity="2.0"/>\n  </joint>\n')
        out.append(f'  <link name="{link.name}">\n'
                   + _inertial(link.mass, link.length, link.radius, link.length / 2)
                   + "  </link>\n")
        prev = link.name
    out.append(
        f'  <joint name="tool_mount" type="fixed">\n    <parent link="{prev}"/>\n'
        f'    <child link="{CONTACT_FRAME}"/>\n'
        f'    <origin xyz="0 0 {TOOL_OFFSET:.4f}" rpy="0 0 0"/>\n  </joint>\n'
        f'  <link name="{CONTACT_FRAME}"/>\n')
    return "".join(out)


def arm_urdf() -> str:
    """URDF text of the fixed-base arm (7 joints); world frame = ``marten_base``."""
    return ('<?xml version="1.0"?>\n<!-- Marten arm: fictional robot of the interaction_estimator'
            ' project. Generated by sim/marten.py. -->\n<robot name="marten_arm">\n'
            '  <link name="marten_base">\n' + _inertial(8.0, 0.10, 0.10, 0.05) + '  </link>\n'
            + _arm("marten_base") + "</robot>\n")


def mobile_urdf() -> str:
    """URDF text of the mobile manipulator (3 base joints + 7 arm joints); world = ``odom``."""
    carriage = _inertial(0.5, 0.02, 0.05, 0.0)
    return (
        '<?xml version="1.0"?>\n<!-- Marten mobile manipulator: fictional robot of the'
        ' interaction_estimator project. Generated by sim/marten.py. -->\n'
        '<robot name="marten_mobile">\n'
        '  <link name="odom"/>\n'
        '  <joint name="marten_base_x" type="prismatic">\n    <parent link="odom"/>\n'
        '    <child link="marten_carriage_x"/>\n    <axis xyz="1 0 0"/>\n'
        '    <limit lower="-50" upper="50" effort="800" velocity="1.5"/>\n  </joint>\n'
        '  <link name="marten_carriage_x">\n' + carriage + '  </link>\n'
        '  <joint name="marten_base_y" type="prismatic">\n    <parent link="marten_carriage_x"/>\n'
        '    <child link="marten_carriage_y"/>\n    <axis xyz="0 1 0"/>\n'
        '    <limit lower="-50" upper="50" effort="800" velocity="1.5"/>\n  </joint>\n'
        '  <link name="marten_carriage_y">\n' + carriage + '  </link>\n'
        '  <joint name="marten_base_yaw" type="continuous">\n'
        '    <parent link="marten_carriage_y"/>\n    <child link="marten_base"/>\n'
        '    <axis xyz="0 0 1"/>\n    <limit effort="400" velocity="2.0"/>\n  </joint>\n'
        '  <link name="marten_base">\n' + _inertial(45.0, 0.40, 0.30, 0.20) + '  </link>\n'
        '  <joint name="arm_mount" type="fixed">\n    <parent link="marten_base"/>\n'
        '    <child link="marten_arm_base"/>\n    <origin xyz="0.15 0 0.40" rpy="0 0 0"/>\n'
        '  </joint>\n'
        '  <link name="marten_arm_base">\n' + _inertial(8.0, 0.10, 0.10, 0.05) + '  </link>\n'
        + _arm("marten_arm_base") + "</robot>\n")


def _box_inertial(mass: float, size: tuple[float, float, float], com: tuple[float, ...]) -> str:
    a, b, c = size
    ixx, iyy, izz = (mass * (b * b + c * c) / 12.0, mass * (a * a + c * c) / 12.0,
                     mass * (a * a + b * b) / 12.0)
    return (f'    <inertial>\n      <origin xyz="{com[0]:.4f} {com[1]:.4f} {com[2]:.4f}" '
            f'rpy="0 0 0"/>\n      <mass value="{mass:.4f}"/>\n'
            f'      <inertia ixx="{ixx:.6f}" ixy="0" ixz="0" iyy="{iyy:.6f}" iyz="0" '
            f'izz="{izz:.6f}"/>\n    </inertial>\n')


def _fixed(name: str, parent: str, child: str, xyz: str, rpy: str = "0 0 0") -> str:
    return (f'  <joint name="{name}" type="fixed">\n    <parent link="{parent}"/>\n'
            f'    <child link="{child}"/>\n    <origin xyz="{xyz}" rpy="{rpy}"/>\n'
            '  </joint>\n')


def rover_urdf() -> str:
    """URDF text of the wheeled mobile manipulator (root link ``rover_base`` on the ground
    between the wheels; 2 wheel joints, which the estimator locks, and the 7 arm joints)."""
    r, b = ROVER_WHEEL_RADIUS, ROVER_HALF_TRACK
    wheel_i = 2.0 * r * r / 2.0
    across = wheel_i / 2 + 2.0 * 0.04**2 / 12
    wheels = ""
    for name, y in ((ROVER_WHEELS[0], b), (ROVER_WHEELS[1], -b)):
        link = name.replace("wheel", "wheel_link")
        wheels += (
            f'  <joint name="{name}" type="continuous">\n    <parent link="{ROVER_BASE}"/>\n'
            f'    <child link="{link}"/>\n    <origin xyz="0 {y:.4f} {r:.4f}" rpy="0 0 0"/>\n'
            '    <axis xyz="0 1 0"/>\n    <limit effort="60" velocity="20"/>\n  </joint>\n'
            f'  <link name="{link}">\n    <inertial>\n      <origin xyz="0 0 0"/>\n'
            f'      <mass value="2.0"/>\n      <inertia ixx="{across:.6f}"'
            f' ixy="0" ixz="0" iyy="{wheel_i:.6f}" iyz="0" '
            f'izz="{across:.6f}"/>\n    </inertial>\n  </link>\n')
    return (
        '<?xml version="1.0"?>\n<!-- Marten rover: fictional wheeled mobile manipulator of the'
        ' interaction_estimator project. Generated by sim/marten.py. -->\n'
        '<robot name="marten_rover">\n'
        f'  <link name="{ROVER_BASE}">\n' + _box_inertial(42.0, (0.7, 0.5, 0.3), (0, 0, 0.25))
        + '  </link>\n' + wheels
        + _fixed("rover_imu_mount", ROVER_BASE, ROVER_IMU, "-0.1000 0.0500 0.3000",
                 "3.14159265358979 0 1.57079632679490")
        + f'  <link name="{ROVER_IMU}"/>\n'
        + _fixed("arm_mount", ROVER_BASE, "marten_arm_base", "0.1500 0 0.4000")
        + '  <link name="marten_arm_base">\n' + _inertial(8.0, 0.10, 0.10, 0.05) + '  </link>\n'
        + _arm("marten_arm_base") + "</robot>\n")


def orb_urdf() -> str:
    """URDF text of the ball-balancing mobile manipulator (root link ``orb_body``, origin at
    the ball's centre; the 7 arm joints). The ball is not part of it."""
    return (
        '<?xml version="1.0"?>\n<!-- Marten orb: fictional ball-balancing mobile manipulator'
        ' of the interaction_estimator project. Generated by sim/marten.py. -->\n'
        '<robot name="marten_orb">\n'
        f'  <link name="{ORB_BODY}">\n' + _box_inertial(24.0, (0.3, 0.3, 0.7), (-0.04, 0, 0.45))
        + '  </link>\n'
        + _fixed("orb_imu_mount", ORB_BODY, ORB_IMU, "0 0 0.3000", "0 0 -1.57079632679490")
        + f'  <link name="{ORB_IMU}"/>\n'
        + _fixed("arm_mount", ORB_BODY, "marten_arm_base", "-0.1500 0 0.8000")
        + '  <link name="marten_arm_base">\n' + _inertial(6.0, 0.10, 0.10, 0.05) + '  </link>\n'
        + _arm("marten_arm_base") + "</robot>\n")


def write_files() -> None:
    ROBOTS_DIR.mkdir(exist_ok=True)
    ARM_URDF.write_text(arm_urdf(), encoding="utf-8")
    MOBILE_URDF.write_text(mobile_urdf(), encoding="utf-8")
    ROVER_URDF.write_text(rover_urdf(), encoding="utf-8")
    ORB_URDF.write_text(orb_urdf(), encoding="utf-8")


if __name__ == "__main__":
    write_files()
    print(f"wrote {ARM_URDF}, {MOBILE_URDF}, {ROVER_URDF} and {ORB_URDF}")
