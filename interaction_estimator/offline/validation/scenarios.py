"""The run generator: a seed -> a robot, an object (or two), a motion, a rate, sensor noise, a
parameter file; the simulation of it in MuJoCo, cached on disk by seed.

Everything a run is follows from its seed (numpy's PCG64 seeded with (VALIDATION_STREAM, seed)),
so a seed names the same run on every machine. What is drawn, and from what:

- robot: the seed modulo 5 (marten_arm, marten_mobile, panda, ur5, tiago), so any 5 consecutive
  seeds cover every robot; start posture: the robot's own (robots.py) with its revolute joints
  moved by up to +/- 0.15 rad;
- rate: 100, 200, 250, 500 or 1000 Hz; a third of the runs lose 1 % of their samples (lost
  messages), half of them carry epoch-like stamps (about 1.7e9 s);
- direction u: uniform on the sphere (world frame);
- object: mass log-uniform in 0.3-30 kg; damping 0 or log-uniform in 1-100 N·s/m; stiffness 0
  or log-uniform in 5-2000 N/m; static force 0 or +/- uniform in 1-40 N; each of the last three
  is exactly 0 with probability 1/3. In 15 % of the runs gravity acts on the object (a lifted
  load, mass then at most 5 kg), adding its weight along u to the static force;
- motion along u: rich multi-sines (40 %: 3-4 sines, 0.2-2.5 Hz), a single sine (10 %, which
  cannot tell mass from stiffness), constant-velocity pushes (20 %), moves and holds (15 %), and
  holds without motion (15 %); amplitudes 1-5 cm, speeds 1-5 cm/s, scaled down where the
  object's force would exceed what the robot's URDF effort limits allow at its posture;
- changes: 15 % of the runs change the object's parameters mid-contact ("step": every parameter
  redrawn, at least one by >= 30 %), 15 % release the object, move freely for 3 s and take a new
  one ("swap");
- sensors: effort and velocity noise log-uniform within the robot's datasheet range
  (robots.SensorSheet), per joint x 0.7-1.3, effort biases uniform within +/- its bound,
  positions quantized by its encoders.

The parameter file of a run is written by :func:`parameter_file` from the datasheet values and
the run's set-up (rate, contact frame, direction) only: one rule for every run, never tuned.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .robots import ROBOT_NAMES, RobotEntry, robots

VALIDATION_STREAM = 1717  # first word of every run's seed sequence
RATES = (100.0, 200.0, 250.0, 500.0, 1000.0)
MOTIONS = ("multisine", "sine", "push", "steps", "hold")
MOTION_SHARE = (0.40, 0.10, 0.20, 0.15, 0.15)
CHANGES = ("none", "step", "swap")
CHANGE_SHARE = (0.70, 0.15, 0.15)
SIM_DT = 1e-3  # s, MuJoCo step (the robot's own control loop)
SWAP_FREE_TIME = 3.0  # s of free motion between two objects (longer than contact.forget_after)
SHORT_FACTOR = 0.45  # contact durations of the short variant (the test suite's subset)
ZERO_SHARE = 1.0 / 3.0


@dataclass
class RunSpec:
    """What a seed draws (see the module docstring). JSON-able summary: :meth:`summary`."""

    seed: int
    robot: str
    short: bool
    rate: float
    direction: np.ndarray
    q0: dict
    gravity_on_object: bool
    motion: str
    change: str
    objects: list  # [(start time s from run start, ObjectParams)], in order
    phases: list  # FreePhase / ContactPhase for ObjectWorld.simulate
    effort_noise: np.ndarray  # (n,) N·m, filled in when the robot's joints are known
    velocity_noise: np.ndarray
    bias: np.ndarray
    noise_draw: dict = field(default_factory=dict)
    drop_fraction: float = 0.0
    time_offset: float = 0.0

    def summary(self) -> dict:
        return {
            "seed": self.seed,
            "robot": self.robot,
            "short": self.short,
            "rate": self.rate,
            "direction": [round(float(x), 6) for x in self.direction],
            "gravity_on_object": self.gravity_on_object,
            "motion": self.motion,
            "change": self.change,
            "objects": [
                {
                    "start": round(t, 6),
                    "mass": p.mass,
                    "damping": p.damping,
                    "stiffness": p.stiffness,
                    "static_force": p.static_force,
                }
                for t, p in self.objects
            ],
            "noise": self.noise_draw,
            "drop_fraction": self.drop_fraction,
            "time_offset": self.time_offset,
        }


def _loguniform(rng, lo, hi):
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def draw_object(rng, lifted: bool):
    """An object from the issue's ranges; exact zeros in about a third of the draws."""
    from ...sim.mujoco_world.schedule import ObjectParams

    mass = _loguniform(rng, 0.3, 5.0 if lifted else 30.0)
    damping = 0.0 if rng.random() < ZERO_SHARE else _loguniform(rng, 1.0, 100.0)
    stiffness = 0.0 if rng.random() < ZERO_SHARE else _loguniform(rng, 5.0, 2000.0)
    static = (
        0.0
        if rng.random() < ZERO_SHARE
        else float(rng.choice([-1.0, 1.0]) * rng.uniform(1.0, 40.0))
    )
    return ObjectParams(mass, damping, stiffness, static)


def _changed_enough(old, new) -> bool:
    pairs = (
        (old.mass, new.mass),
        (old.damping, new.damping),
        (old.stiffness, new.stiffness),
        (old.static_force, new.static_force),
    )
    return any(
        abs(b - a) >= 0.3 * max(abs(a), abs(b)) and max(abs(a), abs(b)) > 0 for a, b in pairs
    )


def draw_motion(rng, kind: str, duration: float):
    """A motion of ``kind`` lasting ``duration`` s (starts and ends at rest)."""
    from ...sim.mujoco_world.schedule import Hold, MultiSine, Push, Steps

    hold = rng.uniform(0.3, 1.0)
    ramp = 0.5
    if kind in ("multisine", "sine"):
        k = 1 if kind == "sine" else int(rng.integers(3, 5))
        freqs = np.sort(np.exp(rng.uniform(math.log(0.2), math.log(2.5), k)))
        if kind == "sine":
            freqs = np.exp(rng.uniform(math.log(0.3), math.log(2.0), 1))
        weights = rng.uniform(0.5, 1.0, k)
        amps = rng.uniform(0.01, 0.05) * weights / weights.sum()
        return MultiSine(amps, freqs, rng.uniform(0, 2 * np.pi, k), hold, ramp, duration)
    if kind == "push":
        speed = rng.uniform(0.01, 0.05) * rng.choice([-1.0, 1.0])
        speed = math.copysign(min(abs(speed), 0.15 / duration), speed)  # <= 15 cm of travel
        return Push(speed, hold, ramp, duration)
    if kind == "steps":
        # out to +/- 2-6 cm, back to 0, out to the other side, ...; each move a quintic of
        # 0.4-1 s, at rest 0.5-2 s in between
        moves, times = [], []
        t, level, sign = hold, 0.0, float(rng.choice([-1.0, 1.0]))
        while True:
            dur, rest = rng.uniform(0.4, 1.0), rng.uniform(0.5, 2.0)
            if t + dur + 0.2 > duration:
                break
            if level == 0.0:
                target, sign = sign * rng.uniform(0.02, 0.06), -sign
            else:
                target = 0.0
            moves.append(target - level)
            times.append((t, dur))
            level, t = target, t + dur + rest
        return Steps(moves, times, duration)
    if kind == "hold":
        return Hold(duration)
    raise ValueError(f"unknown motion kind {kind!r}; expected one of {MOTIONS}")


def _force_peak(motion, obj, static_total: float) -> float:
    x, v, a = motion.peaks()
    return obj.mass * a + obj.damping * v + obj.stiffness * x + abs(static_total)


def make_spec(seed: int, short: bool = False) -> RunSpec:
    """The run a seed names (without simulating it). ``short``: the same draws with every
    contact SHORT_FACTOR as long (for the test suite's subset)."""
    from ...sim.mujoco_world.schedule import ContactPhase, FreePhase

    rng = np.random.default_rng([VALIDATION_STREAM, int(seed)])
    robot = ROBOT_NAMES[int(seed) % len(ROBOT_NAMES)]
    entry = robots()[robot]
    rate = float(rng.choice(RATES))
    u = rng.normal(size=3)
    u /= np.linalg.norm(u)
    lifted = bool(rng.random() < 0.15)
    motion_kind = str(rng.choice(MOTIONS, p=MOTION_SHARE))
    change = str(rng.choice(CHANGES, p=CHANGE_SHARE))
    q0 = dict(entry.q0)
    for name in q0:
        if "finger" not in name and "torso" not in name:
            q0[name] = q0[name] + rng.uniform(-0.15, 0.15)
    free0 = rng.uniform(1.5, 2.5)
    obj1 = draw_object(rng, lifted)
    phases: list = [FreePhase(free0, seed=int(rng.integers(1 << 30)))]
    objects = [(free0, obj1)]
    k = SHORT_FACTOR if short else 1.0
    if change == "none":
        contacts = [(k * rng.uniform(6.0, 12.0), [(0.0, obj1)])]
    elif change == "step":
        obj2 = draw_object(rng, lifted)
        while not _changed_enough(obj1, obj2):
            obj2 = draw_object(rng, lifted)
        T = k * rng.uniform(10.0, 16.0)
        t_change = rng.uniform(0.4, 0.6) * T
        contacts = [(T, [(0.0, obj1), (t_change, obj2)])]
        objects.append((free0 + t_change, obj2))
    else:
        obj2 = draw_object(rng, lifted)
        T1, T2 = k * rng.uniform(6.0, 9.0), k * rng.uniform(6.0, 9.0)
        contacts = [(T1, [(0.0, obj1)]), (T2, [(0.0, obj2)])]
        objects.append((free0 + T1 + SWAP_FREE_TIME, obj2))
    for i, (T, objs) in enumerate(contacts):
        if i:
            phases.append(FreePhase(SWAP_FREE_TIME, seed=int(rng.integers(1 << 30))))
        phases.append(
            ContactPhase(T, draw_motion(rng, motion_kind, T), tuple((t, o) for t, o in objs))
        )
    n = movable_joint_count(entry.urdf_text())
    sheet = entry.sensors
    e_sd = _loguniform(rng, *sheet.effort_noise)
    v_sd = _loguniform(rng, *sheet.velocity_noise)
    spec = RunSpec(
        seed=int(seed),
        robot=robot,
        short=bool(short),
        rate=rate,
        direction=u,
        q0=q0,
        gravity_on_object=lifted,
        motion=motion_kind,
        change=change,
        objects=objects,
        phases=phases,
        effort_noise=e_sd * rng.uniform(0.7, 1.3, n),
        velocity_noise=v_sd * rng.uniform(0.7, 1.3, n),
        bias=rng.uniform(-sheet.bias_max, sheet.bias_max, n),
        noise_draw={
            "effort_noise": round(e_sd, 6),
            "velocity_noise": round(v_sd, 7),
            "encoder_bits": sheet.encoder_bits,
            "bias_max": sheet.bias_max,
        },
        drop_fraction=0.01 if rng.random() < 1.0 / 3.0 else 0.0,
        time_offset=float(1.7e9 + rng.uniform(0.0, 1e6)) if rng.random() < 0.5 else 0.0,
    )
    return spec


def movable_joint_count(urdf_text: str) -> int:
    """Joints a JointState of this URDF carries (every top-level joint that is not fixed)."""
    import xml.etree.ElementTree as ET

    return sum(1 for j in ET.fromstring(urdf_text).findall("joint") if j.get("type") != "fixed")


def build_phases(spec: RunSpec, world) -> list:
    """The spec's phases for ``world``, each contact's motion scaled down (never the object)
    where the object's peak force (sum of the peaks of its terms) would exceed the force the
    robot's URDF effort limits allow along u at its posture (ObjectWorld.force_budget)."""
    from ...sim.mujoco_world.schedule import ContactPhase

    budget = world.force_budget()
    out = []
    for ph in spec.phases:
        if isinstance(ph, ContactPhase):
            objs = [o for _, o in ph.objects]
            peak = max(_force_peak(ph.motion, o, world.static_total(o)) for o in objs)
            static = max(abs(world.static_total(o)) for o in objs)
            if peak > budget and peak > static:
                room = max(budget - static, 0.25 * budget)
                ph = ContactPhase(
                    ph.duration, ph.motion.scaled(min(1.0, room / (peak - static))), ph.objects
                )
        out.append(ph)
    return out


def parameter_file(spec: RunSpec, entry: RobotEntry) -> str:
    """The run's parameter file (ROS 2 parameter YAML), by the one rule every run shares:

    - contact_frame, direction (world mode, the run's u): the set-up;
    - effort_side link (the efforts are link-side torques);
    - observer.effort_noise, observer.velocity_noise: the datasheet's bounds;
    - observer.max_gap: 5 sample intervals, at least 0.05 s; health.min_rate: 80 % of the rate;
      input.expected_rate: the rate.
    Everything else stays at its default."""
    sheet = entry.sensors
    values = {
        "contact_frame": entry.contact_frame,
        "effort_side": "link",
        "direction": {"mode": "world", "vector": [float(x) for x in spec.direction]},
        "observer": {
            "effort_noise": float(sheet.effort_noise[1]),
            "velocity_noise": float(sheet.velocity_noise[1]),
            "max_gap": max(0.05, 5.0 / spec.rate),
        },
        "health": {"min_rate": 0.8 * spec.rate},
        "input": {"expected_rate": spec.rate},
    }
    import yaml

    return yaml.safe_dump(
        {"/**/interaction_estimator": {"ros__parameters": values}}, sort_keys=False
    )


# --------------------------------------------------------------------------------------------
# Simulation, corruption, cache
# --------------------------------------------------------------------------------------------


def _sources_digest() -> str:
    """Digest of what a cached simulation depends on: the world, this generator, the robot
    catalogue and the MuJoCo version."""
    import mujoco

    from ...sim import mujoco_world
    from . import robots as robots_module

    h = hashlib.sha256()
    world = sorted(Path(mujoco_world.__file__).parent.glob("*.py"))   # the world's modules
    for path in (*world, Path(robots_module.__file__)):
        h.update(path.read_bytes())
    h.update(Path(__file__).read_bytes())
    h.update(mujoco.__version__.encode())
    return h.hexdigest()[:12]


def default_cache_dir() -> Path:
    """<repository>/.cache/validation (git-ignored), or ./.cache/validation outside a checkout."""
    root = Path(__file__).resolve().parents[3]
    if not (root / "setup.py").exists():
        root = Path.cwd()
    return root / ".cache" / "validation"


def simulate(spec: RunSpec, cache_dir: Path | None = None):
    """The clean ScheduledRun of ``spec``, from the cache when there (keyed by seed and the
    sources' digest), else simulated and stored."""
    from ...sim.mujoco_world.object_world import ObjectWorld
    from ...sim.mujoco_world.schedule import ScheduledRun

    path = None
    if cache_dir is not None:
        kind = "short" if spec.short else "run"
        path = Path(cache_dir) / f"{kind}_{spec.seed:05d}_{_sources_digest()}.npz"
        if path.exists():
            with np.load(path, allow_pickle=False) as z:
                meta = json.loads(str(z["meta"]))
                arrays = {k: z[k] for k in ScheduledRun.ARRAYS}
            arrays["attached"] = arrays["attached"].astype(bool)
            return ScheduledRun(
                **arrays,
                joint_names=tuple(meta["joint_names"]),
                joint_kinds=tuple(meta["joint_kinds"]),
                rate=meta["rate"],
                dt=meta["dt"],
                urdf=robots()[spec.robot].urdf_text(),
                notes=meta["notes"],
            )
    entry = robots()[spec.robot]
    world = ObjectWorld(
        entry.urdf_path,
        entry.contact_frame,
        spec.direction,
        q0=spec.q0,
        dt=SIM_DT,
        gravity_on_object=spec.gravity_on_object,
    )
    run = world.simulate(build_phases(spec, world), spec.rate)
    if run.position.shape[1] != len(spec.bias):
        raise RuntimeError(
            f"{spec.robot}: MuJoCo has {run.position.shape[1]} joints, the URDF "
            f"{len(spec.bias)} movable ones"
        )
    if path is not None:
        path.parent.mkdir(parents=True, exist_ok=True)
        meta = {
            "joint_names": list(run.joint_names),
            "joint_kinds": list(run.joint_kinds),
            "rate": run.rate,
            "dt": run.dt,
            "notes": run.notes,
            "spec": spec.summary(),
        }
        buf = io.BytesIO()
        np.savez_compressed(
            buf, meta=json.dumps(meta), **{k: getattr(run, k) for k in ScheduledRun.ARRAYS}
        )
        tmp = path.with_suffix(".tmp")
        tmp.write_bytes(buf.getvalue())
        tmp.replace(path)  # atomic: parallel workers never read half a file
    return run


@dataclass
class Measured:
    """What the estimator receives (joint states with noise, bias, quantization, lost samples),
    and the index of each kept sample in the clean run."""

    time: np.ndarray
    names: tuple
    position: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray
    index: np.ndarray


def measure(run, spec: RunSpec) -> Measured:
    """The sensors of ``spec`` applied to the clean ``run`` (deterministic from the seed)."""
    rng = np.random.default_rng([VALIDATION_STREAM, int(spec.seed), 2])
    n = len(run.joint_names)
    N = len(run.time)
    effort = run.effort + rng.standard_normal((N, n)) * spec.effort_noise + spec.bias
    velocity = run.velocity + rng.standard_normal((N, n)) * spec.velocity_noise
    position = run.position.copy()
    step = 2 * np.pi / 2 ** int(spec.noise_draw["encoder_bits"])
    angular = np.array([k != "prismatic" for k in run.joint_kinds])
    position[:, angular] = np.round(position[:, angular] / step) * step
    keep = np.ones(N, bool)
    if spec.drop_fraction > 0:
        keep[20:] = rng.random(N - 20) >= spec.drop_fraction
    index = np.flatnonzero(keep)
    return Measured(
        run.time[index] + spec.time_offset,
        tuple(run.joint_names),
        position[index],
        velocity[index],
        effort[index],
        index,
    )
