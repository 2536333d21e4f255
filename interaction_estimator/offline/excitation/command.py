"""``interaction-estimator excitation``: the commissioning motion for identifying a robot's own
dynamics, from its URDF's limits, as a CSV and a JointTrajectory YAML.

Exit codes: 0 written; 2 bad input (limits missing, a bad option value; nothing written).
"""
from __future__ import annotations

import argparse
import math
import sys
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from ...core.model import ModelError, RobotModel
from .files import CSV_NAME, YAML_NAME, csv_text, sample, trajectory_yaml, write
from .limits import LimitsError, resolve, ros2_joint_limits
from .trajectory import Criterion, optimize

PROG = "interaction-estimator excitation"
EXIT_OK, EXIT_USAGE = 0, 2
SAFETY_NOTE = ("checked against the joint limits only, not against collisions of the robot with "
               "itself or its surroundings: play it slowly first, in a clear space, with the "
               "emergency stop at hand")


def _fraction(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; expected a fraction "
                                         "in [0, 1) such as 0.2") from None
    if not 0.0 <= x < 1.0:
        raise argparse.ArgumentTypeError(f"{x:g} is outside [0, 1); expected a fraction "
                                         "such as 0.2")
    return x


def _positive(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not (x > 0 and math.isfinite(x)):
        raise argparse.ArgumentTypeError(f"{x:g} is not allowed; expected a positive number")
    return x


def _count(text: str) -> int:
    try:
        x = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if x < 1:
        raise argparse.ArgumentTypeError(f"{x} is below 1; expected 1 or more")
    return x


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--urdf", required=True, type=Path, metavar="FILE", help="the robot's URDF")
    p.add_argument("--out", required=True, type=Path, metavar="DIR",
                   help=f"directory for {CSV_NAME} and {YAML_NAME} (created if its parent "
                        "exists)")
    p.add_argument("--margin", type=_fraction, default=0.2, metavar="FRACTION",
                   help="share of every limit kept free: the position range shrinks about its "
                        "middle, velocity and acceleration bounds shrink, by this fraction "
                        "(default 0.2)")
    p.add_argument("--max-acceleration", action="append", default=[], metavar="[JOINT=]VALUE",
                   help="acceleration limit in rad/s² (m/s² for prismatic joints): VALUE for "
                        "every joint, JOINT=VALUE for one (repeatable); URDF has none")
    p.add_argument("--joint-limits", type=Path, metavar="FILE",
                   help="ROS 2 joint_limits YAML (joint_limits: JOINT: has_acceleration_limits:"
                        " true, max_acceleration: ...); narrows the URDF's limits")
    p.add_argument("--hold", action="append", default=[], metavar="JOINT[=VALUE]",
                   help="keep a joint still (at VALUE, or the middle of its range); repeatable")
    p.add_argument("--range", action="append", default=[], metavar="JOINT=LOW:HIGH",
                   help="position range of a joint (rad or m): a narrower one than the URDF's "
                        "(to stay clear of obstacles), or one for a continuous joint")
    p.add_argument("--period", type=_positive, default=10.0, metavar="S",
                   help="period of the motion in s (default 10)")
    p.add_argument("--harmonics", type=_count, default=5, metavar="N",
                   help="sinusoids per joint (default 5; at least 2)")
    p.add_argument("--periods", type=_count, default=6, metavar="N",
                   help="periods written (default 6: one minute at the default period)")
    p.add_argument("--rate", type=_positive, default=100.0, metavar="HZ",
                   help="points per second in the files (default 100)")
    p.add_argument("--seed", type=int, default=0, help="seed of the search (default 0)")
    p.add_argument("--iterations", type=_count, default=40, metavar="N",
                   help="iterations of the local search (default 40)")


def _pairs(items: Sequence[str], option: str, parse) -> dict:
    out = {}
    for item in items:
        if "=" not in item:
            raise LimitsError(f"{option} {item!r}: expected JOINT=VALUE")
        name, value = item.split("=", 1)
        out[name.strip()] = parse(value.strip(), f"{option} {item!r}")
    return out


def _float(text: str, where: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise LimitsError(f"{where}: {text!r} is not a number") from None
    if not math.isfinite(x):
        raise LimitsError(f"{where}: {text!r} is not a finite number")
    return x


def _range(text: str, where: str) -> tuple[float, float]:
    parts = text.split(":")
    if len(parts) != 2:
        raise LimitsError(f"{where}: expected LOW:HIGH")
    lo, hi = _float(parts[0], where), _float(parts[1], where)
    if not hi > lo:
        raise LimitsError(f"{where}: {hi:g} is not above {lo:g}; expected LOW:HIGH with "
                          "LOW < HIGH")
    return lo, hi


def run(args: argparse.Namespace) -> int:
    try:
        try:
            urdf = Path(args.urdf).read_text(encoding="utf-8")
        except OSError as exc:
            raise LimitsError(f"URDF file {str(args.urdf)!r} cannot be read: "
                              f"{exc.strerror}") from None
        out = Path(args.out)
        if out.exists() and not out.is_dir():
            raise LimitsError(f"--out {str(out)!r} is a file; expected a directory")
        if not out.exists() and not out.parent.is_dir():
            raise LimitsError(f"cannot create {str(out)!r}: {str(out.parent)!r} does not exist")
        robot = _robot(urdf)
        default_acc = None
        per_joint = {}
        for item in args.max_acceleration:
            if "=" in item:
                per_joint.update(_pairs([item], "--max-acceleration", _float))
            else:
                default_acc = _float(item, "--max-acceleration")
        holds = {}
        for item in args.hold:
            name, _, value = item.partition("=")
            holds[name.strip()] = _float(value, f"--hold {item!r}") if value else None
        limits = resolve(robot.joint_names, urdf, args.margin, per_joint, default_acc,
                         _pairs(args.range, "--range", _range), holds,
                         ros2_joint_limits(args.joint_limits) if args.joint_limits else None)
        if all(lim.held for lim in limits):
            raise LimitsError("every joint is held; expected at least one joint to move")
        result = optimize(robot, urdf, limits, args.period, args.harmonics, seed=args.seed,
                          iterations=args.iterations,
                          log=lambda m: print(m, file=sys.stderr))
    except (LimitsError, ModelError, ValueError) as exc:
        print(f"{PROG}: error: {exc}", file=sys.stderr)
        print("nothing written", file=sys.stderr)
        return EXIT_USAGE
    duration = args.periods * args.period
    t, q, v, a = sample(result.trajectory, duration, args.rate)
    cond_all = Criterion(robot, urdf, 1).condition(result.trajectory,
                                                  t[t < args.period + 1e-9])
    lines = account(limits, q, v, a, result.condition, cond_all, result.base_parameters,
                    duration, args.margin)
    out.mkdir(exist_ok=True)
    csv_path = write(out, CSV_NAME, csv_text(robot.joint_names, t, q, v, a))
    yaml_path = write(out, YAML_NAME, trajectory_yaml(
        robot.joint_names, t, q, v, a,
        [f"written by `{PROG}` from {args.urdf}", *lines[:2], f"motion {SAFETY_NOTE}",
         "move the robot to the first point before sending this trajectory"]))
    print("\n".join(lines))
    print(f"motion {SAFETY_NOTE}")
    print(f"wrote {csv_path} and {yaml_path}")
    return EXIT_OK


def _robot(urdf: str) -> RobotModel:
    import xml.etree.ElementTree as ET
    try:
        first = next(iter(ET.fromstring(urdf).iter("link"))).get("name")
    except (ET.ParseError, StopIteration):
        first = "base"
    return RobotModel(urdf, first)


def account(limits, q, v, a, condition: float, condition_files: float, n_base: int,
            duration: float, margin: float) -> list[str]:
    """The figures printed (and the first two written into the YAML's comments)."""
    lines = [f"condition number of the scaled base-parameter regressor ({n_base} base "
             f"parameters): {condition:.4g} over one period ({condition_files:.4g} at the "
             "files' sample times)",
             f"duration {duration:g} s; margin {100 * margin:g} % of every limit kept free"]
    lines.append(f"{'joint':<28}{'from':>9}{'to':>9}{'of range':>10}{'peak speed':>12}"
                 f"{'of limit':>10}{'peak acc':>10}{'of limit':>10}")
    for i, lim in enumerate(limits):
        if lim.held:
            lines.append(f"{lim.name:<28}{'held at ' + format(lim.hold_at, '.4g'):>18}")
            continue
        lo, hi = float(q[:, i].min()), float(q[:, i].max())
        vs, ac = float(np.abs(v[:, i]).max()), float(np.abs(a[:, i]).max())
        full = (lim.upper - lim.lower) / (1.0 - margin)
        lines.append(f"{lim.name:<28}{lo:9.3f}{hi:9.3f}{100 * (hi - lo) / full:9.0f}%"
                     f"{vs:12.3f}{100 * vs / (lim.velocity / (1 - margin)):9.0f}%"
                     f"{ac:10.3f}{100 * ac / (lim.acceleration / (1 - margin)):9.0f}%")
    lines.append("  (positions in rad or m; 'of range' and 'of limit' against the limits "
                 "before the margin)")
    return lines


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog=PROG, description=__doc__.split("\n\n")[0])
    add_arguments(parser)
    return run(parser.parse_args(argv))
