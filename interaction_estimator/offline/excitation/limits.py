"""Joint limits for the commissioning motion: the URDF's ``<limit>`` elements, a ROS 2
``joint_limits`` YAML where one is given (the format of the ros2_control ``joint_limits``
package: ``joint_limits: {JOINT: {has_acceleration_limits: true, max_acceleration: ...}}``),
and the user's own values, with a safety margin.

Every moving joint needs a position range, a velocity limit and an acceleration limit (URDF has
no acceleration limits: from the joint_limits file or the command line). A joint without them is
refused by name, with the options that supply them; a joint the user holds still needs none.
"""
from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import yaml


class LimitsError(ValueError):
    """Limits are missing or invalid; the message names the joints and the options to use."""


@dataclass
class JointLimits:
    """One joint's usable motion after the margin: position interval [lower, upper] (rad or m),
    velocity (rad/s or m/s) and acceleration (rad/s² or m/s²) bounds; held: the joint stays at
    ``hold_at``. source: where each came from, for the account printed."""

    name: str
    lower: float
    upper: float
    velocity: float
    acceleration: float
    held: bool = False
    hold_at: float = 0.0
    source: str = ""


def _num(text: str | None) -> float | None:
    if text is None:
        return None
    try:
        x = float(text)
    except ValueError:
        return None
    return x if math.isfinite(x) else None


def urdf_limits(urdf: str) -> dict[str, dict[str, float | str | None]]:
    """Per joint of the URDF (moving ones): type, lower, upper, velocity (None if absent)."""
    out: dict[str, dict[str, float | str | None]] = {}
    for j in ET.fromstring(urdf).iter("joint"):
        kind = j.get("type", "")
        if kind not in ("revolute", "continuous", "prismatic"):
            continue
        lim = j.find("limit")
        get = (lambda k: None) if lim is None else (lambda k, lim=lim: _num(lim.get(k)))
        lower, upper = get("lower"), get("upper")
        if kind == "continuous" or (lower is not None and upper is not None and upper <= lower):
            lower = upper = None                    # no position range
        out[j.get("name", "?")] = {"type": kind, "lower": lower, "upper": upper,
                                   "velocity": get("velocity") or None}
    return out


def ros2_joint_limits(path: Path) -> dict[str, dict[str, float]]:
    """Position, velocity and acceleration limits from a ROS 2 ``joint_limits`` YAML (the
    ``has_*`` flags honoured); keys min_position, max_position, max_velocity,
    max_acceleration, present only where given."""
    try:
        doc = yaml.safe_load(Path(path).read_text(encoding="utf-8"))
    except (OSError, yaml.YAMLError) as exc:
        raise LimitsError(f"joint limits file {str(path)!r} cannot be read: {exc}") from None
    table = doc.get("joint_limits") if isinstance(doc, dict) else None
    if not isinstance(table, dict):
        raise LimitsError(f"joint limits file {str(path)!r} has no 'joint_limits:' mapping; "
                          "expected the ROS 2 joint_limits format (joint_limits: JOINT: "
                          "has_acceleration_limits: true, max_acceleration: ...)")
    out: dict[str, dict[str, float]] = {}
    for name, entry in table.items():
        if not isinstance(entry, dict):
            continue
        got: dict[str, float] = {}
        for flag, keys in (("has_position_limits", ("min_position", "max_position")),
                           ("has_velocity_limits", ("max_velocity",)),
                           ("has_acceleration_limits", ("max_acceleration",))):
            if entry.get(flag):
                for k in keys:
                    x = _num(str(entry.get(k)))
                    if x is None:
                        raise LimitsError(f"joint limits file {str(path)!r}: {name}.{k} = "
                                          f"{entry.get(k)!r} is not a number; expected one "
                                          "since " + flag + " is true")
                    got[k] = x
        out[str(name)] = got
    return out


def resolve(joints: Sequence[str], urdf: str, margin: float,
            acceleration: Mapping[str, float], default_acceleration: float | None,
            ranges: Mapping[str, tuple[float, float]], holds: Mapping[str, float | None],
            limits_file: Mapping[str, Mapping[str, float]] | None = None
            ) -> list[JointLimits]:
    """The usable limits of ``joints`` (model order). Precedence: ``ranges`` (user) narrow the
    position interval, the joint_limits file narrows the URDF's (never widens), per-joint
    ``acceleration`` over the file's over ``default_acceleration``. ``margin`` (0 <= m < 1):
    the position interval shrinks about its centre to (1 - m) of its width, velocity and
    acceleration bounds to (1 - m) of their values. Raises LimitsError naming every joint that
    lacks something."""
    if not 0.0 <= margin < 1.0:
        raise LimitsError(f"margin {margin!r} is outside [0, 1); expected a fraction such as "
                          "0.2 (20 % of each limit kept free)")
    table = urdf_limits(urdf)
    extra = limits_file or {}
    unknown = sorted(n for n in set(ranges) | set(holds) | set(acceleration) if n not in joints)
    if unknown:
        raise LimitsError(f"joints {unknown} are not moving joints of the URDF; expected some "
                          f"of {list(joints)}")
    missing: dict[str, list[str]] = {"position range": [], "velocity limit": [],
                                     "acceleration limit": []}
    out: list[JointLimits] = []
    for name in joints:
        urdf_j = table.get(name, {})
        file_j = extra.get(name, {})
        lo, hi = urdf_j.get("lower"), urdf_j.get("upper")
        src = "URDF"
        if "min_position" in file_j and "max_position" in file_j:
            lo = file_j["min_position"] if lo is None else max(lo, file_j["min_position"])
            hi = file_j["max_position"] if hi is None else min(hi, file_j["max_position"])
            src = "joint limits file"
        if name in ranges:
            r_lo, r_hi = ranges[name]
            if lo is not None and hi is not None and (r_lo < lo or r_hi > hi):
                raise LimitsError(f"--range {name}={r_lo:g}:{r_hi:g} reaches outside the "
                                  f"joint's limits [{lo:g}, {hi:g}]; expected a range within them")
            lo, hi, src = r_lo, r_hi, "--range"
        vel = urdf_j.get("velocity")
        if "max_velocity" in file_j:
            vel = file_j["max_velocity"] if vel is None else min(vel, file_j["max_velocity"])
        acc = acceleration.get(name, file_j.get("max_acceleration", default_acceleration))
        if name in holds:
            at = holds[name]
            if at is None:
                if lo is None or hi is None:
                    raise LimitsError(f"--hold {name} needs a value (--hold {name}=VALUE): the "
                                      "joint has no position range to take the middle of")
                at = 0.5 * (lo + hi)
            out.append(JointLimits(name, at, at, 0.0, 0.0, True, float(at), "held"))
            continue
        if lo is None or hi is None:
            missing["position range"].append(name)
        if not vel or vel <= 0:
            missing["velocity limit"].append(name)
        if acc is None or not acc > 0:
            missing["acceleration limit"].append(name)
        if lo is None or hi is None or not vel or acc is None:
            continue
        centre, half = 0.5 * (lo + hi), 0.5 * (hi - lo) * (1.0 - margin)
        out.append(JointLimits(name, centre - half, centre + half, vel * (1.0 - margin),
                               float(acc) * (1.0 - margin), source=src))
    problems = [f"{what} for {names}" for what, names in missing.items() if names]
    if problems:
        raise LimitsError(
            "the commissioning motion needs limits the URDF does not give: "
            + "; ".join(problems) + ". Expected: a position range for every moving joint "
            "(continuous joints have none: --range JOINT=LOW:HIGH), a velocity limit "
            "(<limit velocity=...> in the URDF), an acceleration limit (--max-acceleration "
            "VALUE or JOINT=VALUE, or --joint-limits FILE in the ROS 2 joint_limits format); "
            "or --hold JOINT[=VALUE] to keep a joint still")
    return out
