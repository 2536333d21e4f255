"""Mobile manipulators end to end in MuJoCo (issue 20): the wheeled marten_rover and the
ball-balancing marten_orb push, pull and lift objects while their base moves and tilts; each run
replayed with ``base.source: odometry`` (the base from odometry and IMU) and with
``base.source: joints`` on the same URDF (the base ignored: its root fixed to the world).

Prints, per run: force RMSE over the contact in % of the peak force, and each parameter's final
error in % of the scale the validation uses (Monte-Carlo validation, scoring.py: 5 % of the RMS
force along u over the RMS of that regressor column, the truth's own state). Ground truth:
MuJoCo (sim/mobile_world.py). ``python test/benchmarks/bench_mobile.py [--seed N] [SCENARIO ...]``
"""
from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

import numpy as np

from interaction_estimator.offline.replay import ReplayRequest, replay
from interaction_estimator.sim.mobile_scenarios import (
    SCENARIOS,
    simulate_mobile,
    truth_parameters,
    write_mobile_bag,
)

NAMES = ("mass", "damping", "stiffness", "static_force")


def scales(run) -> np.ndarray:
    """The error scale of each parameter: 5 % of the RMS force along u over the RMS of its
    regressor column (truth state), as the Monte-Carlo validation scores."""
    a = run.attached
    f = run.force_along[a]
    cols = [run.object_acceleration[a], run.object_velocity[a], run.object_position[a],
            np.ones(a.sum())]
    rms_f = float(np.sqrt(np.mean(f * f)))
    return np.array([0.05 * rms_f / max(float(np.sqrt(np.mean(c * c))), 1e-12) for c in cols])


def evaluate(run, out: Path) -> dict:
    cols = replay(ReplayRequest(bag=out.parent / "bag", out=out, progress=False,
                                reference_topic="/ground_truth/wrench",
                                params=out.parent / f"{out.name}.yaml")).columns
    t = cols["time"] - 1.0   # the bag's stamps are simulation time + 1 s
    idx = np.clip(np.searchsorted(run.time, t), 0, len(run.time) - 1)
    force = np.column_stack([cols["force_x"], cols["force_y"], cols["force_z"]])
    truth = run.force[idx]
    contact = run.attached[idx]
    err = force[contact] - truth[contact]
    rmse = float(np.sqrt(np.mean(np.sum(err * err, axis=1))))
    peak = float(np.max(np.linalg.norm(run.force[run.attached], axis=1)))
    params = truth_parameters(run)
    last = np.flatnonzero(contact)[-1]
    final = np.array([cols[p][last] for p in NAMES])
    true = np.array([params[p] for p in NAMES])
    s = scales(run)
    rel = np.abs(final - true) / np.maximum(np.abs(true), s)
    return {"rmse": rmse, "peak": peak, "rel": rel, "final": final, "true": true,
            "converged": bool(cols["converged"][last])}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("scenarios", nargs="*", default=sorted(SCENARIOS))
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    print(f"{'run':<12} {'base':<9} {'force RMSE':>11} {'% peak':>7} "
          + " ".join(f"{p[:6]:>8}" for p in NAMES) + "  conv  (parameter errors in % of the "
          "truth or the scale)")
    with tempfile.TemporaryDirectory() as tmp:
        for name in args.scenarios:
            run = simulate_mobile(name, args.seed)
            d = Path(tmp) / name
            d.mkdir()
            write_mobile_bag(d / "bag", run, wrench_frame="")
            for source in ("odometry", "joints"):
                (d / f"{source}.yaml").write_text(
                    "/**:\n  ros__parameters:\n    base:\n      source: " + source + "\n")
                r = evaluate(run, d / source)
                share = 100 * r["rmse"] / r["peak"]
                print(f"{name:<12} {source:<9} {r['rmse']:9.2f} N {share:6.1f}"
                      + " ".join(f"{100 * x:7.1f}%" for x in r["rel"])
                      + f"  {'yes' if r['converged'] else 'no':>4}   peak {r['peak']:.1f} N, "
                      f"tilt {np.degrees(run.base_tilt.max()):.1f} deg, final "
                      f"{np.round(r['final'], 2).tolist()} truth {np.round(r['true'], 2).tolist()}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
