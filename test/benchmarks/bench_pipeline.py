"""Per-sample cost of the estimation stages for the 10-joint demo robot (prints, asserts nothing).

Three figures from one run on the same samples:
  floor      the Pinocchio calls alone (crba, Coriolis matrix, gravity, joint Jacobians, frame
             placement and Jacobian), as RobotModel.dynamics makes them;
  stage      model + momentum observer (Kalman form, the default) + wrench map
             (issue target: <= 3x floor);
  pipeline   the whole Pipeline.process, filter and health included (target: <= 4x floor).
Then memory growth of the Pipeline over a long run (target: flat).
Usage: python test/benchmarks/bench_pipeline.py [--samples N] [--memory-minutes M]
"""
from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np
import pinocchio as pin

from interaction_estimator.model import RobotModel
from interaction_estimator.observer import KalmanMomentumObserver
from interaction_estimator.pipeline import Pipeline
from interaction_estimator.samples import Sample
from interaction_estimator.scenarios import marten
from interaction_estimator.settings import Settings
from interaction_estimator.wrench import WrenchMap


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


def per_sample_us(fn, samples, repeat=3) -> float:
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        for s in samples:
            fn(s)
        best = min(best, (time.perf_counter() - t0) / len(samples) * 1e6)
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=4000)
    ap.add_argument("--memory-minutes", type=float, default=10.0)
    args = ap.parse_args()
    samples = make_samples(args.samples)
    model = RobotModel(marten.mobile_urdf(), marten.CONTACT_FRAME)
    m, d, fid = model.model, model.data, model.frame_id
    jmap = model.joint_map(samples[0].names)

    def floor(s):
        q, v, _ = jmap.apply(s)
        pin.computeJointJacobians(m, d, q)
        pin.updateFramePlacement(m, d, fid)
        pin.crba(m, d, q)
        pin.computeCoriolisMatrix(m, d, q, v)
        pin.computeGeneralizedGravity(m, d, q)
        pin.getFrameJacobian(m, d, fid, pin.LOCAL_WORLD_ALIGNED)

    defaults = Settings()
    obs = KalmanMomentumObserver(np.full(10, defaults["observer.gain"][0]),
                                 defaults["observer.velocity_noise"],
                                 defaults["observer.effort_noise"], defaults["observer.max_gap"])
    wmap = WrenchMap(False, 1e-3)

    def stage(s):
        q, v, e = model.joint_map(s.names).apply(s)
        dyn = model.dynamics(q, v)
        r, _ = obs.step(s.time, dyn.mass_matrix @ v,
                        e + dyn.coriolis_transpose_velocity - dyn.gravity, dyn.mass_matrix)
        wmap.solve(dyn.jacobian, r)

    f = per_sample_us(floor, samples)
    st = pl = float("inf")
    for _ in range(3):  # stateful stages: a fresh start for each run, the best run kept
        obs.reset()
        st = min(st, per_sample_us(stage, samples, repeat=1))
        pipe = Pipeline(Settings(), marten.mobile_urdf())
        pl = min(pl, per_sample_us(pipe.process, samples, repeat=1))
    print("Per-sample cost, 10-joint Marten mobile manipulator "
          f"({args.samples} samples, best of runs)")
    print(f"  Pinocchio calls alone        {f:8.1f} us")
    print(f"  model + observer + wrench    {st:8.1f} us   = {st / f:4.1f} x floor  (target <= 3x)")
    print(f"  whole Pipeline               {pl:8.1f} us   = {pl / f:4.1f} x floor  (target <= 4x)")
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
