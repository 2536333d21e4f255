"""The tuning report: base against tuned settings on data the tuning did not see.

``interaction-estimator tune ... --report DIR`` writes ``DIR/tuning_report.html``, one
self-contained page (inline SVG from matplotlib, inline CSS, no scripts):

* what was identified (the robot only: bias, friction, sensor noise, and its dynamics when
  asked) and where it came from;
* when a bag has contact, a held-out check: with several bags that have contact, the last of
  them is held out whole; with one such bag the last :data:`~.common.HELD_OUT_FRACTION` of its
  contact time (bags without contact, free motion only, are never held out: there is no
  contact force to check). The check settings are the same identification made without the
  held-out data (a whole bag held out: bias, friction and sensor noise from the other bags;
  part of a bag: from the free motion before the held-out part). The segmentation of the main
  run is reused, so no bag is re-segmented;
* the held-out figures for the base ("base settings") and the check ("tuned") settings: force
  RMSE against the reference and the object's final parameters against the ground truth (when
  the bag has them), with plots of force and parameters. The object filter's own settings are
  the same in both (tune writes none: the filter learns its noise level online), so the
  difference is the robot's.
"""
from __future__ import annotations

import html
import io
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ...core.environment import PARAMETER_NAMES, PARAMETER_UNITS
from ...core.settings import Settings
from .common import CONTACT, FREE_ONLY_USE, HELD_OUT_FRACTION, LEARNING
from .entries import build_entries
from .friction import identify
from .passes import Trace, run_pass
from .procedure import TuneResult, bag_settings
from .recordings import Recording
from .report_model import model_section

# our colours: base settings, tuned settings, reference, truth, page
BASE_COLOUR = "#a06a1b"
TUNED_COLOUR = "#1f5a8c"
REFERENCE_COLOUR = "#2f2f2f"
TRUTH_COLOUR = "#b23a48"
BAND_COLOUR = "#dfe6ee"
MAX_POINTS = 2000


@dataclass(frozen=True)
class HeldOut:
    """The held-out data: recording index, time from which it counts (s), description."""

    index: int
    start: float
    description: str


@dataclass
class Figures:
    """Held-out figures for one set of settings (None where there is no reference/truth).

    force_rmse N (vector error, samples after the held-out start, start-up excluded);
    parameters (4,) the object's final estimate; parameter_error (4,) estimate - truth."""

    label: str
    force_rmse: float | None
    parameters: np.ndarray
    parameter_error: np.ndarray | None
    trace: Trace


def _contact(trace: Trace) -> np.ndarray:
    return trace.phase == CONTACT


def choose_held_out(result: TuneResult, recs: Sequence[Recording]) -> HeldOut | None:
    """The last bag with contact held out whole when several have contact, otherwise the end
    of the one bag's contact; None when no bag has contact (nothing to check the force on)."""
    with_contact = [b for b in range(len(recs)) if b not in result.free_only
                    and int(_contact(result.traces[b]).sum()) > 1]
    if not with_contact:
        return None
    if len(with_contact) > 1:
        b = with_contact[-1]
        return HeldOut(b, -math.inf, f"the last bag with contact, {recs[b].name}, held out "
                                     "whole")
    b = with_contact[0]
    times = result.traces[b].time[_contact(result.traces[b])]
    t0, t1 = float(times[0]), float(times[-1])
    start = t1 - HELD_OUT_FRACTION * (t1 - t0)
    return HeldOut(b, start, f"the last {100 * HELD_OUT_FRACTION:.0f} % of the contact time of "
                             f"{recs[b].name}, from {start:.2f} s")


def check_settings(result: TuneResult, recs: Sequence[Recording], held: HeldOut) -> Settings:
    """The tuned settings identified again without the held-out data (see the module text)."""
    base = result.base
    if not math.isfinite(held.start):       # a whole bag held out
        keep = [b for b in range(len(recs)) if b != held.index]
        taps = [result.taps[b] for b in keep]
        masks = [result.masks[b] for b in keep]
        used = [recs[b] for b in keep]
    else:                                   # the free motion before the held-out part
        taps, used = list(result.taps), list(recs)
        masks = [m & (t.time < held.start) if b == held.index else m
                 for b, (t, m) in enumerate(zip(result.taps, result.masks))]
    ident = identify(taps, masks, base, result.joints)
    entries = build_entries(ident, base, result.joints, used)
    return base.replace({n: e.value for n, e in entries.items()})


def _force_rmse(trace: Trace, rec: Recording, start: float) -> float | None:
    ref = rec.reference
    if ref is None or not len(ref.time):
        return None
    keep = (trace.time >= start) & (trace.phase != LEARNING)
    if not keep.any():
        return None
    idx = np.clip(np.searchsorted(ref.time, trace.time[keep]), 0, len(ref.time) - 1)
    err = trace.force[keep] - ref.force[idx]
    return float(np.sqrt(np.mean(np.sum(err * err, axis=1))))


def evaluate(rec: Recording, settings: Settings, urdf: str, held: HeldOut,
             label: str) -> Figures:
    """Run one recording with ``settings`` and measure it over the held-out part."""
    trace = run_pass(rec, settings, urdf)
    truth = None if rec.truth is None else np.array([rec.truth[p] for p in PARAMETER_NAMES])
    params = trace.parameters[-1]
    return Figures(label, _force_rmse(trace, rec, held.start), params,
                   None if truth is None else params - truth, trace)


# --------------------------------------------------------------------------------------------
# plots


def _thin(n: int) -> slice:
    return slice(None, None, max(1, n // MAX_POINTS))


def _svg(fig: Any) -> str:
    import matplotlib.pyplot as plt
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    plt.close(fig)
    text = buf.getvalue()
    return text[text.index("<svg"):]


def _axes(rows: int, height: float):
    import matplotlib
    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    plt.rcParams.update({"svg.fonttype": "none", "svg.hashsalt": "tuning-report",
                         "font.size": 8.5, "axes.spines.top": False,
                         "axes.spines.right": False, "axes.grid": True,
                         "grid.color": "#ececec", "legend.frameon": False})
    fig, axes = plt.subplots(rows, 1, figsize=(9.0, height), sharex=True, squeeze=False)
    fig.subplots_adjust(left=0.09, right=0.98, top=0.95, bottom=0.08, hspace=0.35)
    return fig, axes[:, 0]


def _mark(ax: Any, held: HeldOut, t0: float) -> None:
    if math.isfinite(held.start):
        ax.axvline(held.start - t0, color="#777777", lw=0.8, ls=":")


def force_plot(rec: Recording, figs: Sequence[Figures], held: HeldOut) -> str:
    ref = rec.reference
    t0 = figs[0].trace.time[0]
    axis = 0
    if ref is not None and len(ref.time):
        axis = int(np.argmax(np.std(ref.force, axis=0)))
    fig, (a1, a2) = _axes(2, 4.2)
    for f, colour in zip(figs, (BASE_COLOUR, TUNED_COLOUR)):
        tr = f.trace
        s = _thin(len(tr.time))
        a1.plot(tr.time[s] - t0, tr.force[s, axis], color=colour, lw=0.9, label=f.label)
        if ref is not None and len(ref.time):
            idx = np.clip(np.searchsorted(ref.time, tr.time), 0, len(ref.time) - 1)
            err = np.linalg.norm(tr.force - ref.force[idx], axis=1)
            a2.plot(tr.time[s] - t0, err[s], color=colour, lw=0.9, label=f.label)
    if ref is not None and len(ref.time):
        s = _thin(len(ref.time))
        a1.plot(ref.time[s] - t0, ref.force[s, axis], color=REFERENCE_COLOUR, lw=0.8, ls="--",
                label="reference")
    a1.set_ylabel(f"force, world {'xyz'[axis]} (N)")
    a1.set_title("Force the robot applies", loc="left", fontsize=9.5)
    a2.set_ylabel("|error| (N)")
    a2.set_xlabel("time from the start of the bag (s)")
    for ax in (a1, a2):
        _mark(ax, held, t0)
        ax.legend(loc="upper right", ncol=3, fontsize=7.5)
    return _svg(fig)


def parameter_plot(rec: Recording, figs: Sequence[Figures], held: HeldOut) -> str:
    t0 = figs[0].trace.time[0]
    fig, axes = _axes(4, 7.0)
    for i, (ax, name, unit) in enumerate(zip(axes, PARAMETER_NAMES, PARAMETER_UNITS)):
        for f, colour in zip(figs, (BASE_COLOUR, TUNED_COLOUR)):
            tr = f.trace
            s = _thin(len(tr.time))
            contact = tr.phase == CONTACT
            y = np.where(contact, tr.parameters[:, i], np.nan)
            ax.plot(tr.time[s] - t0, y[s], color=colour, lw=0.9, label=f.label)
        if rec.truth is not None:
            ax.axhline(rec.truth[name], color=TRUTH_COLOUR, lw=0.9, ls="--", label="truth")
        _mark(ax, held, t0)
        ax.set_ylabel(f"{name.replace('_', ' ')} ({unit})")
    axes[0].set_title("Object parameters (in contact)", loc="left", fontsize=9.5)
    axes[0].legend(loc="upper right", ncol=3, fontsize=7.5)
    axes[-1].set_xlabel("time from the start of the bag (s)")
    return _svg(fig)


# --------------------------------------------------------------------------------------------
# page


def _e(x: Any) -> str:
    return html.escape(str(x))


def _num(x: Any, digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "&mdash;"
    return f"{x:.{digits}g}"


def figures_table(figs: Sequence[Figures], rec: Recording) -> str:
    rows = ["<tr><th></th>" + "".join(f"<th>{_e(f.label)}</th>" for f in figs) + "</tr>"]
    rows.append("<tr><td>force RMSE (N)</td>" + "".join(
        f"<td>{_num(f.force_rmse)}</td>" for f in figs) + "</tr>")
    for i, (p, u) in enumerate(zip(PARAMETER_NAMES, PARAMETER_UNITS)):
        cells = []
        for f in figs:
            err = "" if f.parameter_error is None else f" ({_num(f.parameter_error[i], 3)})"
            cells.append(f"<td>{_num(f.parameters[i])}{err}</td>")
        truth = "" if rec.truth is None else f", truth {_num(rec.truth[p])}"
        rows.append(f"<tr><td>{_e(p)} ({_e(u)}){truth}; (error)</td>{''.join(cells)}</tr>")
    return "<table>" + "".join(rows) + "</table>"


def entries_table(result: TuneResult) -> str:
    rows = ["<tr><th>setting</th><th>written value</th><th>where it came from</th></tr>"]
    for name, e in result.entries.items():
        value = e.value if not isinstance(e.value, list) else ", ".join(
            _num(v) if isinstance(v, float) else str(v) for v in e.value)
        rows.append(f"<tr><td><code>{_e(name)}</code></td><td>{_e(value)}</td>"
                    f"<td><pre>{_e(chr(10).join(e.comment))}</pre></td></tr>")
    return "<table>" + "".join(rows) + "</table>"


def joints_table(result: TuneResult) -> str:
    head = ("<tr><th>joint</th><th>bias (last bag)</th><th>viscous</th><th>Coulomb</th>"
            "<th>residual RMS</th><th>noise explains</th><th>effort noise</th>"
            "<th>velocity noise</th><th>friction</th></tr>")
    rows = [head]
    for j in result.identification.joints:
        def pm(v: float, ci: float) -> str:
            return f"{_num(v)} &plusmn; {_num(ci, 2)}" if math.isfinite(ci) else f"{_num(v)}"
        rows.append(
            f"<tr><td>{_e(j.name)}</td><td>{pm(j.bias[-1], j.bias_ci[-1])}</td>"
            f"<td>{pm(j.viscous, j.viscous_ci)}</td><td>{pm(j.coulomb, j.coulomb_ci)}</td>"
            f"<td>{_num(j.residual_std, 3)}</td><td>{_num(j.explained_std, 3)}</td>"
            f"<td>{_num(j.effort_noise, 3)}</td><td>{_num(j.velocity_noise, 3)}</td>"
            f"<td>{'identified' if j.friction_identified else _e(j.friction_note)}</td></tr>")
    return "<table>" + "".join(rows) + "</table>"


def segments_table(result: TuneResult) -> str:
    rows = ["<tr><th>bag</th><th>kind</th><th>from (s)</th><th>to (s)</th><th>length (s)"
            "</th></tr>"]
    for s in sorted(result.segments, key=lambda s: (s.bag, s.start)):
        rows.append(f"<tr><td>{_e(Path(result.bags[s.bag]).name)}</td><td>{s.kind}</td>"
                    f"<td>{s.start:.3f}</td><td>{s.end:.3f}</td><td>{s.duration:.2f}</td></tr>")
    for b in result.free_only:
        rows.append(f"<tr><td>{_e(Path(result.bags[b]).name)}</td><td colspan='4'>no contact: "
                    f"{_e(FREE_ONLY_USE)}</td></tr>")
    return "<table>" + "".join(rows) + "</table>"


_CSS = """
body{font-family:Georgia,'DejaVu Serif',serif;margin:2em auto;max-width:62em;color:#202428;
background:#fbfaf7;line-height:1.35}
h1{font-size:1.5em;border-bottom:3px double #1f5a8c;padding-bottom:.2em}
h2{font-size:1.15em;margin-top:1.6em;color:#1f5a8c}
table{border-collapse:collapse;margin:.6em 0;font-size:.86em}
td,th{border:1px solid #d6d2c8;padding:.25em .5em;vertical-align:top;text-align:left}
th{background:#efece4}
pre{margin:0;font-size:.92em;white-space:pre-wrap}
.note{background:#f3efe2;border-left:4px solid #a06a1b;padding:.4em .8em}
.warn{color:#8a2b1f}
"""


def build_tuning_report(result: TuneResult, recs: Sequence[Recording], urdf: str,
                        params: Mapping[str, Any]) -> str:
    """The report page (HTML text): what was identified, the held-out check, plots, tables."""
    held = choose_held_out(result, recs)
    body = [
        "<h1>Commissioning report: the robot's bias, friction and noise from recorded data</h1>",
        f"<p>Bags: {_e(', '.join(result.bags))}. Pipeline passes: {result.passes}. Free motion "
        f"used: {result.identification.free_time:.2f} s (contact found: "
        f"{result.contact_time:.2f} s, not used for the tuning).</p>",
        "<p class='note'>Only the robot is identified; no setting of the object filter is "
        "written (it learns its noise level online from its own residuals), so nothing about "
        "the objects in these bags is carried to other objects.</p>",
    ]
    if held is None:
        body += ["<h2>On held-out data</h2>",
                 "<p>No bag has contact: there is no contact force to check the tuned settings "
                 "on. Record a task with contact and pass it too for that check.</p>"]
    else:
        rec = recs[held.index]
        check = check_settings(result, recs, held)
        default = bag_settings(result.base, rec.recommended, params, {})
        tuned = bag_settings(result.base, rec.recommended, params,
                             {n: check[n] for n in result.entries})
        tuned_urdf = result.model.urdf if result.model is not None else urdf
        tuned_label = ("tuned settings, identified URDF" if result.model is not None
                       else "tuned settings")
        figs = [evaluate(rec, default, urdf, held, "base settings"),
                evaluate(rec, tuned, tuned_urdf, held, tuned_label)]
        body += [
            f"<p class='note'>Held out: {_e(held.description)}. The tuned settings below were "
            "identified again without it (the segmentation of the main run is reused); the "
            "written file uses all the data.</p>",
            "<h2>On the held-out data</h2>", figures_table(figs, rec),
            force_plot(rec, figs, held), parameter_plot(rec, figs, held)]
    warn = "".join(f"<li class='warn'>{_e(w)}</li>" for w in result.warnings)
    body += [
        model_section(result),
        "<h2>What was written</h2>", entries_table(result),
        "<h2>Per joint</h2>", joints_table(result),
        "<h2>Segments found</h2>", segments_table(result),
    ]
    if warn:
        body += ["<h2>Warnings</h2>", f"<ul>{warn}</ul>"]
    return ("<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
            "<title>Commissioning report</title>"
            f"<style>{_CSS}</style></head><body>{''.join(body)}</body></html>\n")
