"""The tuning report's section on the robot's identified dynamics: per link what changed and by
how much (95 % intervals), what was kept and why, and the free-motion residual before and after
on held-out data, per joint."""
from __future__ import annotations

import html
import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from .procedure import TuneResult

QUANTITIES = (("mass", "kg"), ("centre of mass x", "m"), ("centre of mass y", "m"),
              ("centre of mass z", "m"), ("inertia xx", "kg·m²"), ("inertia xy", "kg·m²"),
              ("inertia yy", "kg·m²"), ("inertia xz", "kg·m²"), ("inertia yz", "kg·m²"),
              ("inertia zz", "kg·m²"))


def _e(x: Any) -> str:
    return html.escape(str(x))


def _n(x: float) -> str:
    return f"{x:.4g}" if math.isfinite(x) else "&ndash;"


def model_section(result: TuneResult) -> str:
    """HTML of the section ('' when the model was not identified)."""
    if result.model is None:
        return ""
    ident = result.model.identification
    used = "; ".join(f"{_e(Path(result.bags[i]).name)}: {_e(how)}, {sec:.1f} s"
                     for i, how, sec in result.model.sources)
    counts = ident.data.counts
    parts = [
        "<h2>Robot model identified from free motion</h2>",
        f"<p>Free motion used: {used}. After smoothing (Savitzky-Golay window "
        f"{ident.data.window:.3f} s, every {ident.data.thinning}th sample kept): "
        f"{ident.samples} samples, {ident.used_time:.1f} s; {ident.base.count} base parameters."
        f" Joint accelerations from positions for {counts.get('from_positions', 0)} and from "
        f"velocities for {counts.get('from_velocities', 0)} joint-runs (whichever the measured "
        "noise favours). Samples refused: "
        + (", ".join(f"{_e(k)} {v}" for k, v in result.model.rejected.items() if v) or "none")
        + ".</p>",
        "<p class='note'>Intervals: 95 %, from the posterior covariance of the linearized "
        "problem, the data's information divided by the residual's long-run variance ratio "
        f"(kappa = {ident.final.kappa:.3g}). 'determined': how many of a link's ten "
        "parameters' worth the data pinned down; a link below 0.5 is kept exactly as in the "
        "URDF. A tool moves with the link it is mounted on, and the base parameters group a "
        "body's mass (and its centre of mass along its joint's axis) with the links before it "
        "(Gautier and Khalil 1990): what the data tell is the sum, and the split between tool "
        "and links follows the priors (the tool's is wide). Its interval says how well it "
        "stands apart; the dynamics, and so the force estimate, are right either way.</p>",
        "<table><tr><th>link</th><th>status</th><th>determined</th><th>quantity</th>"
        "<th>URDF</th><th>identified</th><th>&plusmn; 95 %</th><th>change</th></tr>",
    ]
    for link in ident.links:
        label = f"{_e(link.name)}" + (f" (tool on {_e(link.joint)})" if link.kind == "tool"
                                      else "")
        rows = range(10) if link.status == "identified" else range(1)
        for k in rows:
            name, unit = QUANTITIES[k]
            before, after, half = link.urdf[k], link.value[k], link.half_width[k]
            change = after - before if math.isfinite(before) else math.nan
            first = k == rows[0]
            parts.append(
                "<tr>" + (f"<td rowspan='{len(rows)}'>{label}</td><td rowspan='{len(rows)}'>"
                          f"{_e(link.status)}</td><td rowspan='{len(rows)}'>"
                          f"{link.determined:.2f}</td>" if first else "")
                + f"<td>{_e(name)} ({_e(unit)})</td><td>{_n(before)}</td><td>{_n(after)}</td>"
                f"<td>{_n(half)}</td><td>{_n(change)}</td></tr>")
    parts.append("</table>")
    parts.append(
        "<h3>Free-motion residual on held-out data</h3>"
        f"<p>The last {ident.held_out_time:.1f} s of each bag's free motion, held out: the "
        "model was fitted without it. 'URDF': the URDF's inertial values with friction and "
        "bias fitted to the rest; 'identified': the model identified from the rest. RMS of "
        "the measured efforts minus the model.</p>"
        "<table><tr><th>joint</th><th>URDF (N·m or N)</th><th>identified</th>"
        "<th>residual level of the fit</th>"
        + ("<th>viscous friction</th><th>Coulomb friction</th>" if ident.viscous is not None
           else "") + "</tr>")
    for j, name in enumerate(ident.joints):
        extra = ""
        if ident.viscous is not None:
            extra = f"<td>{_n(ident.viscous[j])}</td><td>{_n(ident.coulomb[j])}</td>"
        parts.append(f"<tr><td>{_e(name)}</td><td>{_n(ident.residual_before[j])}</td>"
                     f"<td>{_n(ident.residual_after[j])}</td>"
                     f"<td>{_n(ident.final.sigma[j])}</td>{extra}</tr>")
    before = float(np.sqrt(np.mean(ident.residual_before ** 2)))
    after = float(np.sqrt(np.mean(ident.residual_after ** 2)))
    parts.append(f"<tr><th>all joints</th><th>{_n(before)}</th><th>{_n(after)}</th>"
                 "<th></th></tr></table>")
    if ident.notes:
        parts.append("<ul>" + "".join(f"<li>{_e(n)}</li>" for n in ident.notes) + "</ul>")
    return "".join(parts)
