"""Where ``robot_description_file`` points: a path written in a parameter file is relative to
that file's directory (``tune`` writes the identified URDF beside the parameter file and names
it by its file name alone, so the pair can be moved together); one given on the command line
(``-p robot_description_file:=...``) or absolute is taken as it is."""
from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

from ..core.settings import SettingsError
from .parameter_file import parameters_from_yaml

SETTING = "robot_description_file"


def file_value(path: str | Path, name: str = SETTING) -> Any:
    """The value a ROS 2 parameter YAML gives ``name`` in this node's sections (read by the
    package's one reader, io.parameter_file), None when it gives none or cannot be read."""
    try:
        return parameters_from_yaml(Path(path).read_text(encoding="utf-8"),
                                    source=str(path)).get(name)
    except (OSError, SettingsError):
        return None


def resolve(value: str, parameter_files: Sequence[str | Path] = ()) -> Path:
    """The URDF path of a ``robot_description_file`` value: absolute as given; relative to the
    directory of the last of ``parameter_files`` that gives it this value (later files win, as
    ROS 2 applies them), else (a command-line value) to the working directory."""
    path = Path(value).expanduser()
    if path.is_absolute():
        return path
    for f in reversed([Path(p) for p in parameter_files]):
        if file_value(f) == value:
            return f.resolve().parent / path
    return path
