"""A simulated run as a rosbag2 bag, with its ground truth (what ``interaction-estimator
simulate`` writes)."""
from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from ..core.model import RobotModel
from ..io.bag_writer import BagWriter
from ..io.cdr import (
    JOINT_STATE,
    STRING,
    WRENCH_STAMPED,
    JointStateEncoder,
    encode_string,
    encode_wrench_stamped,
    seconds_to_stamp,
)
from ..io.ground_truth import TRUTH_METADATA_KEY, GroundTruth

SIMULATED_TIME_OFFSET = 1.0  # s added to simulation time in the stamps of a simulated bag


def write_simulated_bag(path: str | Path, run: Any, storage: str = "mcap",
                        description: str = "") -> None:
    """Write a :class:`~.simulator.SimulatedRun` as a bag: ``/robot_description``
    (transient local), ``/joint_states`` (efforts included; stamps = simulation time +
    :data:`SIMULATED_TIME_OFFSET`, since a zero stamp means "unset"),
    ``/ground_truth/wrench`` (true force the robot applies, world frame ``odom``-style URDF
    root, N; zero throughout for a scenario without an object) and the ground truth on
    ``/ground_truth/parameters`` and in the metadata (parameters and contact time null when the
    scenario has no object)."""
    root = RobotModel(run.urdf, run.contact_frame).root_frame
    truth_params = None
    if run.truth.get("parameters") is not None:   # a model's own names (cartesian)
        truth_params = {k: float(v) for k, v in run.truth["parameters"].items()}
    elif run.truth.get("has_object", True):
        truth_params = {k: float(run.truth[k]) for k in ("mass", "damping", "stiffness",
                                                          "static_force")}
    t0 = SIMULATED_TIME_OFFSET
    contact_time = run.truth.get("contact_time", math.nan)
    extra = {"scenario": run.scenario, "description": description,
             "contact_time": None if contact_time is None else t0 + float(contact_time),
             "time_offset": t0,
             "settings": _jsonable(run.settings), "seed": run.truth.get("seed"),
             "effort_side": run.truth.get("effort_side"), "noise": run.truth.get("noise"),
             "bias": _jsonable(run.truth.get("bias")),
             "effort_noise": _jsonable(run.truth.get("effort_noise")),
             "velocity_noise": _jsonable(run.truth.get("velocity_noise")),
             "joint_names": list(run.joint_names), "world_frame": root}
    for key in ("mechanism", "mass_matrix", "damping_matrix", "stiffness_matrix"):
        if run.truth.get(key) is not None:
            extra[key] = _jsonable(run.truth[key])
    truth = GroundTruth(truth_params, extra)
    enc = JointStateEncoder()
    names = tuple(run.joint_names)
    with BagWriter(path, storage) as w:
        text = truth.to_json()
        w.set_metadata(TRUTH_METADATA_KEY, text)
        w.write("/robot_description", STRING, 0, encode_string(run.urdf), transient_local=True)
        w.write("/ground_truth/parameters", STRING, 0, encode_string(text),
                transient_local=True)
        for k, t in enumerate(run.time):
            sec, nsec = seconds_to_stamp(t0 + float(t))
            ns = sec * 1_000_000_000 + nsec
            w.write("/joint_states", JOINT_STATE, ns,
                    enc.encode(sec, nsec, "", names, run.position[k], run.velocity[k],
                               run.effort[k]))
            w.write("/ground_truth/wrench", WRENCH_STAMPED, ns,
                    encode_wrench_stamped(sec, nsec, root, run.true_force[k], (0.0, 0.0, 0.0)))


def _jsonable(value: Any) -> Any:
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return value.item()
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    return value
