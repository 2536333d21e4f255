"""ROS 2 parameter files: the one reader and the one writer of the package.

The format is the ROS 2 parameter YAML, the one file format of the node, the replay and the
tuning command: a section naming the node, then ``ros__parameters:``, dotted names nested.

* Reading: :func:`load_parameter_file` (validated Settings) and :func:`parameters_from_yaml`
  (flat names, not yet validated) accept the sections ``/**``, ``interaction_estimator``,
  ``/interaction_estimator`` and ``/<ns>/interaction_estimator``.
* Writing: :func:`parameter_file_text` (any dotted names and values, with comments) and
  :func:`settings_file_text` (settings of the registry, typed as ROS 2 reads them) write the
  section :data:`SECTION`, ``/**/interaction_estimator``: this node in any namespace. A bare
  ``interaction_estimator:`` would apply only to a node without a namespace (ROS 2 matches
  sections by the fully qualified node name), so a robot that launches the node under a
  namespace would silently run on the defaults. :func:`write_parameter_file` writes a file
  atomically (:mod:`.files`).
* The default parameter file, generated from the settings registry so it never drifts:
  ``python -m interaction_estimator.io.parameter_file`` prints it; ``--write
  config/default.yaml`` rewrites the committed copy; ``--check config/default.yaml`` exits 1 if
  that copy is out of date. Every entry is commented with its type, unit, meaning, allowed values
  and, where it helps, how to tune it.
"""
from __future__ import annotations

import argparse
import json
import math
import re
import sys
import textwrap
from collections.abc import Callable, Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

import yaml

from ..core.settings import (
    NODE_NAME,
    SPEC_BY_NAME,
    SPECS,
    ParamSpec,
    Settings,
    SettingsError,
    flatten,
    nest,
)
from .files import write_atomic

WIDTH = 96  # characters per comment line
# The file's section: this node's name in any namespace. A plain "interaction_estimator:" would
# match only the node without a namespace (ROS 2 matches sections by fully qualified name), so a
# robot that launches it under a namespace would silently run on the defaults.
SECTION = f"/**/{NODE_NAME}"

HEADER = f"""\
# Parameters of the interaction_estimator node, the replay and the tuning command.
#
# GENERATED from the settings registry (interaction_estimator/settings.py) by
#   python -m interaction_estimator.io.parameter_file --write config/default.yaml
# Do not edit this copy: copy it to your robot's package, change what you need there, and pass
# it with `--ros-args --params-file FILE` (or the launch argument params_file). Values here are
# the defaults; a file needs only the entries it changes.
# The section "/**/{NODE_NAME}" applies to the node in any namespace; a section
# "/arm/{NODE_NAME}" would apply in the namespace /arm only, and a bare
# "{NODE_NAME}" only without a namespace.
#
# Units are SI. "read-only" entries are read at start-up (restart the node to change them); the
# others can be changed while the node runs, e.g. with
#   ros2 param set /{NODE_NAME} contact.enter_level 8.0
# and a value outside the allowed range is refused with the reason.
#
# Tuning order that works on most robots: (1) effort_side and friction for motor-current
# efforts (`interaction-estimator tune` identifies bias, friction and sensor noise from bags),
# (2) observer.gain for the lag/noise trade-off of the force, (3) contact levels. The object
# filter needs no noise tuning: it learns its noise level from its own residuals; set its
# prior (filter.initial_std) wide enough for any object the robot may meet.
"""

# How to tune, by setting; the registry's description says what it is.
TUNING: dict[str, str] = {
    "contact_frame": "Pick the link that touches the object; the force is reported at its origin.",
    "effort_side": "Use 'motor' when efforts come from motor currents; then set the friction.",
    "observer.gain": (
        "Raise it for a force that follows changes faster, lower it when the wrench is noisy in"
        " free motion; keep gain x sample interval well below 1."),
    "observer.max_gap": "Set to a few sample intervals of your joint-state rate.",
    "bias.initial": "Leave empty unless the torque sensors have a known offset.",
    "bias.time_constant": "Shorter learns faster but lets slow free-motion dynamics leak in.",
    "bias.startup": "Keep the robot away from objects for this long after start or reset.",
    "friction.viscous": (
        "Motor-side efforts only. Identify from a free motion at several constant speeds (slope"
        " of effort against velocity), or with the tuning command."),
    "friction.coulomb": "Motor-side efforts only. The effort offset at low constant speed.",
    "contact.enter_level": (
        "Lower detects lighter contacts but gives false contacts during fast free motion."
        " Raise it if free motion is reported as contact."),
    "contact.exit_level": "Must stay below contact.enter_level; the gap is the hysteresis.",
    "contact.noise_floor": "Raise it on robots whose free-motion residual is noisier.",
    "wrench.damping": "Raise it when the force blows up near singular arm poses.",
    "wrench.condition_limit": "The status warns above it; lower it to be warned earlier.",
    "kinematics.window": (
        "Longer smooths the acceleration (needed for the mass) but adds lag (half the window)."
        " Cover at least 10 samples."),
    "filter.initial_std": (
        "Prior uncertainty. Make it generous (a few times the largest value you expect): too"
        " small a prior slows convergence and biases the estimate toward initial_mean."),
    "filter.update_interval": (
        "Longer than the colouring of the force's error (the observer's time constant plus the"
        " differentiator's window) and short against the motion: 0.05-0.2 s suits most robots,"
        " at any sample rate."),
    "filter.measurement_std": (
        "Only a starting value when filter.learn_noise is true (it weighs as a few blocks):"
        " about the force noise you expect along the direction. With learn_noise false it is"
        " used as it is: too small makes the estimates jumpy and the NIS too high, too large"
        " makes them slow and the NIS too low."),
    "filter.learn_noise": (
        "Keep it true; false only for repeatable comparisons with a known noise level."),
    "filter.memory": (
        "Leave 0 for objects that stay the same (changes are detected); a few times the time"
        " over which your object's properties drift otherwise."),
    "filter.change_threshold": "Lower detects object changes sooner, with more false alarms.",
    "filter.history_time": (
        "Longer than the time the change test needs to fire (a few update intervals), so"
        " that the new object's first blocks are kept."),
    "filter.nis_time": "A few seconds gives a stable consistency verdict.",
    "filter.excited_fraction": (
        "A parameter that stays not excited needs motion that shows it: vary speed and"
        " acceleration along the direction, or move farther for stiffness."),
    "filter.converged_fraction": (
        "The share of a parameter's effect on the force your controller can tolerate; the"
        " same value suits every object."),
    "health.max_latency": "Set to the delay your controller tolerates.",
    "health.min_rate": "Set a little below your joint-state rate.",
    "input.separate_efforts": "For drivers that publish efforts on their own topic.",
    "input.stamp_tolerance": "About a quarter of the sample interval.",
    "input.queue_depth": "200 keeps up with 1 kHz input on a loaded machine; 5 loses samples.",
    "input.reliability": "'best_effort' matches sensor drivers; 'reliable' for replays and tests.",
    "input.expected_rate": "Your joint-state rate; the status warns when off by more than 20 %.",
    "output.status_rate": "0 publishes one status per sample (for logging); 10-50 Hz otherwise.",
}

_PLAIN = re.compile(r"^[A-Za-z_][A-Za-z0-9_./-]*$")
_RESERVED = {"true", "false", "yes", "no", "on", "off", "null", "y", "n", "~"}


# --------------------------------------------------------------------------------------------
# reading


def parameters_from_yaml(text: str, source: str = "<text>",
                         node_name: str = NODE_NAME) -> dict[str, Any]:
    """Read the node's parameters from ROS 2 parameter-file text; flat, not yet validated.

    Accepts the sections ``/**``, ``<node_name>``, ``/<node_name>`` and ``/<ns>/<node_name>``
    (``/**/<node_name>`` included), each holding ``ros__parameters``; later sections override
    earlier ones, as in ROS 2.
    """
    try:
        doc = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        raise SettingsError(f"{source}: not valid YAML: {exc}") from None
    if not isinstance(doc, Mapping):
        raise SettingsError(f"{source}: expected a mapping with '{node_name}:' or '/**:' at the"
                            f" top, found {type(doc).__name__}")
    found: dict[str, Any] = {}
    matched = False
    for section, body in doc.items():
        section = str(section)
        if section not in ("/**", node_name) and section.rstrip("/").split("/")[-1] != node_name:
            continue
        if not isinstance(body, Mapping) or "ros__parameters" not in body:
            raise SettingsError(f"{source}: section {section!r} has no 'ros__parameters:' mapping")
        params = body["ros__parameters"] or {}
        if not isinstance(params, Mapping):
            raise SettingsError(f"{source}: {section}.ros__parameters must be a mapping")
        found.update(flatten(params))
        matched = True
    if not matched:
        raise SettingsError(f"{source}: no section for this node; expected a top-level"
                            f" '{node_name}:' or '/**:' key, found {sorted(map(str, doc))}")
    return found


def load_parameter_file(path: str | Path, base: Settings | None = None) -> Settings:
    """Load a ROS 2 parameter YAML into validated Settings (unknown keys are refused)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise SettingsError(f"parameter file {str(path)!r} cannot be read: "
                            f"{exc.strerror}") from None
    flat = parameters_from_yaml(text, source=str(path))
    try:
        return (base or Settings()).replace(flat)
    except SettingsError as exc:
        raise SettingsError(f"{path}: {exc}") from None


def file_sections(path: str | Path) -> list[str] | None:
    """The top-level section names of a YAML file, or None when it cannot be read as a
    mapping (the caller's parser says why)."""
    try:
        doc = yaml.safe_load(Path(path).read_text(encoding="utf-8"))
    except (OSError, yaml.YAMLError):
        return None
    return [str(k) for k in doc] if isinstance(doc, dict) else None


# --------------------------------------------------------------------------------------------
# writing


def yaml_value(value: Any) -> str:
    """A value as YAML text that the ROS 2 parser and PyYAML read alike (floats keep a dot;
    a non-finite float is refused: ROS 2 parameters of this node never hold one)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"non-finite value {value!r}; expected a finite number")
        text = repr(value)
        mantissa, _, exponent = text.partition("e")
        if "." not in mantissa:
            mantissa += ".0"
        return mantissa + (f"e{exponent if exponent[0] in '+-' else '+' + exponent}"
                           if exponent else "")
    if isinstance(value, str):
        if _PLAIN.match(value) and value.lower() not in _RESERVED:
            return value
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(yaml_value(v) for v in value) + "]"
    raise TypeError(f"no YAML form for {value!r}")


Comments = Mapping[str, Sequence[str]] | Callable[[str, str], Sequence[str]]


def parameter_file_text(values: Mapping[str, Any], comments: Comments | None = None,
                        header: Sequence[str] = ()) -> str:
    """A ROS 2 parameter file holding ``values`` (dotted names; a group is written where its
    first name comes) in the section :data:`SECTION`.

    comments: the comment lines above an entry, by dotted name (text without ``#``), or a
    function (name, indent) -> the full comment lines. header: comment lines at the top (text
    without ``#``), followed by an empty line.
    """
    out = ["#" + (f" {h}" if h else "") for h in header]
    if out:
        out.append("")
    out += [f"{SECTION}:", "  ros__parameters:"]
    if comments is None:
        comments = {}

    def comment(name: str, indent: str) -> Sequence[str]:
        if callable(comments):
            return comments(name, indent)
        return [f"{indent}#" + (f" {c}" if c else "") for c in comments.get(name, ())]

    def emit(node: Mapping[str, Any], prefix: str, indent: str) -> None:
        for key, item in node.items():
            name = f"{prefix}{key}"
            if isinstance(item, dict):
                out.append(f"{indent}{key}:")
                emit(item, name + ".", indent + "  ")
            else:
                out.extend(comment(name, indent))
                out.append(f"{indent}{key}: {yaml_value(item)}")

    emit(nest(values), "", "    ")
    return "\n".join(out) + "\n"


def settings_file_text(settings: Mapping[str, Any], names: Iterable[str] | None = None,
                       comments: Comments | None = None, header: Sequence[str] = ()) -> str:
    """:func:`parameter_file_text` of registry settings: the ``names`` of ``settings`` (all of
    them when None), in the registry's order, typed as the registry says (a float written with
    a dot, a list of floats as floats), empty lists left out (ROS 2 cannot type ``[]``; empty
    means the default). SettingsError for a name the registry does not have."""
    wanted = set(settings if names is None else names)
    unknown = sorted(wanted - set(SPEC_BY_NAME))
    if unknown:
        raise SettingsError(f"cannot write {unknown}: not settings of the registry (see "
                            "config/default.yaml for the full list)")
    values: dict[str, Any] = {}
    for spec in SPECS:
        if spec.name not in wanted:
            continue
        value = settings[spec.name]
        if spec.kind == "float_array":
            value = [float(v) for v in value]
        elif spec.kind == "float":
            value = float(value)
        if isinstance(value, list) and not value:
            continue
        values[spec.name] = value
    return parameter_file_text(values, comments, header)


def write_parameter_file(path: str | Path, settings: Mapping[str, Any],
                         names: Iterable[str] | None = None, comments: Comments | None = None,
                         header: Sequence[str] = ()) -> None:
    """:func:`settings_file_text` written to ``path`` atomically."""
    write_atomic(path, settings_file_text(settings, names, comments, header))


# --------------------------------------------------------------------------------------------
# the default parameter file


def _comment(spec: ParamSpec, indent: str) -> list[str]:
    kind = {"str": "string", "bool": "true/false", "int": "integer", "float": "number",
            "float_array": "list of numbers", "str_array": "list of strings"}[spec.kind]
    head = f"{spec.name} ({kind}"
    head += f", {spec.unit})" if spec.unit else ")"
    if spec.read_only:
        head += ", read-only"
    parts = [head + ": " + spec.description]
    parts.append(f"Allowed: {spec.range_text()}.")
    if spec.name in TUNING:
        parts.append("Tuning: " + TUNING[spec.name])
    lines: list[str] = []
    width = WIDTH - len(indent) - 2
    for part in parts:
        wrapped = textwrap.wrap(part, width=width, subsequent_indent="  ",
                                break_on_hyphens=False)
        lines += [f"{indent}# {w}" for w in wrapped]
    return lines


def generate() -> str:
    """The default parameter file as text (groups in the registry's order of appearance)."""
    header = [line[2:] if line.startswith("# ") else line.lstrip("#")
              for line in HEADER.splitlines()]
    return parameter_file_text({spec.name: spec.default for spec in SPECS},
                               lambda name, indent: _comment(SPEC_BY_NAME[name], indent), header)


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m interaction_estimator.io.parameter_file",
                                     description="Print, write or check the default parameter "
                                                 "file generated from the settings registry.")
    group = parser.add_mutually_exclusive_group()
    group.add_argument("--write", metavar="PATH", help="write the file to PATH")
    group.add_argument("--check", metavar="PATH",
                       help="exit 1 if PATH differs from the generated file")
    args = parser.parse_args(argv)
    text = generate()
    if args.write:
        write_atomic(args.write, text)
        return 0
    if args.check:
        path = Path(args.check)
        current = path.read_text(encoding="utf-8") if path.exists() else ""
        if current != text:
            print(f"{path} is out of date: regenerate it with python -m "
                  f"interaction_estimator.io.parameter_file --write {path}", file=sys.stderr)
            return 1
        return 0
    sys.stdout.write(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
