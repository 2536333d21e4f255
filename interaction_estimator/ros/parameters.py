"""ROS 2 parameters of the node, declared from the settings registry (:data:`SPECS`).

Every setting becomes a parameter of the same dotted name with a ParameterDescriptor: the
description with its unit and allowed values, a FloatingPointRange or IntegerRange where the
setting is bounded (step 0: any value in the range), and ``read_only`` where the setting needs a
restart. rclpy checks the descriptor's range first (its refusal names the parameter, the value
and the bounds); everything else (types, lengths, choices, open bounds, per-joint lists,
cross-setting rules) is checked by :func:`~interaction_estimator.core.settings.validate_value` and
:class:`~interaction_estimator.core.settings.Settings`, whose message becomes the refusal reason.

Typing: strings, booleans and integers are statically typed. Floats and arrays are declared with
``dynamic_typing`` so that a parameter file may write ``9`` for ``9.0``, ``[40, 30]`` for a list
of floats and ``[]`` for an empty list (the ROS 2 YAML parser gives ``[]`` no type at all);
:func:`normalized` turns such values into DOUBLE / DOUBLE_ARRAY / STRING_ARRAY before they are
stored, and the registry validates them.
"""
from __future__ import annotations

import re
import sys
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from rcl_interfaces.msg import FloatingPointRange, IntegerRange, ParameterDescriptor
from rclpy.parameter import Parameter

from ..core.settings import (
    PER_JOINT,
    SPEC_BY_NAME,
    SPECS,
    ParamSpec,
    Settings,
    SettingsError,
    per_joint,
    validate_value,
)
from ..io.parameter_file import file_sections

_STATIC_TYPES = {
    "str": Parameter.Type.STRING,
    "bool": Parameter.Type.BOOL,
    "int": Parameter.Type.INTEGER,
}
_ARRAY_TYPES = {"float_array": Parameter.Type.DOUBLE_ARRAY,
                "str_array": Parameter.Type.STRING_ARRAY}
_TYPE_NAMES = {"str": "string", "bool": "bool", "int": "integer", "float": "double",
               "float_array": "double array", "str_array": "string array"}
_BIG = sys.float_info.max

# Parameters that rclpy itself declares or reads from a parameter file; not ours to refuse.
FOREIGN_PREFIXES = ("use_sim_time", "qos_overrides.", "start_type_description_service")

PER_JOINT_SETTINGS: tuple[str, ...] = tuple(s.name for s in SPECS if PER_JOINT in s.description)

def descriptor(spec: ParamSpec) -> ParameterDescriptor:
    """The ParameterDescriptor of one setting (description with unit and allowed values)."""
    unit = f" Unit: {spec.unit}." if spec.unit else ""
    d = ParameterDescriptor(
        name=spec.name,
        description=f"{spec.description}{unit} Type: {_TYPE_NAMES[spec.kind]}.",
        additional_constraints=spec.range_text() + (" (open interval)" if spec.exclusive else ""),
        read_only=spec.read_only,
    )
    if spec.kind in _STATIC_TYPES:
        d.type = _STATIC_TYPES[spec.kind].value
    else:
        d.dynamic_typing = True
    if spec.kind in ("float", "int") and (spec.minimum is not None or spec.maximum is not None):
        if spec.kind == "float":
            d.floating_point_range = [FloatingPointRange(
                from_value=-_BIG if spec.minimum is None else float(spec.minimum),
                to_value=_BIG if spec.maximum is None else float(spec.maximum), step=0.0)]
        else:
            d.integer_range = [IntegerRange(
                from_value=-(2**63) if spec.minimum is None else int(spec.minimum),
                to_value=2**63 - 1 if spec.maximum is None else int(spec.maximum), step=0)]
    return d


def declared_default(spec: ParamSpec) -> Any:
    """The default as declared: an empty list is declared as its typed value later."""
    return list(spec.default) if isinstance(spec.default, list) else spec.default


def normalized(param: Parameter) -> Parameter:
    """``param`` with the type its setting expects, when the value converts without loss.

    INTEGER -> DOUBLE for float settings; INTEGER_ARRAY or an empty/unset value -> DOUBLE_ARRAY
    for float lists; an empty/unset value -> STRING_ARRAY for string lists. Anything else is
    returned unchanged (and then refused by the validation, with the reason).
    """
    spec = SPEC_BY_NAME.get(param.name)
    if spec is None:
        return param
    t, v = param.type_, param.value
    if spec.kind == "float" and t == Parameter.Type.INTEGER:
        return Parameter(param.name, Parameter.Type.DOUBLE, float(v))
    if spec.kind in _ARRAY_TYPES:
        target = _ARRAY_TYPES[spec.kind]
        if t == Parameter.Type.NOT_SET or (t == Parameter.Type.BYTE_ARRAY and len(v) == 0):
            return Parameter(param.name, target, [])
        if spec.kind == "float_array" and t == Parameter.Type.INTEGER_ARRAY:
            return Parameter(param.name, target, [float(x) for x in v])
        if spec.kind == "float_array" and t in (Parameter.Type.INTEGER, Parameter.Type.DOUBLE):
            return Parameter(param.name, target, [float(v)])
    return param


def setting_value(param: Parameter) -> Any:
    """The Python value a setting gets from a parameter (unset arrays: empty list)."""
    param = normalized(param)
    v = param.value
    if param.type_ in (Parameter.Type.DOUBLE_ARRAY, Parameter.Type.STRING_ARRAY,
                       Parameter.Type.INTEGER_ARRAY, Parameter.Type.BOOL_ARRAY,
                       Parameter.Type.BYTE_ARRAY):
        return list(v)
    return v


def changes_from(params: Iterable[Parameter]) -> dict[str, Any]:
    """{setting name: value} for the parameters that are settings (others are not ours)."""
    return {p.name: setting_value(p) for p in params if p.name in SPEC_BY_NAME}


def check_fits_model(settings: Settings, joints: Iterable[str] | None) -> None:
    """Raise SettingsError if a per-joint list does not fit the model's joints."""
    if joints is None:
        return
    joints = list(joints)
    for name in PER_JOINT_SETTINGS:
        per_joint(settings, name, joints)


def unknown_overrides(names: Iterable[str], declared: Iterable[str]) -> list[str]:
    """Parameter-file names that are neither settings nor parameters rclpy declares itself."""
    known = set(declared)
    return sorted(n for n in names if n not in SPEC_BY_NAME and n not in known
                  and not n.startswith(FOREIGN_PREFIXES))


def type_refusal(name: str, value: Any) -> str:
    """A refusal reason for a value of the wrong type, in the registry's words."""
    try:
        validate_value(name, value)
    except SettingsError as exc:
        return str(exc)
    return f"{name}: {value!r} has the wrong type; expected {_TYPE_NAMES[SPEC_BY_NAME[name].kind]}"


def parameter_files(args: Sequence[str]) -> list[str]:
    """The paths given with ``--params-file`` in the ROS arguments of ``args``."""
    files, in_ros = [], False
    it = iter(args)
    for a in it:
        if a == "--ros-args":
            in_ros = True
        elif a == "--":
            in_ros = False
        elif in_ros and a == "--params-file":
            path = next(it, None)
            if path is not None:
                files.append(path)
    return files


def unreadable_file(path: str) -> str:
    """A message when a parameter file cannot be read, else ''."""
    try:
        Path(path).read_bytes()
    except OSError as exc:
        return (f"parameter file {path!r} cannot be read: {exc.strerror}; expected a ROS 2 "
                "parameter YAML file (see config/default.yaml)")
    return ""


def section_matches(section: str, node_fqn: str) -> bool:
    """ROS 2's rule for a parameter-file section: the node's fully qualified name, the leading
    slash optional, ``*`` for one name token and ``**`` for any number of them."""
    pattern = ""
    for token in section.strip("/").split("/"):
        pattern += ("(/[^/]+)*" if token == "**" else "/[^/]+" if token == "*"
                    else "/" + re.escape(token))
    return re.fullmatch(pattern, node_fqn) is not None


def unmatched_file_warning(path: str, node_fqn: str) -> str:
    """A warning when a parameter file has no section that applies to this node, else ''."""
    sections = file_sections(path)
    if sections is None:   # the ROS 2 parser has already said what is wrong with it
        return ""
    if any(section_matches(k, node_fqn) for k in sections):
        return ""
    return (f"parameter file {path!r} has no section for this node {node_fqn!r} (its sections: "
            f"{sorted(sections)}); its values are not used. Write '/**/"
            f"{node_fqn.rsplit('/', 1)[-1]}:' to apply it in any namespace")


__all__ = ["parameter_files", "unreadable_file", "section_matches", "unmatched_file_warning",
           "descriptor", "declared_default", "normalized", "setting_value", "changes_from",
           "check_fits_model", "unknown_overrides", "type_refusal", "PER_JOINT_SETTINGS"]
