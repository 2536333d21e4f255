"""Mobile manipulators end to end, ground truth from MuJoCo (sim/mobile_world.py, an independent
physics engine): the wheeled rover pulls a spring-loaded drawer while its base drives and turns,
the ball-balancing orb lifts a crate while it sways and tilts; each bag replayed with the base
from odometry and IMU, and with the base ignored (base.source joints). The thresholds are the
levels measured here (test/benchmarks/bench_mobile.py prints all six runs)."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from interaction_estimator.io.bag import RecordedBag
from interaction_estimator.offline.replay import ReplayRequest, replay
from interaction_estimator.sim.mobile_scenarios import (
    simulate_mobile,
    truth_parameters,
    write_mobile_bag,
)

NAMES = ("mass", "damping", "stiffness", "static_force")


def _replay(run, bag: Path, out: Path, source: str) -> dict:
    params = out.parent / f"{source}.yaml"
    params.write_text(f"/**:\n  ros__parameters:\n    base:\n      source: {source}\n")
    cols = replay(ReplayRequest(bag=bag, out=out, params=params, progress=False)).columns
    idx = np.clip(np.searchsorted(run.time, cols["time"] - 1.0), 0, len(run.time) - 1)
    contact = run.attached[idx]
    force = np.column_stack([cols["force_x"], cols["force_y"], cols["force_z"]])
    err = force[contact] - run.force[idx][contact]
    last = np.flatnonzero(contact)[-1]
    return {"rmse": float(np.sqrt(np.mean(np.sum(err * err, axis=1)))),
            "final": np.array([cols[p][last] for p in NAMES])}


@pytest.mark.parametrize("name, rmse_share, joints_factor, tolerance", [
    # measured (seed 1): rover_pull 4.6 % of the peak with odometry, 28.6 % ignoring the base;
    # orb_lift 6.7 % and 8.1 %
    ("rover_pull", 0.06, 3.0, (0.10, 0.05, 0.05, 0.03)),
    ("orb_lift", 0.08, 1.1, (0.06, 0.05, None, 0.02)),
])
def test_base_from_odometry_against_mujoco(tmp_path, name, rmse_share, joints_factor,
                                           tolerance):
    run = simulate_mobile(name, seed=1)
    bag = tmp_path / "bag"
    # topics under a namespace of their own: found by type (one Odometry, one Imu topic)
    write_mobile_bag(bag, run, wrench_frame="", odometry_topic="/base/odom",
                     imu_topic="/base/imu_data")
    with RecordedBag(bag) as b:
        assert (b.info.odometry, b.info.imu) == ("/base/odom", "/base/imu_data")
    peak = float(np.max(np.linalg.norm(run.force[run.attached], axis=1)))
    mine = _replay(run, bag, tmp_path / "odometry", "odometry")
    ignored = _replay(run, bag, tmp_path / "joints", "joints")
    assert mine["rmse"] < rmse_share * peak
    assert ignored["rmse"] > joints_factor * mine["rmse"]
    truth = truth_parameters(run)
    for p, tol, final in zip(NAMES, tolerance, mine["final"], strict=True):
        if tol is not None and truth[p] != 0.0:
            assert abs(final - truth[p]) <= tol * abs(truth[p]), (p, final, truth[p])
