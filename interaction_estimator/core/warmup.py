"""Compile (or load from the cache) every compiled function of the core before a node, a replay
or a test needs it. ``python -m interaction_estimator.core.warmup`` does it once and says how
long it took; ``make setup`` runs it, so that no test, demo or node compiles while it runs.
"""
from __future__ import annotations

import sys
import time

import numpy as np

from .compiled import CACHE_DIR

# A small robot of our own, only to run every compiled path once: a revolute joint, a
# continuous joint and a prismatic joint, and a tool tip.
_LINK = ('<link name="{name}"><inertial><origin xyz="0 0 0.1"/><mass value="{mass}"/>'
         '<inertia ixx="0.01" ixy="0" ixz="0" iyy="0.01" iyz="0" izz="0.005"/></inertial>'
         '</link>')
WARMUP_URDF = (
    '<?xml version="1.0"?><robot name="warmup_arm"><link name="base"/>'
    + _LINK.format(name="upper", mass=2.0) + _LINK.format(name="fore", mass=1.0)
    + _LINK.format(name="slide", mass=0.5)
    + '<link name="tool_tip"/>'
    '<joint name="shoulder" type="revolute"><parent link="base"/><child link="upper"/>'
    '<axis xyz="0 1 0"/><limit lower="-3" upper="3" effort="50" velocity="2"/></joint>'
    '<joint name="elbow" type="continuous"><parent link="upper"/><child link="fore"/>'
    '<origin xyz="0 0 0.3"/><axis xyz="0 1 0"/></joint>'
    '<joint name="extend" type="prismatic"><parent link="fore"/><child link="slide"/>'
    '<origin xyz="0 0 0.3"/><axis xyz="1 0 0"/>'
    '<limit lower="-0.2" upper="0.2" effort="50" velocity="1"/></joint>'
    '<joint name="tip" type="fixed"><parent link="slide"/><child link="tool_tip"/>'
    '<origin xyz="0.1 0 0"/></joint></robot>')


def warm_up() -> float:
    """Compile, or load from the cache, every compiled function for the argument types the
    package uses: a Pipeline in both observer forms and both wrench modes, through contact,
    one sample at a time and in blocks, and each stage on its own. Returns the seconds it
    took."""
    from . import mechanism
    from .compensation import BiasEstimator, FrictionModel
    from .contact import ContactMonitor
    from .direction import Direction
    from .environment import EnvironmentFilter
    from .kinematics import AlongKinematics
    from .mechanism import fit_circle, fit_line
    from .object_models import (
        CARTESIAN,
        MATCH_NONE,
        cartesian_row,
        new_records,
        project_semidefinite,
    )
    from .observer import KalmanMomentumObserver, MomentumObserver
    from .pipeline import Pipeline
    from .samples import Sample, SampleBlock
    from .settings import Settings
    from .wrench import WrenchMap

    start = time.perf_counter()
    for extra in ({}, {"observer.form": "first_order", "wrench.mode": "wrench",
                       "direction.mode": "estimated", "effort_side": "motor",
                       "friction.viscous": [0.1], "filter.memory": 5.0},
                  {"environment.model": "cartesian"}, {"environment.model": "revolute"},
                  {"environment.model": "prismatic", "observer.form": "first_order"}):
        settings = Settings({"contact.hold_time": 0.0, "bias.startup": 0.01, **extra})
        pipe = Pipeline(settings, WARMUP_URDF)
        names = pipe.model.joint_names
        zeros = np.zeros(len(names))
        for k in range(60):
            push = np.full(len(names), 30.0 if k > 30 else 0.0)
            pipe.process(Sample(k * 1e-3, names, zeros + 0.3, zeros + 0.01 * k, push))
        rows = np.ones((20, len(names)))   # and a recording's block (Pipeline.process_block)
        pipe.process_block(SampleBlock(np.arange(60, 80) * 1e-3, names, rows * 0.3,
                                       rows * 0.6, rows * 30.0, np.zeros(20, bool)))
    # a moving base (base.source odometry): the base's interpolation, one sample and a block
    from .base import ImuMessage, OdometryMessage
    pipe = Pipeline(Settings({"base.source": "odometry", "bias.startup": 0.01}), WARMUP_URDF,
                    whole_recording=True)
    names = pipe.model.joint_names
    level = np.array([0.0, 0.0, 0.0, 1.0])
    for k in range(0, 90, 5):
        pipe.add_odometry(OdometryMessage(k * 1e-3, "odom", "", np.zeros(3), level,
                                          np.zeros(3), np.zeros(3)))
        pipe.add_imu(ImuMessage(k * 1e-3, "", level, np.zeros(3)))
    zeros = np.zeros(len(names))
    for k in range(30):
        pipe.process(Sample(k * 1e-3, names, zeros + 0.3, zeros, zeros + 1.0))
    rows = np.ones((20, len(names)))
    pipe.process_block(SampleBlock(np.arange(30, 50) * 1e-3, names, rows * 0.3, rows * 0.1,
                                   rows, np.zeros(20, bool)))
    n = 2
    observers = [KalmanMomentumObserver(np.full(n, 50.0), 0.003, 0.1, 1.0),
                 KalmanMomentumObserver(np.array([50.0, 60.0]), 0.003, 0.1, 1.0),
                 MomentumObserver(np.full(n, 50.0), 1.0)]
    for k in range(3):
        for o in observers:
            o.step(k * 1e-3, np.ones(n), np.zeros(n), np.eye(n))
    FrictionModel(np.ones(n), np.ones(n), 0.01, True).torque(np.ones(n))
    bias = BiasEstimator(np.zeros(n), 0.2, 10.0, 10.0, True)
    bias.update(0.001, 0.001, np.ones(n))
    monitor = ContactMonitor(n, 6.0, 3.0, 0.0, 0.05, 2.0)
    monitor.step(0.0, np.ones(n))
    monitor.learn_power(0.01, np.ones(n))
    _ = monitor.weights
    WrenchMap(False, 1e-3).solve(np.ones((6, n)), np.ones(n), np.ones(n))
    Direction("estimated", [1, 0, 0], 0.5, 10.0, 0.0).update(1e-3, np.eye(3), np.ones(3))
    kin = AlongKinematics(0.01, 2, 1e-3)
    for k in range(20):
        kin.push(k * 1e-3, 1e-4, 0.1, 1.0)
    kin.centre()
    kin.start_contact(0.0)
    flt = EnvironmentFilter(Settings())
    for k in range(30):
        flt.update(k * 0.01, np.array([0.1 * k, 0.2, 0.01, 1.0]), 3.0 + k)
    flt.restart("warm-up")
    EnvironmentFilter._project([1.0, -1.0, -1.0, 0.0], np.eye(4), (True,) * 4)
    # the models beyond one direction, called on their own (tests, tools)
    arc = np.column_stack([np.cos(np.linspace(0, 1, 12)), np.sin(np.linspace(0, 1, 12)),
                           np.zeros(12)])
    fit_circle(arc)
    fit_line(arc)
    cartesian = new_records(CARTESIAN, MATCH_NONE, 0.0)
    cartesian_row(cartesian.params[0], cartesian.state[0], cartesian.rows, 1e-3, np.ones(3),
                  np.ones(3), np.ones(3))
    project_semidefinite(np.array([1.0, 2.0, 0.0, 1.0, 0.0, 1.0]), 0)
    p, s, path = mechanism.PARAMS.one()[0], mechanism.STATE.one()[0], mechanism.PATH.many(8)
    p["kind"] = mechanism.KIND_REVOLUTE
    mechanism.mechanism_start(p, s, path, np.zeros(3))
    mechanism.mechanism_add(p, s, path, np.ones(3))
    mechanism.mechanism_along(p, s, np.ones(3), True)
    return time.perf_counter() - start


def main() -> int:
    seconds = warm_up()
    print(f"interaction_estimator: compiled functions ready in {seconds:.1f} s "
          f"(cache: {CACHE_DIR})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
