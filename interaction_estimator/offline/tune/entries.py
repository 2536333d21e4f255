"""The tuned settings with their comments (the header and the model summary: headers.py)."""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ...core.settings import Settings
from .common import _clamp
from .friction import Identification
from .recordings import Recording


@dataclass
class TunedEntry:
    """One written setting: value, and the comment lines saying where it came from."""

    name: str
    value: Any
    comment: list[str]


# ============================================================================================
# entries and their comments


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def _round(x: float) -> float:
    """A tuned number to 6 significant digits (far below its uncertainty), as float."""
    return float(f"{float(x):.6g}")


def build_entries(ident: Identification, base: Settings, joints: Sequence[str],
                  recs: Sequence[Recording]) -> dict[str, TunedEntry]:
    """The tuned settings with comment lines (ASCII) stating source and confidence: the
    robot's bias, friction and sensor noise, never a setting of the object filter."""
    last = len(recs) - 1
    free_desc = (f"{ident.free_time:.2f} s of free motion in {len(recs)} bag(s)")
    entries: dict[str, TunedEntry] = {}
    entries["joint_names"] = TunedEntry("joint_names", list(joints),
                                        ["order of the per-joint lists below (the URDF's)"])
    lines = [f"tuned: least squares on the observer residual, {free_desc};",
             f"value of the last bag ({Path(recs[last].name).name}), +/- 95 % interval:"]
    lines += [f"  {j.name}: {_fmt(j.bias[last])} +/- {_fmt(j.bias_ci[last])}"
              + (f" (bags: {', '.join(_fmt(b) for b in j.bias)})" if len(recs) > 1 else "")
              for j in ident.joints]
    entries["bias.initial"] = TunedEntry("bias.initial",
                                         [_round(b) for b in ident.bias_of_bag(last)], lines)
    if base["effort_side"] == "motor":
        for key, attr, ci_attr, unit in (("friction.viscous", "viscous", "viscous_ci",
                                          "N.m.s/rad"),
                                         ("friction.coulomb", "coulomb", "coulomb_ci", "N.m")):
            lines = [f"tuned: least squares on the observer residual, {free_desc}; "
                     f"{unit}, +/- 95 % interval:"]
            for j in ident.joints:
                if j.friction_identified:
                    lines.append(f"  {j.name}: {_fmt(getattr(j, attr))} +/- "
                                 f"{_fmt(getattr(j, ci_attr))}")
                else:
                    lines.append(f"  {j.name}: {_fmt(getattr(j, attr))} kept from the base "
                                 f"({j.friction_note})")
            entries[key] = TunedEntry(key, [_round(max(float(getattr(j, attr)), 0.0))
                                            for j in ident.joints], lines)
    for key, value, label, attr in (
            ("observer.effort_noise", ident.effort_noise, "effort", "effort_noise"),
            ("observer.velocity_noise", ident.velocity_noise, "velocity", "velocity_noise")):
        per = [getattr(j, attr) for j in ident.joints]
        entries[key] = TunedEntry(key, _round(_clamp(key, value)), [
            f"tuned: median over joints of the {label} noise (second differences of "
            f"{free_desc}); per joint {min(per):.3g} .. {max(per):.3g}"])
    return entries
