"""Start-up and whole-process replay time: the real commands run as processes (prints figures,
asserts nothing).

Builds 1 kHz bags of the 7-joint Marten arm moving against an invented spring-damper object
(from t = 2 s on; efforts by Pinocchio's inverse dynamics plus the contact torque, with noise):
one of 62 s and one of ``--long-minutes`` (default 10). Then, each ``--repeat`` times, in
alternation so that a slow spell of the shared machine falls on every figure alike:

  help          ``interaction-estimator --help`` (the whole process)
  replay        ``interaction-estimator replay BAG --out DIR`` (CSV, summary and report)
  no report     the same with ``--no-report``
  loop          the replay's loop alone, in this process, warm: reading and decoding the bag
                and the Pipeline (what summary.json calls the wall time is the same span
                measured inside the command)

Figures: median wall seconds (and min-max), times real time (bag duration / wall time), and the
whole process's overhead over the loop. Usage:
  python test/benchmarks/bench_startup.py [--long-minutes M] [--repeat N] [--keep DIR]
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pinocchio as pin

from interaction_estimator.core.model import RobotModel
from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.settings import Settings
from interaction_estimator.io.bag import RecordedBag
from interaction_estimator.io.bag_writer import BagWriter
from interaction_estimator.io.cdr import (
    JOINT_STATE,
    STRING,
    JointStateEncoder,
    encode_string,
    seconds_to_stamp,
)
from interaction_estimator.offline.replay import run_pipeline
from interaction_estimator.sim import marten

RATE = 1000.0  # Hz
PARAMS = ("/**:\n  ros__parameters:\n    direction:\n      mode: world\n"
          "      vector: [1.0, 0.0, 0.0]\n")


def write_arm_bag(path: Path, seconds: float, seed: int = 0) -> int:
    """A bag of the 7-joint Marten arm; returns the number of joint states."""
    urdf = marten.arm_urdf()
    model = RobotModel(urdf, marten.CONTACT_FRAME)
    names = model.joint_names
    nv = len(names)
    rng = np.random.default_rng(seed)
    n = int(round(seconds * RATE)) + 1
    rest = np.array([0.0, 0.5, 0.0, 1.2, 0.0, 0.6, 0.0])[:nv]
    amp = np.array([0.15, 0.1, 0.1, 0.15, 0.1, 0.1, 0.1])[:nv]
    freq = 2 * np.pi * np.array([0.31, 0.23, 0.37, 0.29, 0.41, 0.43, 0.47])[:nv]
    enc = JointStateEncoder()
    x0 = None
    with BagWriter(path, "mcap") as w:
        w.write("/robot_description", STRING, 0, encode_string(urdf), transient_local=True)
        for k in range(n):
            t = k / RATE
            ang = rest + amp * np.sin(freq * t)
            vel = amp * freq * np.cos(freq * t)
            acc = -amp * freq**2 * np.sin(freq * t)
            q = model.configuration_from_angles(ang)
            tau = pin.rnea(model.model, model.data, q, vel, acc).copy()
            if t >= 2.0:  # the arm pushes an invented object along world x
                dyn = model.dynamics(q, vel)
                x0 = dyn.position[0] if x0 is None else x0
                xd = float(dyn.jacobian[0] @ vel)
                f = 12.0 + 300.0 * (dyn.position[0] - x0) + 20.0 * xd
                tau += dyn.jacobian[:3].T @ np.array([f, 0.0, 0.0])
            sec, nsec = seconds_to_stamp(1.0 + t)
            w.write("/joint_states", JOINT_STATE, sec * 1_000_000_000 + nsec,
                    enc.encode(sec, nsec, "", names, ang, vel + rng.normal(0, 0.003, nv),
                               tau + rng.normal(0, 0.1, nv)))
    return n


def command() -> list[str]:
    script = Path(sys.executable).with_name("interaction-estimator")
    return [str(script)] if script.exists() else [sys.executable, "-m",
                                                   "interaction_estimator.cli"]


def timed(args: list[str]) -> float:
    t0 = time.perf_counter()
    r = subprocess.run(args, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if r.returncode != 0:
        raise SystemExit(f"{' '.join(args)} failed ({r.returncode}):\n{r.stderr[-2000:]}")
    return wall


def loop_alone(bag: Path) -> float:
    settings = Settings({"direction.mode": "world", "direction.vector": [1.0, 0.0, 0.0]})
    t0 = time.perf_counter()
    with RecordedBag(bag) as b:
        pipeline = Pipeline(settings, b.urdf())
        run_pipeline(b, pipeline, settings)
    return time.perf_counter() - t0


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--long-minutes", type=float, default=10.0,
                        help="length of the long bag in minutes (default 10; 0: none)")
    parser.add_argument("--repeat", type=int, default=5, help="runs per figure (default 5)")
    parser.add_argument("--keep", type=Path, help="keep the bags and outputs here")
    args = parser.parse_args(argv)
    work = Path(tempfile.mkdtemp(prefix="bench_startup."))
    cmd = command()
    try:
        params = work / "params.yaml"
        params.write_text(PARAMS)
        bags = {}
        for label, seconds in (("62 s", 62.0), (f"{args.long_minutes:g} min",
                                                args.long_minutes * 60.0)):
            if seconds <= 0:
                continue
            path = work / f"arm_{int(seconds)}s"
            t0 = time.perf_counter()
            n = write_arm_bag(path, seconds)
            print(f"bag {label}: {n} joint states of the 7-joint Marten arm at {RATE:.0f} Hz, "
                  f"built in {time.perf_counter() - t0:.1f} s", flush=True)
            bags[label] = (path, (n - 1) / RATE)
        loop_alone(bags["62 s"][0])   # warm this process (compiled code loaded, caches)
        figures: dict[str, list[float]] = {}
        for _ in range(args.repeat):
            figures.setdefault("help", []).append(timed([*cmd, "--help"]))
            for label, (path, _) in bags.items():
                out = work / f"out_{path.name}"
                figures.setdefault(f"replay {label}", []).append(timed(
                    [*cmd, "replay", str(path), "--out", str(out), "--params", str(params)]))
                summary = json.loads((out / "summary.json").read_text())
                figures.setdefault(f"  inside the command {label}", []).append(
                    summary["run"]["wall_time_s"])
                figures.setdefault(f"replay --no-report {label}", []).append(timed(
                    [*cmd, "replay", str(path), "--out", str(work / f"nr_{path.name}"),
                     "--params", str(params), "--no-report"]))
                figures.setdefault(f"loop alone {label}", []).append(loop_alone(path))
        print(f"\n{'figure':<32}{'median s':>10}{'min-max s':>16}{'x real time':>13}"
              f"{'/ loop':>8}   ({args.repeat} runs each, alternating; {os.cpu_count()} cores)")
        for name, walls in figures.items():
            med = statistics.median(walls)
            label = name.split()[-2] + " " + name.split()[-1] if name != "help" else ""
            duration = bags[label][1] if label in bags else None
            loop = statistics.median(figures[f"loop alone {label}"]) if label in bags else None
            rt = f"{duration / med:12.1f}x" if duration else " " * 13
            ratio = f"{med / loop:7.2f}x" if loop else " " * 8
            print(f"{name:<32}{med:10.3f}{min(walls):8.3f}-{max(walls):<7.3f}{rt}{ratio}")
        if args.keep:
            shutil.copytree(work, args.keep, dirs_exist_ok=True)
            print(f"kept in {args.keep}")
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
