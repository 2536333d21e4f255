"""What a tuning result says about itself: the parameter file's header, the bags without
contact, the identified model's summary and its URDF's header (from a TuneResult)."""
from __future__ import annotations

import datetime as _dt
import textwrap
from pathlib import Path

import numpy as np

from .common import FREE_ONLY_USE, PROG, ROBOT_ONLY
from .entries import TunedEntry
from .procedure import TuneResult

# ============================================================================================
# the parameter file's header (the file itself: io.parameter_file.settings_file_text)


def file_header(result: TuneResult, base_source: str) -> list[str]:
    now = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    lines = [f"written by `{PROG}` on {now}",
             f"base: {base_source}",
             "bags: " + ", ".join(result.bags),
             f"free motion used: {result.identification.free_time:.2f} s (contact found: "
             f"{result.contact_time:.2f} s, not used); pipeline passes: {result.passes}",
             *([free_only_text(result)] if result.free_only else []),
             *textwrap.wrap(ROBOT_ONLY, 94),
             "entries preceded by 'tuned:' were identified from these bags; the others come "
             "from the base; settings not listed keep their defaults"]
    lines += [f"warning: {w}" for w in result.warnings]
    return lines


def free_only_text(result: TuneResult) -> str:
    """One line naming the bags without contact and what they were used for."""
    names = ", ".join(Path(result.bags[b]).name for b in result.free_only)
    return f"bags without contact ({FREE_ONLY_USE}): {names}"




# ============================================================================================
# the identified model


def model_summary(result: TuneResult) -> list[str]:
    """Lines (ASCII) saying what the identification used and found."""
    model = result.model
    if model is None:
        return []
    ident = model.identification
    used = ", ".join(f"{Path(result.bags[i]).name} ({how}, {sec:.1f} s)"
                     for i, how, sec in model.sources)
    changed = [r.name for r in ident.links if r.kind == "link" and r.status == "identified"]
    kept = [r.name for r in ident.links if r.status == "kept"]
    before = float(np.sqrt(np.mean(ident.residual_before ** 2)))
    after = float(np.sqrt(np.mean(ident.residual_after ** 2)))
    lines = [f"free motion used: {used}; {ident.samples} samples after smoothing "
             f"({ident.used_time:.1f} s), {ident.base.count} base parameters",
             f"identified links: {', '.join(changed) or 'none'}",
             f"kept from the URDF (not excited): {', '.join(kept) or 'none'}"]
    for r, tool in zip([r for r in ident.links if r.kind == "tool"], ident.layout.tools):
        body = ident.layout.bodies[tool.body]
        lines.append(f"tool {r.name!r} on {r.joint}: mass {r.value[0]:.4g} +/- "
                     f"{r.half_width[0]:.2g} kg, centre of mass ({r.value[1]:.3g}, "
                     f"{r.value[2]:.3g}, {r.value[3]:.3g}) m in that link's frame (it moves "
                     f"with {body.link}; the base parameters group a body's mass with the "
                     "links before it, so the split between tool and links follows the "
                     "priors: read the interval; the dynamics are right either way)")
    lines.append(f"held-out free-motion residual (RMS over joints, the last "
                 f"{ident.held_out_time:.1f} s of each bag's free motion, fitted without it): "
                 f"{before:.4g} with the URDF, {after:.4g} identified (N.m or N)")
    if model.rejected:
        lines.append("samples refused: " + ", ".join(f"{k} {v}" for k, v in
                                                     model.rejected.items() if v))
    return lines


def point_at_model(result: TuneResult, file_name: str, base_source: str) -> None:
    """Point ``robot_description_file`` at the identified URDF ``file_name`` (written beside
    the parameter file; the path is relative to it)."""
    result.entries["robot_description_file"] = TunedEntry(
        "robot_description_file", file_name,
        ["tuned: the robot's inertial parameters identified from free motion (the URDF beside"
         " this file; relative to it)", *model_summary(result)])
    result.settings = result.settings.replace({"robot_description_file": file_name})


def urdf_header(result: TuneResult, base_source: str) -> list[str]:
    """The comment at the top of the written URDF."""
    now = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    lines = [f"written by `{PROG}` on {now}: inertial values identified from free motion",
             f"from the URDF given (base: {base_source}); links not listed as identified, and "
             "everything but their inertial elements, are as given",
             *model_summary(result)]
    return [line.replace("--", "- -") for line in lines]   # "--" may not appear in a comment
