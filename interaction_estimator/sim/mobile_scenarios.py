"""Invented scenarios of our mobile robots (:mod:`.mobile_world`): the wheeled rover and the
ball-balancing orb push, pull and lift objects while their base moves and tilts, and the run
written as a bag as the robot would record it (joint states, odometry, IMU) with ground truth.

``SCENARIOS``: name -> a function of the seed returning a :class:`~.mobile_world.MobileScenario`.
:func:`simulate_mobile` runs one; :func:`write_mobile_bag` writes it.
"""
from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from ..io.bag_writer import BagWriter
from ..io.cdr import (
    IMU,
    JOINT_STATE,
    ODOMETRY,
    STRING,
    WRENCH_STAMPED,
    JointStateEncoder,
    encode_imu,
    encode_odometry,
    encode_string,
    encode_wrench_stamped,
    seconds_to_stamp,
)
from ..io.ground_truth import TRUTH_METADATA_KEY, GroundTruth
from .mobile_world import Contact, Free, MobileRun, MobileScenario, MobileWorld
from .mujoco_world.schedule import MultiSine, ObjectParams

TIME_OFFSET = 1.0   # s added to simulation time in the stamps (a zero stamp means "unset")


def _sines(scale: float, slow: bool, duration: float) -> MultiSine:
    if slow:   # the orb: a balancing base is pushed around by fast arm motions
        return MultiSine([0.05 * scale, 0.025 * scale, 0.01 * scale], [0.3, 0.7, 1.1],
                         [0.0, 1.0, 2.0], hold=0.5, ramp=0.5, duration=duration)
    return MultiSine([0.06 * scale, 0.03 * scale, 0.015 * scale], [0.4, 0.9, 1.5],
                     [0.0, 1.0, 2.0], hold=0.5, ramp=0.5, duration=duration)


def _rover(name: str, u: tuple, obj: ObjectParams, lifted: bool, scale: float,
           drive: tuple[float, float]) -> Callable[[int], MobileScenario]:
    def make(seed: int) -> MobileScenario:
        speed, turn = drive
        return MobileScenario(
            name, "rover", u, (Free(3.0), Contact(10.0, _sines(scale, False, 10.0), obj),
                               Free(1.5)),
            gravity_on_object=lifted, follow=1.0, seed=seed,
            base_motion=lambda t: (speed * math.sin(0.8 * t), turn * math.sin(1.2 * t)))
    return make


def _orb(name: str, u: tuple, obj: ObjectParams, lifted: bool, scale: float
         ) -> Callable[[int], MobileScenario]:
    def make(seed: int) -> MobileScenario:
        return MobileScenario(
            name, "orb", u, (Free(3.0), Contact(10.0, _sines(scale, True, 10.0), obj),
                             Free(1.5)),
            gravity_on_object=lifted, follow=0.0, seed=seed,
            base_motion=lambda t: (0.02 * math.sin(0.6 * t), 0.01 * math.sin(0.4 * t)))
    return make


# Invented objects (kg, N·s/m, N/m, N): a cart pushed along, a spring-loaded drawer pulled open,
# a crate lifted.
SCENARIOS: dict[str, Callable[[int], MobileScenario]] = {
    "rover_push": _rover("rover_push", (1.0, 0.0, 0.0), ObjectParams(20.0, 25.0, 0.0, 12.0),
                         False, 1.0, (0.05, 0.15)),
    "rover_pull": _rover("rover_pull", (-1.0, 0.0, 0.0), ObjectParams(4.0, 15.0, 150.0, 6.0),
                         False, 1.0, (0.05, 0.15)),
    "rover_lift": _rover("rover_lift", (0.0, 0.0, 1.0), ObjectParams(3.0, 2.0, 0.0, 0.0), True,
                         0.7, (0.08, 0.2)),
    "orb_push": _orb("orb_push", (1.0, 0.0, 0.0), ObjectParams(6.0, 15.0, 0.0, 5.0), False,
                     1.0),
    "orb_pull": _orb("orb_pull", (-1.0, 0.0, 0.0), ObjectParams(3.0, 10.0, 100.0, 4.0), False,
                     1.0),
    "orb_lift": _orb("orb_lift", (0.0, 0.0, 1.0), ObjectParams(2.0, 2.0, 0.0, 0.0), True, 0.7),
}


def simulate_mobile(name: str, seed: int = 0) -> MobileRun:
    """Run scenario ``name`` of :data:`SCENARIOS` with ``seed`` (the sensors' noise, the free
    motion's shape)."""
    if name not in SCENARIOS:
        raise ValueError(f"unknown mobile scenario {name!r}; expected one of {sorted(SCENARIOS)}")
    sc = SCENARIOS[name](seed)
    return MobileWorld(sc.robot, sc.direction, sc.gravity_on_object).simulate(sc)


def recommended_settings(run: MobileRun) -> dict[str, Any]:
    """The estimator settings for a run: the moving base, its direction and noise levels."""
    s = run.sensors
    return {"base.source": "odometry", "contact_frame": run.contact_frame,
            "direction.mode": "world", "direction.vector": [float(x) for x in run.direction],
            "observer.velocity_noise": s.velocity_noise, "observer.effort_noise": s.effort_noise}


def truth_parameters(run: MobileRun) -> dict[str, float] | None:
    """The object's parameters (mass, damping, stiffness, static force with its weight)."""
    rows = run.object_parameters[run.attached]
    if not len(rows):
        return None
    return dict(zip(("mass", "damping", "stiffness", "static_force"),
                    (float(x) for x in rows[-1]), strict=True))


def write_mobile_bag(path: str | Path, run: MobileRun, storage: str = "mcap",
                     wrench_frame: str | None = None, odometry_topic: str = "/odometry",
                     imu_topic: str = "/imu") -> None:
    """The run as the robot records it: ``/joint_states`` (arm and wheel joints),
    ``/odometry`` (nav_msgs/Odometry, frame ``odom``, child the root link), ``/imu``
    (sensor_msgs/Imu in the IMU's frame, covariances from the sensor's noise),
    ``/robot_description``, and the ground truth (``/ground_truth/wrench`` in ``odom``,
    ``/ground_truth/parameters``, the bag's metadata). Log time = stamp + the sensor's latency;
    messages written in log-time order. ``wrench_frame``: the ground-truth wrench's frame_id
    (default the odometry's frame; '' lets a replay that ignores the base compare with it)."""
    s = run.sensors
    params = truth_parameters(run)
    contact = run.time[run.attached]
    extra = {"scenario": run.name, "robot": run.robot, "seed": run.extra.get("seed"),
             "contact_time": float(contact[0]) + TIME_OFFSET if len(contact) else None,
             "time_offset": TIME_OFFSET, "settings": recommended_settings(run),
             "world_frame": run.world_frame, "joint_names": list(run.joint_names),
             "sensors": {k: getattr(s, k) for k in s.__dataclass_fields__},
             "max_tilt_deg": float(np.degrees(run.base_tilt.max()))}
    truth = GroundTruth(params, extra)
    out: list[tuple[int, str, str, bytes]] = []
    enc = JointStateEncoder()
    names = tuple(run.joint_names)
    zero = (0.0, 0.0, 0.0)
    for k, t in enumerate(run.time):
        sec, nsec = seconds_to_stamp(TIME_OFFSET + float(t))
        ns = sec * 1_000_000_000 + nsec
        out.append((ns + int(s.joint_latency * 1e9), "/joint_states", JOINT_STATE,
                    enc.encode(sec, nsec, "", names, run.position[k], run.velocity[k],
                               run.effort[k])))
        out.append((ns, "/ground_truth/wrench", WRENCH_STAMPED,
                    encode_wrench_stamped(sec, nsec, run.world_frame if wrench_frame is None
                                          else wrench_frame, run.force[k], zero)))
    twist_cov = np.diag([s.twist_noise**2] * 3 + [s.yaw_rate_noise**2] * 3).ravel()
    pose_cov = np.diag([s.pose_drift**2] * 6).ravel()
    for row in run.odometry:
        sec, nsec = seconds_to_stamp(TIME_OFFSET + float(row[0]))
        ns = sec * 1_000_000_000 + nsec + int(s.odometry_latency * 1e9)
        out.append((ns, odometry_topic, ODOMETRY,
                    encode_odometry(sec, nsec, run.world_frame, run.base_frame, row[1:4],
                                    row[4:8], row[8:11], row[11:14], pose_cov, twist_cov)))
    tilt = s.tilt_noise**2 + s.tilt_drift**2
    ocov = np.diag([tilt, tilt, 0.1]).ravel()
    gcov = np.diag([s.gyro_noise**2 + s.gyro_bias**2] * 3).ravel()
    acov = np.diag([s.accel_noise**2] * 3).ravel()
    for row in run.imu:
        sec, nsec = seconds_to_stamp(TIME_OFFSET + float(row[0]))
        ns = sec * 1_000_000_000 + nsec + int(s.imu_latency * 1e9)
        out.append((ns, imu_topic, IMU, encode_imu(sec, nsec, run.imu_frame, row[1:5], row[5:8],
                                               row[8:11], ocov, gcov, acov)))
    out.sort(key=lambda item: item[0])
    with BagWriter(path, storage) as w:
        text = truth.to_json()
        w.set_metadata(TRUTH_METADATA_KEY, text)
        w.write("/robot_description", STRING, 0, encode_string(run.urdf), transient_local=True)
        w.write("/ground_truth/parameters", STRING, 0, encode_string(text),
                transient_local=True)
        for ns, topic, kind, raw in out:
            w.write(topic, kind, ns, raw)
