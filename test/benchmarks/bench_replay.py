"""Replay throughput on a long 1 kHz bag of the demo robot, beside the floor (prints, asserts
nothing).

Builds a bag of the mobile Marten (10 joints) moving for ``--minutes`` at 1 kHz, in contact with
an invented spring-damper object from t = 2 s on (efforts by Pinocchio inverse dynamics plus the
contact torque, with noise), then measures in the same run:

  decode     reading the bag and decoding every JointState into Samples (the replay's reader
             and decoder), and, messages in memory, that decoder (one message at a time, and a
             chunk's worth at once as the replay reads them) beside rosbags' deserializer
             (20000 messages);
  floor      decode plus the Pinocchio calls alone (the joint mapping and the six calls the
             Pipeline makes per sample);
  replay     the whole ``replay`` (pipeline, estimates.csv, summary.json, report.html), its
             pipeline loop alone, and what the whole replay spent after its loop (the three
             files).

Figures: wall seconds, microseconds per sample, times real time, ratio to the floor.
Usage: python test/benchmarks/bench_replay.py [--minutes M] [--keep DIR] [--bag BAG]
(``--bag``: an existing bag written by an earlier run with ``--keep``, to measure two checkouts
on the same file.)
"""
from __future__ import annotations

import argparse
import shutil
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
    JointStateDecoder,
    JointStateEncoder,
    encode_string,
    seconds_to_stamp,
    typestore,
)
from interaction_estimator.offline.replay import ReplayRequest, replay, run_pipeline
from interaction_estimator.sim import marten

RATE = 1000.0  # Hz


def write_bag(path: Path, minutes: float) -> int:
    """The synthetic long bag; returns the number of joint states."""
    urdf = marten.mobile_urdf()
    model = RobotModel(urdf, marten.CONTACT_FRAME)
    names = model.joint_names
    rng = np.random.default_rng(0)
    n = int(minutes * 60 * RATE)
    rest = np.array([0, 0, 0, 0.1, 0.5, 0.0, 1.2, 0.0, 0.6, 0.0])
    amp = np.array([0.02, 0.02, 0.05, 0.15, 0.1, 0.1, 0.15, 0.1, 0.1, 0.1])
    freq = 2 * np.pi * np.array([0.11, 0.13, 0.07, 0.31, 0.23, 0.37, 0.29, 0.41, 0.43, 0.47])
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
            if t >= 2.0:  # the robot pushes an invented object along world x
                dyn = model.dynamics(q, vel)
                x0 = dyn.position[0] if x0 is None else x0
                xd = float(dyn.jacobian[0] @ vel)
                f = 12.0 + 300.0 * (dyn.position[0] - x0) + 20.0 * xd
                tau += dyn.jacobian[:3].T @ np.array([f, 0.0, 0.0])
            sec, nsec = seconds_to_stamp(1.0 + t)
            w.write("/joint_states", JOINT_STATE, sec * 1_000_000_000 + nsec,
                    enc.encode(sec, nsec, "", names, ang, vel + rng.normal(0, 0.003, 10),
                               tau + rng.normal(0, 0.1, 10)))
    return n


def decode_pass(path: Path) -> float:
    t0 = time.perf_counter()
    with RecordedBag(path) as bag:
        for _ in bag.samples():
            pass
    return time.perf_counter() - t0


def decoders(path: Path, limit: int = 20000) -> tuple[float, float, float]:
    """Microseconds per JointState, messages already in memory (the first ``limit``): the
    replay's CDR decoder one message at a time, the same on batches of 2000 messages, and
    rosbags' generic deserializer."""
    ts = typestore()
    with RecordedBag(path) as bag:
        raws = []
        for _, _, raw in bag._messages(bag.info.joint_states):
            raws.append(bytes(raw))
            if len(raws) >= limit:
                break
    dec = JointStateDecoder()
    t0 = time.perf_counter()
    for raw in raws:
        dec.decode(raw)
    fast = (time.perf_counter() - t0) / len(raws) * 1e6
    dec = JointStateDecoder()
    t0 = time.perf_counter()
    for k in range(0, len(raws), 2000):
        dec.fields_many(raws[k:k + 2000])
    batch = (time.perf_counter() - t0) / len(raws) * 1e6
    t0 = time.perf_counter()
    for raw in raws:
        ts.deserialize_cdr(raw, JOINT_STATE)
    return fast, batch, (time.perf_counter() - t0) / len(raws) * 1e6


def floor_pass(path: Path) -> float:
    """Reading and decoding the joint states (a block at a time, as the replay does), the
    joint mapping, and the six Pinocchio calls the Pipeline makes per sample, nothing else."""
    t0 = time.perf_counter()
    with RecordedBag(path) as bag:
        model = RobotModel(bag.urdf(), marten.CONTACT_FRAME)
        for block in bag.sample_blocks():
            Q, V, _ = model.joint_map(block.names).apply_block(block)
            for q, v in zip(Q, V):
                model.terms(q, v)   # the six Pinocchio calls
    return time.perf_counter() - t0


def loop_pass(path: Path, settings: Settings) -> float:
    t0 = time.perf_counter()
    with RecordedBag(path) as bag:
        pipeline = Pipeline(settings, bag.urdf())
        run_pipeline(bag, pipeline, settings)
    return time.perf_counter() - t0


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=10.0,
                        help="bag length in minutes at 1 kHz (default 10)")
    parser.add_argument("--keep", type=Path, help="keep the bag and the replay output here")
    parser.add_argument("--bag", type=Path, help="use this bag (from an earlier --keep)")
    args = parser.parse_args(argv)
    work = Path(tempfile.mkdtemp(prefix="bench_replay."))
    try:
        bag = work / "marten_long"
        t0 = time.perf_counter()
        if args.bag is not None:
            bag = args.bag
            with RecordedBag(bag) as recorded:
                n = recorded.info.joint_state_count
        else:
            n = write_bag(bag, args.minutes)
        duration = (n - 1) / RATE
        size = sum(p.stat().st_size for p in Path(bag).iterdir()) / 1e6
        print(f"bag: {n} joint states, {duration:.0f} s at {RATE:.0f} Hz, {size:.0f} MB MCAP, "
              f"built in {time.perf_counter() - t0:.1f} s")
        settings = Settings({"direction.mode": "world", "direction.vector": [1.0, 0.0, 0.0]})
        decode = decode_pass(bag)
        fast, batch, generic = decoders(bag)
        floor = floor_pass(bag)
        loop = loop_pass(bag, settings)
        t0 = time.perf_counter()
        params = work / "params.yaml"
        params.write_text("/**:\n  ros__parameters:\n    direction:\n      mode: world\n"
                          "      vector: [1.0, 0.0, 0.0]\n")
        result = replay(ReplayRequest(bag, work / "out", params=params, progress=False))
        full = time.perf_counter() - t0
        outputs = full - result.summary["run"]["wall_time_s"]

        def row(label: str, wall: float) -> str:
            return (f"{label:<34}{wall:9.1f} s {wall / n * 1e6:9.1f} us/sample "
                    f"{duration / wall:8.1f}x real time {wall / floor:7.2f}x floor")
        print(f"JointState decoding, messages in memory: replay's decoder {fast:.1f} us one at "
              f"a time, {batch:.1f} us in batches; rosbags deserializer {generic:.1f} us per "
              "message")
        print(row("decode (read + decode)", decode))
        print(row("floor (decode + Pinocchio)", floor))
        print(row("replay pipeline loop", loop))
        print(row("replay, all outputs", full))
        print(f"{'  of which writing the three files':<34}{outputs:9.1f} s "
              f"{outputs / n * 1e6:9.1f} us/sample")
        if args.keep:
            shutil.copytree(work, args.keep, dirs_exist_ok=True)
            print(f"kept in {args.keep}")
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
