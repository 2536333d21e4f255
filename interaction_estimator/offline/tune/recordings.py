"""The input of the tuning: recordings (bags, or simulated runs) in memory."""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ...core.environment import PARAMETER_NAMES
from ...core.samples import Sample
from .common import TuneError

# ============================================================================================
# input: recordings


@dataclass
class Reference:
    """A reference force series (for the report only): time (M,) s, force (M, 3) N, world."""

    source: str
    time: np.ndarray
    force: np.ndarray


@dataclass
class Recording:
    """One bag (or simulated run) in memory.

    name: label used in messages (the bag path). samples: joint states in recorded order.
    urdf: the robot description recorded with it, or None. recommended: settings recommended by
    the recording (simulated bags carry them), dotted names. truth: ground-truth object parameters
    {mass kg, damping N·s/m, stiffness N/m, static_force N} or None (none known, or no object in
    the recording; report only).
    reference: true force series or None (report only). base_messages: the odometry and IMU
    messages (core.base records) in recorded order, for base.source odometry (empty: none).
    """

    name: str
    samples: list[Sample]
    urdf: str | None = None
    recommended: dict[str, Any] = field(default_factory=dict)
    truth: dict[str, float] | None = None
    reference: Reference | None = None
    base_messages: list = field(default_factory=list)   # Odometry/Imu records, recorded order

    @property
    def duration(self) -> float:
        """s from the first to the last sample."""
        return self.samples[-1].time - self.samples[0].time if len(self.samples) > 1 else 0.0


def recording_from_run(run: Any, name: str | None = None) -> Recording:
    """A :class:`~.scenarios.simulator.SimulatedRun` as a Recording (no bag file needed)."""
    names = tuple(run.joint_names)
    samples = [Sample(float(t), names, run.position[k], run.velocity[k], run.effort[k])
               for k, t in enumerate(run.time)]
    truth = ({p: float(run.truth[p]) for p in PARAMETER_NAMES}
             if run.truth.get("has_object", True) else None)     # free motion only: no object
    ref = Reference("simulation ground truth", np.asarray(run.time, float),
                    np.asarray(run.true_force, float))
    return Recording(name or f"simulated {run.scenario} (seed {run.truth.get('seed')})",
                     samples, run.urdf, dict(run.settings), truth, ref)


def read_bag(path: Path, topics: Sequence[str] = ()) -> Recording:
    """Read a rosbag2 bag through :class:`~.bag.RecordedBag` (raises BagError on bad bags)."""
    from ...io.bag import RecordedBag, TopicNames
    with RecordedBag(path, TopicNames().with_overrides(list(topics))) as bag:
        samples = list(bag.samples())
        base = list(bag.base_messages(bag.info.imu is not None)) if bag.info.odometry else []
        urdf = bag.urdf()
        truth = bag.truth()
        ref = bag.reference()
    recommended = truth.settings if truth is not None else {}
    params = (dict(truth.parameters) if truth is not None and truth.parameters is not None
              else None)                                         # None: no object recorded
    reference = (Reference(f"bag topic {ref.topic}", ref.time, ref.force)
                 if ref is not None else None)
    if not samples:
        raise TuneError(f"bag {str(path)!r} holds no joint states; expected a recording of the "
                        "robot moving freely and then in contact")
    return Recording(str(path), samples, urdf, dict(recommended), params, reference, base)


