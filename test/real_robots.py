"""Real robots' published URDFs from PyPI ``example-robot-data`` (pinned in
requirements-test.txt), as test robots beside our own Marten.

The package is a cmeel wheel without a Python module: its files lie under
``<site-packages>/cmeel.prefix/share/example-robot-data/robots/`` (see /work/shared/NOTES.md).
"""
from __future__ import annotations

import xml.etree.ElementTree as ET
from importlib.metadata import distribution
from pathlib import Path

ROBOTS = distribution("example-robot-data").locate_file(
    "cmeel.prefix/share/example-robot-data/robots")

# name -> (file under ROBOTS, flange link: where a tool is mounted and the contact is taken)
ARMS = {
    "ur5": ("ur_description/urdf/ur5_robot.urdf", "tool0"),
    "xarm7": ("xarm_description/urdf/xarm7.urdf", "link_eef"),
    "panda": ("panda_description/urdf/panda.urdf", "panda_hand_tcp"),
    "z1": ("z1_description/urdf/z1.urdf", "gripperMover"),
    "kinova": ("kinova_description/robots/kinova.urdf", "j2s6s200_end_effector"),
    "tiago": ("tiago_description/robots/tiago.urdf", "arm_tool_link"),
}


def urdf_path(name: str) -> Path:
    return Path(str(ROBOTS)) / ARMS[name][0]


def urdf_text(name: str) -> str:
    return urdf_path(name).read_text(encoding="utf-8")


def kinematic_only(urdf: str) -> str:
    """The URDF without visual, collision, transmission and gazebo elements (their
    ``package://`` meshes cannot be opened by MuJoCo here; the dynamics do not use them)."""
    root = ET.fromstring(urdf)
    for link in root.iter("link"):
        for tag in ("visual", "collision"):
            for e in link.findall(tag):
                link.remove(e)
    for tag in ("transmission", "gazebo"):
        for e in root.findall(tag):
            root.remove(e)
    return ET.tostring(root, encoding="unicode")
