"""The commissioning motion written out: a CSV of the samples and a
``trajectory_msgs/JointTrajectory`` in the YAML form ROS 2 tools take for a message
(``ros2 topic pub TOPIC trajectory_msgs/msg/JointTrajectory "$(cat FILE)"``; a
FollowJointTrajectory goal takes it under ``trajectory:``)."""
from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from .trajectory import FourierTrajectory

CSV_NAME = "excitation.csv"
YAML_NAME = "excitation_trajectory.yaml"


def sample(traj: FourierTrajectory, duration: float, rate: float
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(time (K,) s, position, velocity, acceleration (K, n)) every 1/rate s over
    [0, duration], the last point at ``duration`` (at rest when it is whole periods)."""
    k = int(math.floor(duration * rate + 1e-9))
    t = np.arange(k + 1) / rate
    if t[-1] < duration - 1e-12:
        t = np.append(t, duration)
    q, v, a = traj.evaluate(t)
    # the series is exactly at rest at whole periods: write the zeros, not round-off
    rest = np.isclose(np.mod(t / traj.period + 0.5, 1.0) - 0.5, 0.0, atol=1e-12)
    v[rest], a[rest] = 0.0, 0.0
    return t, q, v, a


def _num(x: float) -> str:
    return repr(float(x)) if x != 0 else "0.0"


def csv_text(joints: Sequence[str], t: np.ndarray, q: np.ndarray, v: np.ndarray,
             a: np.ndarray) -> str:
    """Columns: time (s), then position_<joint> (rad or m), velocity_<joint> (rad/s or m/s),
    acceleration_<joint> (rad/s² or m/s²) per joint in model order."""
    head = ["time"] + [f"position_{j}" for j in joints] + [f"velocity_{j}" for j in joints] \
        + [f"acceleration_{j}" for j in joints]
    lines = [",".join(head)]
    for k in range(len(t)):
        lines.append(",".join([_num(t[k])] + [_num(x) for x in q[k]] + [_num(x) for x in v[k]]
                              + [_num(x) for x in a[k]]))
    return "\n".join(lines) + "\n"


def trajectory_yaml(joints: Sequence[str], t: np.ndarray, q: np.ndarray, v: np.ndarray,
                    a: np.ndarray, comments: Sequence[str] = ()) -> str:
    """A trajectory_msgs/JointTrajectory as YAML (header stamp zero: "start now"). Each point's
    ``time_from_start`` is its time plus ``t[1]`` so that the first point is reached after one
    sample interval, as trajectory controllers expect a first point after t = 0."""
    lead = float(t[1] - t[0]) if len(t) > 1 else 0.0
    out = [f"# {c}" for c in comments]
    out += ["header:", "  stamp: {sec: 0, nanosec: 0}", "  frame_id: ''",
            "joint_names: [" + ", ".join(joints) + "]", "points:"]
    for k in range(len(t)):
        ns = int(round((t[k] + lead) * 1e9))
        out += ["- positions: [" + ", ".join(_num(x) for x in q[k]) + "]",
                "  velocities: [" + ", ".join(_num(x) for x in v[k]) + "]",
                "  accelerations: [" + ", ".join(_num(x) for x in a[k]) + "]",
                "  effort: []",
                f"  time_from_start: {{sec: {ns // 1_000_000_000}, nanosec: "
                f"{ns % 1_000_000_000}}}"]
    return "\n".join(out) + "\n"


def write(out: Path, name: str, text: str) -> Path:
    path = Path(out) / name
    tmp = path.with_name(path.name + ".partial")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(path)
    return path
