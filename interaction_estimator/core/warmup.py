"""Compile (or load from the cache) every compiled function before a node, a replay or a test
needs it. ``python -m interaction_estimator.core.warmup`` does it once and says how long it took;
``make setup`` runs it, so that no test, demo or node compiles while it runs.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

from .compiled import CACHE_DIR


def warm_up() -> float:
    """Compile, or load from the cache, every compiled function for the argument types the
    package uses: a Pipeline on the built-in robot in both observer forms and both wrench
    modes, through contact, each stage on its own, and the estimates.csv writer on a small
    table. Returns the seconds it took."""
    import tempfile

    import numpy as np

    from .environment import EnvironmentFilter
    from ..io.estimates import _NUMERIC, STATES, EstimateTable, float_texts, write_csv
    from .observer import (BiasEstimator, ContactMonitor, FrictionModel,
                           KalmanMomentumObserver, MomentumObserver)
    from .pipeline import Pipeline
    from .samples import Sample, SampleBlock
    from ..sim import marten
    from .settings import Settings
    from .wrench import AlongKinematics, Direction, WrenchMap

    start = time.perf_counter()
    urdf = marten.arm_urdf()
    for extra in ({}, {"observer.form": "first_order", "wrench.mode": "wrench",
                       "direction.mode": "estimated", "effort_side": "motor",
                       "friction.viscous": [0.1]}):
        settings = Settings({"contact.hold_time": 0.0, "bias.startup": 0.01, **extra})
        pipe = Pipeline(settings, urdf)
        names = pipe.model.joint_names
        zeros = np.zeros(len(names))
        for k in range(60):
            push = np.full(len(names), 30.0 if k > 30 else 0.0)
            pipe.process(Sample(k * 1e-3, names, zeros + 0.3, zeros + 0.01 * k, push))
        rows = np.ones((20, len(names)))   # and a recording's block (Pipeline.process_block)
        pipe.process_block(SampleBlock(np.arange(60, 80) * 1e-3, names, rows * 0.3,
                                       rows * 0.6, rows * 30.0, np.zeros(20, bool)))
    n = 2
    obs = [KalmanMomentumObserver(np.full(n, 50.0), 0.003, 0.1, 1.0),
           KalmanMomentumObserver(np.array([50.0, 60.0]), 0.003, 0.1, 1.0),
           MomentumObserver(np.full(n, 50.0), 1.0)]
    for k in range(3):
        for o in obs:
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
    kin = AlongKinematics(0.01, 2, 1e-3, 50.0)
    for k in range(20):
        kin.push(k * 1e-3, 1e-4, 0.1, 1.0)
    kin.aligned_row(1e-3)
    kin.start_contact(0.0)
    flt = EnvironmentFilter(Settings())
    flt.update(0.0, np.array([0.1, 0.2, 0.01, 1.0]), 3.0)
    flt.inflate("warm-up")
    EnvironmentFilter._project([1.0, -1.0, -1.0, 0.0], np.eye(4).ravel().tolist(), (True,) * 4)
    table = EstimateTable()
    for k in range(3):
        table.append_values([float(k)] * len(_NUMERIC), STATES[k])
    with tempfile.TemporaryDirectory() as tmp:
        write_csv(Path(tmp) / "estimates.csv", table)
    float_texts(np.array([0.1, -2.5e-7]))
    return time.perf_counter() - start


def main() -> int:
    seconds = warm_up()
    print(f"interaction_estimator: compiled functions ready in {seconds:.1f} s "
          f"(cache: {CACHE_DIR})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
