"""Per-sample cost of the whole Pipeline for the 10-joint demo robot (prints, asserts nothing).

Two figures from the same samples, measured in alternating batches (floor, pipeline, floor, ...)
so that both see the same load on a shared machine:
  floor      the Pinocchio calls the Pipeline needs (crba, Coriolis matrix, gravity, joint
             Jacobians, frame placement and Jacobian) and the joint-name mapping;
  pipeline   the whole Pipeline.process: validation, the same calls, the compiled step of every
             stage, health verdict and Estimate (issue target: <= 4x floor).
The ratio is the median over batch pairs of pipeline time / floor time (each pair ran back to
back); the per-sample figures are the fastest batches. Then memory growth of the Pipeline over a
long run (target: flat).
Usage: python test/benchmarks/bench_pipeline.py [--samples N] [--memory-minutes M]
"""
from __future__ import annotations

import argparse
import statistics
import time
import tracemalloc

import numpy as np
import pinocchio as pin

from interaction_estimator.core.model import RobotModel
from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.samples import Sample
from interaction_estimator.core.settings import Settings
from interaction_estimator.core.warmup import warm_up
from interaction_estimator.sim import marten


def make_samples(n: int, rate: float = 1000.0) -> list[Sample]:
    """Joint motion of the demo robot, efforts from Pinocchio inverse dynamics plus a push."""
    model = RobotModel(marten.mobile_urdf(), marten.CONTACT_FRAME)
    names = model.joint_names
    rest = np.array([0, 0, 0, 0.1, 0.5, 0.0, 1.2, 0.0, 0.6, 0.0])
    out = []
    for k in range(n):
        t = k / rate
        w = 2 * np.pi * 0.5
        ang = rest + 0.2 * np.sin(w * t + np.arange(10))
        vel = 0.2 * w * np.cos(w * t + np.arange(10))
        acc = -0.2 * w * w * np.sin(w * t + np.arange(10))
        q = model.configuration_from_angles(ang)
        tau = pin.rnea(model.model, model.data, q, vel, acc).copy()
        if t > 2.0:
            dyn = model.dynamics(q, vel)
            tau -= dyn.jacobian[:3].T @ np.array([0.0, 0.0, 15.0 + 5 * np.sin(3 * t)])
        out.append(Sample(t, names, ang, vel, tau))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=4000)
    ap.add_argument("--memory-minutes", type=float, default=10.0)
    ap.add_argument("--batch", type=int, default=200, help="samples per timed batch")
    ap.add_argument("--rounds", type=int, default=5, help="passes over the samples")
    args = ap.parse_args()
    warm_up()
    samples = make_samples(args.samples)
    model = RobotModel(marten.mobile_urdf(), marten.CONTACT_FRAME)

    def floor(s):
        q, v, _ = model.joint_map(s.names).apply(s)
        model.terms(q, v)   # the six Pinocchio calls

    clock = time.perf_counter
    floor_times, pipe_times, ratios = [], [], []
    for _ in range(args.rounds):   # the Pipeline is stateful: a fresh one per pass
        process = Pipeline(Settings(), marten.mobile_urdf()).process
        for i in range(0, len(samples), args.batch):
            batch = samples[i:i + args.batch]
            t0 = clock()
            for s in batch:
                floor(s)
            t1 = clock()
            for s in batch:
                process(s)
            t2 = clock()
            floor_times.append((t1 - t0) / len(batch) * 1e6)
            pipe_times.append((t2 - t1) / len(batch) * 1e6)
            ratios.append((t2 - t1) / (t1 - t0))
    f, pl = min(floor_times), min(pipe_times)
    ratio = statistics.median(ratios)
    print("Per-sample cost, 10-joint Marten mobile manipulator "
          f"({args.samples} samples x {args.rounds} passes, batches of {args.batch} "
          "alternating floor and pipeline)")
    print(f"  Pinocchio calls alone (floor)  {f:8.1f} us   (fastest batch; median "
          f"{statistics.median(floor_times):.1f})")
    print(f"  whole Pipeline                 {pl:8.1f} us   (fastest batch; median "
          f"{statistics.median(pipe_times):.1f})")
    print(f"  ratio pipeline / floor, median of {len(ratios)} batch pairs: {ratio:4.2f} x "
          f"(quartiles {np.percentile(ratios, 25):.2f}-{np.percentile(ratios, 75):.2f}; "
          "target <= 4x)")
    print(f"  -> sustained rate of the whole Pipeline on one core: {1e6 / pl:,.0f} samples/s")

    # memory: run the pipeline over simulated minutes at 1 kHz (samples re-stamped in a loop)
    total = int(args.memory_minutes * 60 * 1000)
    pipe = Pipeline(Settings(), marten.mobile_urdf())
    tracemalloc.start()
    checkpoints = []
    base = samples[0].time
    period = len(samples) / 1000.0
    t0 = time.perf_counter()
    for k in range(total):
        s = samples[k % len(samples)]
        cycle = k // len(samples)
        pipe.process(Sample(s.time - base + cycle * period, s.names, s.position, s.velocity,
                            s.effort))
        if k % (total // 5) == 0 or k == total - 1:
            checkpoints.append((k / 1000.0, tracemalloc.get_traced_memory()[0] / 1024))
    tracemalloc.stop()
    wall = time.perf_counter() - t0
    print(f"Memory over {args.memory_minutes:g} simulated minutes at 1 kHz "
          f"({wall:.0f} s wall, traced Python allocations):")
    for sim_s, kib in checkpoints:
        print(f"  t = {sim_s:7.0f} s   {kib:9.1f} KiB")


if __name__ == "__main__":
    main()
