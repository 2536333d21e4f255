"""Accuracy figures against MuJoCo ground truth (prints, asserts nothing).

Force RMSE (percent of peak) for the arm and the 10-joint mobile robot, with and without the
measurement corruption of the issues (effort noise 0.1 N·m, velocity noise 0.003 rad/s, 18-bit
encoders, torque bias up to 2 N·m), and object-parameter errors with their time to convergence
(time from contact onset until each parameter is first reported converged).
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from interaction_estimator.core.pipeline import Pipeline  # noqa: E402
from interaction_estimator.core.samples import Sample  # noqa: E402
from interaction_estimator.core.settings import Settings  # noqa: E402
from interaction_estimator.sim import marten  # noqa: E402
from interaction_estimator.sim.mujoco_world import arm, common  # noqa: E402

PARAMS = ("mass", "damping", "stiffness", "static_force")


def run_pipeline(run, settings):
    pipe = Pipeline(settings, run.urdf)
    return [pipe.process(Sample(float(t), run.joint_names, run.position[k], run.velocity[k],
                                run.effort[k])) for k, t in enumerate(run.time)]


def corrupt(run, n, seed):
    bias = np.random.default_rng(7).uniform(-2.0, 2.0, n)
    return common.corrupt(run, effort_noise=0.1, velocity_noise=0.003, encoder_bits=18, bias=bias,
                      seed=seed)


def main() -> None:
    print("Force estimate vs MuJoCo applied force (28 N peak, 0.5-2 Hz), RMSE after 0.5 s of "
          "contact")
    print(f"  {'robot':8s} {'clean':>8s} {'noisy':>8s} {'no bias comp.':>14s}")
    for name, path, n in (("arm", marten.ARM_URDF, 7), ("mobile", marten.MOBILE_URDF, 10)):
        run = arm.run_applied_force(path, arm.example_force(free_time=1.0, peak=30.0),
                                   duration=6.0, free_time=1.0)
        noisy = corrupt(run, n, 1)
        peak = np.linalg.norm(run.true_force, axis=1).max()
        keep = run.time > 1.5
        figures = []
        for r, s in ((run, Settings()), (noisy, Settings()),
                     (noisy, Settings({"bias.learn": False}))):
            f = np.array([e.force for e in run_pipeline(r, s)])
            err = f[keep] - run.true_force[keep]
            figures.append(100 * np.sqrt(np.mean(np.sum(err**2, 1))) / peak)
        print(f"  {name:8s} {figures[0]:7.2f}% {figures[1]:7.2f}% {figures[2]:13.2f}%")

    print("\nObject parameters (arm, noisy measurements, MuJoCo slide-joint object), final error"
          " and time to convergence after contact onset")
    cases = (("spring-damper, x", (1.5, 12.0, 300.0, 4.0), (1, 0, 0), {}),
             ("lifted 2 kg, +z", (2.0, 0.0, 0.0, 0.0), (0, 0, 1), {"gravity_on_object": True}),
             ("cart-like 4 kg, y", (4.0, 24.0, 0.0, 7.845), (0, 1, 0), {}))
    for label, (m, d, k, f0), u, kw in cases:
        run = arm.run_attached_object(marten.ARM_URDF, m, d, k, f0, u, duration=10.0,
                                     free_time=1.5, **kw)
        noisy = corrupt(run, 7, 3)
        est = run_pipeline(noisy, Settings({"direction.vector": list(u)}))
        truth = np.array([run.truth[p] for p in PARAMS])
        conv = np.array([e.parameter_converged for e in est])
        onset = next(e.time for e in est if e.in_contact)
        print(f"  {label}: contact detected {onset - 1.5:.3f} s after attachment")
        for i, p in enumerate(PARAMS):
            final, std = est[-1].parameters[i], est[-1].parameter_std[i]
            rel = f"{100 * (final - truth[i]) / truth[i]:+6.1f}%" if truth[i] else "   (0)"
            tc = (f"{run.time[np.argmax(conv[:, i])] - onset:5.2f} s" if conv[:, i].any()
                  else "never")
            print(f"    {p:13s} truth {truth[i]:8.3f}  est {final:8.3f} ± {std:6.3f}  {rel}"
                  f"  converged after {tc}")


if __name__ == "__main__":
    main()
