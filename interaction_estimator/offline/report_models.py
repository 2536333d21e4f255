"""The report's sections for the object models beyond one direction (``environment.model``).

- ``revolute``: the hinge's geometry (axis, a point on it, grasp radius, swept arc, the fit's
  residual and verdict, against the truth where the bag has it), its own rotary parameters
  (I = mass r^2 kg·m², c = damping r^2 N·m·s/rad, k = stiffness r^2 N·m/rad, tau0 = static
  force r N·m), and a figure of the radius and the swept arc over time.
- ``prismatic``: the slider's axis, travel and residual.
- ``cartesian``: the principal values and axes of the mass, damping and stiffness matrices, and
  the principal stiffness and damping drawn as ellipses with their axes: the image of the unit
  sphere under the matrix (semi-axes the principal values along the principal axes) projected
  onto the world planes xy, xz and yz (the projection of {A u : |u| <= 1} by the 2x3 P is the
  ellipse of shape P A A^T P^T).

Every number in a table comes from summary.json (``mechanism`` or ``principal``), as in the
rest of the report.
"""
from __future__ import annotations

import html
import json
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from .report_style import ESTIMATE, TRUTH, _cell, _figure, display

_NOTES = {
    "revolute": "Model: revolute (a hinge). The four parameters are the hinge's as felt at the "
                "grasp, along the arc: mass = I / r\u00b2, damping = c / r\u00b2, stiffness = "
                "k / r\u00b2, static force = \u03c4\u2080 / r; the hinge's own values are in "
                "the table Hinge parameters below.",
    "prismatic": "Model: prismatic (a slider). The four parameters are along the slider's axis,"
                 " fitted from the contact path.",
    "cartesian": "Model: cartesian. F = M x'' + D x' + K x + f_s in the world frame, M, D, K "
                 "symmetric positive semidefinite 3\u00d73 (six entries each), f_s a vector.",
}


def model_note(summary: Mapping[str, Any]) -> str:
    """A sentence naming the model, for the models other than along_direction."""
    note = _NOTES.get(summary.get("model", ""))
    return f'<p class="note" id="model">{html.escape(note)}</p>' if note else ""


def _vector_cell(summary: Mapping[str, Any], key: str) -> str:
    value: Any = summary
    for part in key.split("."):
        value = value.get(part) if isinstance(value, Mapping) else None
        if value is None:
            break
    text = ("\u2014" if value is None else
            "(" + ", ".join(f"{float(x):.4f}" for x in value) + ")")
    return (f'<td class="num" data-key="{html.escape(key)}" '
            f'data-value="{html.escape(json.dumps(value))}">{html.escape(text)}</td>')


def _optional_cell(summary: Mapping[str, Any], key: str) -> str:
    value: Any = summary
    for part in key.split("."):
        if not isinstance(value, Mapping) or part not in value:
            return f'<td class="num" data-key="{html.escape(key)}" data-value="null">\u2014</td>'
        value = value[part]
    return _cell(summary, key)


def _rows(summary: Mapping[str, Any], items: Sequence[tuple[str, str, str]]) -> str:
    out = []
    for label, key, kind in items:
        cell = _vector_cell(summary, key) if kind == "vector" else _optional_cell(summary, key)
        out.append(f'<tr><th scope="row">{html.escape(label)}</th>{cell}</tr>')
    return "".join(out)


def mechanism_section(summary: Mapping[str, Any], cols: Mapping[str, np.ndarray]) -> str:
    mech = summary["mechanism"]
    hinge = mech["kind"] == "revolute"
    items = [("Verdict", "mechanism.geometry", "text"),
             ("Converged", "mechanism.converged", "text"),
             ("Converged at (s, stamp)", "mechanism.converged_at_s", "text"),
             ("Axis (unit, world)", "mechanism.axis", "vector")]
    if hinge:
        items += [("Point on the axis (m)", "mechanism.axis_point", "vector"),
                  ("Grasp radius (m)", "mechanism.radius_m", "num"),
                  ("Radius std (m)", "mechanism.radius_std_m", "num"),
                  ("Axis std (deg)", "mechanism.axis_std_deg", "num"),
                  ("Swept arc (deg)", "mechanism.swept_arc_deg", "num")]
    items += [("Travel from the contact onset (m)", "mechanism.travel_m", "num"),
              ("Path RMS distance from the fit (m)", "mechanism.path_rms_m", "num")]
    if "truth" in mech:
        items += [("True axis", "mechanism.truth.axis", "vector"),
                  ("Axis error (deg)", "mechanism.axis_error_deg", "num")]
        if hinge:
            items += [("True radius (m)", "mechanism.truth.radius", "num"),
                      ("Radius relative error", "mechanism.radius_error", "num"),
                      ("Distance of the axis from the true axis (m)", "mechanism.axis_offset_m",
                       "num")]
    parts = [f"<section><h2>{'Hinge' if hinge else 'Slider'} geometry</h2>"
             f'<table class="pairs" id="geometry"><tbody>{_rows(summary, items)}</tbody>'
             "</table>"
             '<p class="note">Fitted to the contact point\'s path since the contact began '
             "(circle or line, least squares); the axis is oriented so that the opening motion "
             "is positive.</p>"]
    if hinge:
        head = "<tr><th>Hinge parameter</th><th>Unit</th><th>Estimate</th><th>Std</th>" \
               "<th>Truth</th></tr>"
        rows = []
        for name, label in (("inertia", "Moment of inertia"),
                            ("rotary_damping", "Rotary damping"),
                            ("rotary_stiffness", "Rotary stiffness"),
                            ("torque", "Static torque")):
            k = f"mechanism.rotary.{name}"
            rows.append(f'<tr><th scope="row">{label}</th>{_cell(summary, k + ".unit", "unit")}'
                        f"{_cell(summary, k + '.final')}{_cell(summary, k + '.std')}"
                        f"{_optional_cell(summary, 'mechanism.truth.' + name)}</tr>")
        parts.append(f'<h3>Hinge parameters</h3><table class="grid" id="rotary"><thead>{head}'
                     f"</thead><tbody>{''.join(rows)}</tbody></table>"
                     '<p class="note">From the parameters at the grasp and the grasp radius '
                     "(I = mass r\u00b2, c = damping r\u00b2, k = stiffness r\u00b2, \u03c4\u2080 ="
                     " static force r); the standard deviations take the radius as exact.</p>")
        parts.append('<figure id="fig-geometry">' + geometry_figure(cols, mech)
                     + "<figcaption>Grasp radius and the arc swept about the fitted axis, "
                     "while the geometry is fitted.</figcaption></figure>")
    parts.append("</section>")
    return "".join(parts)


def geometry_figure(cols: Mapping[str, np.ndarray], mech: Mapping[str, Any]) -> str:
    t = cols["time"]
    t0 = float(t[0]) if len(t) else 0.0
    fitted = np.isin(np.asarray(cols["geometry"], dtype=object), ("fitted", "converged"))
    chart = _figure(1, 2, 2.8)
    left, right = chart.panels[0]
    left.line(t - t0, np.where(fitted, cols["radius"], np.nan), ESTIMATE, width=1.2,
              label="estimate")
    true = (mech.get("truth") or {}).get("radius")
    if true is not None:
        left.hline(true, TRUTH, width=1.4, dash="5 3", label="truth")
    left.title = "Grasp radius (m)"
    left.legend = {"where": "upper left", "columns": 2}
    right.line(t - t0, np.degrees(np.where(fitted, cols["swept_arc"], np.nan)), ESTIMATE,
               width=1.2)
    right.title = "Swept arc (deg)"
    for ax in (left, right):
        ax.xlabel = "time since first sample (s)"
    return chart.svg()


_PLANES = (("x", "y", (0, 1)), ("x", "z", (0, 2)), ("y", "z", (1, 2)))


def _ellipse(matrix: np.ndarray, plane: tuple[int, int]) -> np.ndarray:
    """Points (2, 200) of the projection onto ``plane`` of {A u : |u| <= 1}."""
    P = np.zeros((2, 3))
    P[0, plane[0]] = P[1, plane[1]] = 1.0
    shape = P @ matrix @ matrix.T @ P.T
    w, v = np.linalg.eigh(shape)
    phi = np.linspace(0.0, 2 * math.pi, 200)
    return v @ (np.sqrt(np.maximum(w, 0.0))[:, None] * np.vstack([np.cos(phi), np.sin(phi)]))


def ellipse_figure(summary: Mapping[str, Any]) -> str:
    """Principal stiffness (row 1) and damping (row 2) as ellipses with their axes, projected
    onto the world planes; dashed: the truth, where known. Panels about square, equal scales
    on both axes of a panel."""
    chart = _figure(2, 3, 7.3, hspace=0.5)
    for row, prefix in enumerate(("stiffness", "damping")):
        entry = summary["principal"][prefix]
        for col, (a, b, plane) in enumerate(_PLANES):
            ax = chart.panels[row][col]
            sets = [(entry["values"], entry["axes"], ESTIMATE, "", "estimate")]
            if "truth_values" in entry:
                sets.append((entry["truth_values"], entry["truth_axes"], TRUTH, "5 3",
                             "truth"))
            extent = 0.0
            for values, vectors, colour, dash, label in sets:
                V = np.array(vectors, float).T     # columns: the principal axes
                A = V @ np.diag(np.maximum(values, 0.0)) @ V.T
                pts = _ellipse(A, plane)
                ax.line(pts[0], pts[1], colour, width=1.4, dash=dash, label=label)
                for k in range(3):   # the principal axes, projected
                    end = max(values[k], 0.0) * V[:, k]
                    ax.line([-end[plane[0]], end[plane[0]]], [-end[plane[1]], end[plane[1]]],
                            colour, width=0.8, dash=dash)
                extent = max(extent, float(np.abs(pts).max()) if pts.size else 0.0)
            extent = extent * 1.05 or 1.0
            ax.line([-extent, extent], [0.0, 0.0], ESTIMATE, alpha=0.0)   # equal x range
            ax.ylim = (-extent * 1.05, extent * 1.05)
            unit = "N/m" if prefix == "stiffness" else "N\u00b7s/m"
            ax.title = f"{prefix.capitalize()}, {a}{b} plane ({unit})"
            ax.xlabel = a
            ax.ylabel = b
            if row == 0 and col == 0:
                ax.legend = {"where": "upper left", "columns": 1}
    return chart.svg()


def cartesian_section(summary: Mapping[str, Any]) -> str:
    head = ("<tr><th>Matrix</th><th>Principal value</th><th>Axis (unit, world)</th>"
            "<th>Truth</th><th>True axis</th><th>Value error</th><th>Axis error (deg)</th>"
            "</tr>")
    rows = []
    for prefix, unit in (("mass", "kg"), ("damping", "N\u00b7s/m"), ("stiffness", "N/m")):
        entry = summary["principal"][prefix]
        for k in range(3):
            truth = "truth_values" in entry
            rows.append(
                f'<tr><th scope="row">{prefix} {k + 1} ({unit})</th>'
                f"{_plain(entry['values'][k])}"
                f"{_plain_vector(entry['axes'][k])}"
                f"{_plain(entry['truth_values'][k]) if truth else _plain(None)}"
                f"{_plain_vector(entry['truth_axes'][k]) if truth else _plain(None)}"
                f"{_plain(entry['value_errors'][k]) if truth else _plain(None)}"
                f"{_plain(entry['axis_errors_deg'][k]) if truth else _plain(None)}</tr>")
    return ('<section><h2>Principal values and axes</h2><table class="grid" id="principal">'
            f"<thead>{head}</thead><tbody>{''.join(rows)}</tbody></table>"
            '<p class="note">Eigenvalues (largest first) and eigenvectors of the final '
            "matrices (summary.json: principal). A direction the motion has not explored is "
            "left at its prior and flagged not excited in the parameter table.</p>"
            '<figure id="fig-ellipses">' + ellipse_figure(summary)
            + "<figcaption>Principal stiffness and damping: the image of the unit sphere under "
            "the matrix (semi-axes = principal values along the principal axes), projected "
            "onto the world planes, with the principal axes; dashed: the truth, where known."
            "</figcaption></figure></section>")


def _plain(value: Any) -> str:
    return (f'<td class="num" data-value="{html.escape(json.dumps(value))}">'
            f"{html.escape(display(value))}</td>")


def _plain_vector(value: Sequence[float]) -> str:
    text = "(" + ", ".join(f"{float(x):.3f}" for x in value) + ")"
    return f'<td class="num" data-value="{html.escape(json.dumps(list(value)))}">{text}</td>'


def model_sections(summary: Mapping[str, Any], cols: Mapping[str, np.ndarray]) -> str:
    """The sections of the model (empty for along_direction)."""
    if "mechanism" in summary:
        return mechanism_section(summary, cols)
    if "principal" in summary:
        return cartesian_section(summary)
    return ""
