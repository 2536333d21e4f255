"""The URDF's inertial elements, read and checked before Pinocchio builds the model.

Pinocchio's URDF parser reads a number it cannot parse (``ixx="np.float64(0.0103)"``) as 0 and
says so only on stderr; a negative mass or an impossible inertia it takes as given. Either way
the estimator would run on a robot that does not exist. :func:`inertial_problems` reads every
``<link><inertial>`` with xml.etree itself and lists, naming the link and the value:

* a ``<mass value>`` or ``<inertia ixx ixy ixz iyy iyz izz>`` (or ``<origin xyz rpy>``) that is
  missing or not a finite decimal number;
* a negative mass;
* a rotational inertia (about the centre of mass) that is not positive semi-definite, or whose
  principal moments violate the triangle inequalities ``I1 <= I2 + I3``: no distribution of
  non-negative mass has it (the conditions of physical consistency of Traversaro, Brossette,
  Escande and Nori, "Identification of fully physical consistent inertial parameters using
  optimization on manifolds", IROS 2016).

Tolerances: published URDFs write inertias rounded to a few digits, and a thin rod or a flat
plate sits exactly on the triangle boundary, so a violation is refused only when it exceeds
:data:`RELATIVE_TOLERANCE` of the link's own trace and :data:`ROBOT_TOLERANCE` of the largest
trace of any link of the robot (a 1e-8 kg·m² error on a 1e-6 kg antenna link of a 50 kg robot
moves nothing). Both are our choice (common practice, no source). A link of zero mass with
zero inertia (a frame) is fine.
"""
from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import numpy as np

RELATIVE_TOLERANCE = 1e-4   # of the link's own trace (rounding of written values)
ROBOT_TOLERANCE = 1e-6      # of the largest trace over the robot's links
INERTIA_KEYS = ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")


def _number(text: str | None) -> float | None:
    """A finite float from a URDF attribute, or None."""
    if text is None:
        return None
    try:
        x = float(text)
    except ValueError:
        return None
    return x if math.isfinite(x) else None


def _triple(text: str | None) -> bool:
    """Whether an ``xyz``/``rpy`` attribute is absent or three finite numbers."""
    if text is None:
        return True
    parts = text.split()
    return len(parts) == 3 and all(_number(p) is not None for p in parts)


def inertia_tensor(values: dict[str, float]) -> np.ndarray:
    """The symmetric 3x3 tensor (kg·m²) of the six URDF entries."""
    v = values
    return np.array([[v["ixx"], v["ixy"], v["ixz"]],
                     [v["ixy"], v["iyy"], v["iyz"]],
                     [v["ixz"], v["iyz"], v["izz"]]])


def moment_violation(principal: np.ndarray) -> tuple[float, str]:
    """How far (kg·m²) sorted principal moments (3,) are from a physical rigid body, and how:
    (0, '') when they are; else the size of the worst violation and a phrase naming it."""
    a, b, c = np.sort(principal)
    if a < 0:
        return -a, f"a negative principal moment ({a:.6g}): not positive semi-definite"
    if c > a + b:
        return c - a - b, (f"principal moments {a:.6g}, {b:.6g}, {c:.6g} violate the triangle "
                           f"inequality ({c:.6g} > {a:.6g} + {b:.6g})")
    return 0.0, ""


def inertial_problems(urdf: str) -> list[str]:
    """Every unreadable or non-physical inertial value of the URDF text, one message each
    (link and value named, what was expected said); [] when all are usable. Text that is not
    well-formed XML gives [] here: the model's parser reports it."""
    try:
        root = ET.fromstring(urdf)
    except ET.ParseError:
        return []
    problems: list[str] = []
    tensors: list[tuple[str, np.ndarray]] = []
    for link in root.iter("link"):
        name = link.get("name", "?")
        inertial = link.find("inertial")
        if inertial is None:
            continue
        where = f"link {name!r}"
        origin = inertial.find("origin")
        if origin is not None:
            for key in ("xyz", "rpy"):
                if not _triple(origin.get(key)):
                    problems.append(f"{where}: inertial origin {key}={origin.get(key)!r} is not "
                                    "three numbers; expected e.g. \"0 0 0.1\" (m or rad)")
        mass_el = inertial.find("mass")
        mass_text = None if mass_el is None else mass_el.get("value")
        mass = _number(mass_text)
        if mass is None:
            problems.append(f"{where}: mass value={mass_text!r} is not a finite number; "
                            "expected a mass in kg such as \"1.25\"" if mass_el is not None
                            else f"{where}: <inertial> has no <mass>; expected "
                                 "<mass value=\"...\"/> in kg")
        elif mass < 0:
            problems.append(f"{where}: mass {mass_text} kg is negative; expected a mass >= 0 kg")
        inertia_el = inertial.find("inertia")
        if inertia_el is None:
            problems.append(f"{where}: <inertial> has no <inertia>; expected <inertia ixx=... "
                            "ixy=... ixz=... iyy=... iyz=... izz=.../> in kg·m²")
            continue
        values: dict[str, float] = {}
        for key in INERTIA_KEYS:
            text = inertia_el.get(key)
            x = _number(text)
            if x is None:
                problems.append(f"{where}: inertia {key}={text!r} is not a finite number; "
                                "expected a value in kg·m² such as \"0.0103\"")
            else:
                values[key] = x
        if len(values) == len(INERTIA_KEYS):
            tensors.append((name, inertia_tensor(values)))
    traces = [float(np.trace(t)) for _, t in tensors]
    robot_scale = max([abs(x) for x in traces], default=0.0)
    for (name, tensor), trace in zip(tensors, traces, strict=True):
        principal = np.linalg.eigvalsh(tensor)
        size, phrase = moment_violation(principal)
        tolerance = max(RELATIVE_TOLERANCE * abs(trace), ROBOT_TOLERANCE * robot_scale)
        if size > tolerance:
            problems.append(f"link {name!r}: inertia {phrase} kg·m²; no rigid body has this "
                            "inertia: expected principal moments >= 0, each at most the sum of "
                            "the other two")
    return problems
