"""Time to identify a 7-joint arm's dynamics from a 60 s, 1 kHz commissioning bag. Prints
figures; asserts nothing. Target (issue 18): under 30 s on two cores.

The bag: our Marten arm in MuJoCo (test/identification_world.py) with its link masses off and a
1.5 kg tool, following the excitation command's motion; efforts with 0.1 N·m noise and a bias,
velocities with 0.003 rad/s noise, 18-bit encoders; written as an MCAP bag (60 000 joint
states). Timed, as tune does them: reading the bag, splitting it into runs in model order,
smoothing and differentiating, and the identification (regressor rows, two fits, the URDF
text). The excitation search and the simulation are not timed.

Run: .venv/bin/python test/benchmarks/bench_identification.py [--seconds 60]
"""
from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1]))
sys.path.insert(0, str(HERE.parent))

import identification_world as W  # noqa: E402

from interaction_estimator.core.model import RobotModel  # noqa: E402
from interaction_estimator.io.bag_writer import BagWriter  # noqa: E402
from interaction_estimator.io.cdr import (  # noqa: E402
    JOINT_STATE,
    STRING,
    JointStateEncoder,
    encode_string,
)
from interaction_estimator.offline.excitation import optimize, resolve  # noqa: E402
from interaction_estimator.offline.identification import (  # noqa: E402
    Options,
    Tool,
    identify_model,
    prepare,
    runs_from_samples,
)
from interaction_estimator.offline.tune import read_bag  # noqa: E402
from interaction_estimator.sim import marten  # noqa: E402


def make_bag(path: Path, seconds: float) -> tuple[str, float]:
    nominal = marten.arm_urdf()
    truth, _ = W.perturb(nominal, 21)
    truth = W.add_tool(truth, "tool_tip", 1.5, (0.01, -0.01, 0.04), (0.004, 0.005, 0.002))
    robot = RobotModel(nominal, "tool_tip")
    limits = resolve(robot.joint_names, nominal, 0.2, {}, 3.0, {}, {})
    motion = optimize(robot, nominal, limits, 10.0, 5, seed=0, starts=8, iterations=3)

    def ref(t):
        q, v, a = motion.trajectory.evaluate(np.array([t]))
        return q[0], v[0], a[0]
    t0 = time.perf_counter()
    run = W.track(W.load(truth), ref, seconds)
    sim = time.perf_counter() - t0
    rng = np.random.default_rng(0)
    quantum = 2 * np.pi / 2 ** 18
    q = np.round(run["position"] / quantum) * quantum
    v = run["velocity"] + 0.003 * rng.standard_normal(run["velocity"].shape)
    e = run["effort"] + 0.1 * rng.standard_normal(run["effort"].shape) + 0.5
    enc = JointStateEncoder()
    with BagWriter(path, "mcap") as w:
        w.write("/robot_description", STRING, 0, encode_string(nominal), transient_local=True)
        for k, t in enumerate(run["time"]):
            ns = int(round((t + 1.0) * 1e9))
            w.write("/joint_states", JOINT_STATE, ns,
                    enc.encode(ns // 1_000_000_000, ns % 1_000_000_000, "", robot.joint_names,
                               q[k], v[k], e[k]))
    return nominal, sim


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seconds", type=float, default=60.0, help="bag length (default 60)")
    args = parser.parse_args()
    print(f"cores: {os.cpu_count()}; bag: {args.seconds:g} s at 1 kHz, Marten arm (7 joints) "
          "with a tool")
    with tempfile.TemporaryDirectory(prefix="bench_ident_") as tmp:
        bag = Path(tmp) / "commissioning"
        nominal, sim = make_bag(bag, args.seconds)
        print(f"(simulation, not timed: {sim:.1f} s)")
        marks = [("start", time.perf_counter())]
        rec = read_bag(bag)
        marks.append(("read the bag", time.perf_counter()))
        robot = RobotModel(nominal, "tool_tip")
        runs, counts = runs_from_samples(rec.samples, robot, 0)
        marks.append(("joint states to runs in model order", time.perf_counter()))
        data = prepare(runs, robot, counts=counts)
        marks.append(("smoothing and differentiating", time.perf_counter()))
        result = identify_model(robot, nominal, data, 1, Options(),
                                [Tool("tool", "tool_tip")])
        marks.append(("identification (rows, two fits)", time.perf_counter()))
        result.urdf(nominal, ["benchmark"])
        marks.append(("URDF text", time.perf_counter()))
    for (_, a), (label, b) in zip(marks, marks[1:]):
        print(f"  {label:<40}{b - a:8.2f} s")
    total = marks[-1][1] - marks[0][1]
    print(f"  {'total':<40}{total:8.2f} s   (target: under 30 s)")
    print(f"joint states read: {len(rec.samples)}; samples after smoothing and thinning: "
          f"{len(data)} (every {data.thinning}th); base parameters: {result.base.count}")
    before = float(np.sqrt(np.mean(result.residual_before ** 2)))
    after = float(np.sqrt(np.mean(result.residual_after ** 2)))
    print(f"held-out free-motion residual, RMS over joints: {before:.3f} N·m with the URDF, "
          f"{after:.3f} N·m identified")
    tool = [r for r in result.links if r.kind == "tool"][0]
    print(f"tool: {tool.value[0]:.3f} +/- {tool.half_width[0]:.3f} kg (1.5 kg mounted; a "
          "body's mass is grouped with the links before it, so the split is the priors')")
    return 0


if __name__ == "__main__":
    sys.exit(main())
