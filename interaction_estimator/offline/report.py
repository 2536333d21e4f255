"""report.html: one self-contained page per replay (inline SVG plots, inline CSS, no scripts).

The page shows, from top to bottom: a masthead (bag, scenario, source), a verdict strip, the
parameter table (estimate, standard deviation, truth, error, convergence), the force and run
tables, then four figures: estimated against reference force per world axis; each parameter
with its +-2 standard-deviation band and the truth; the health timeline (state and level);
the normalized innovation squared (NIS) average with its 95 % bounds.

Every number in the tables comes from the summary dictionary that is also written as
summary.json: each cell carries ``data-key`` (its dotted path in the summary) and ``data-value``
(the exact JSON value), and shows the value rounded for reading. Plots are drawn as SVG by
:mod:`.svgplot` (why not matplotlib: measured there); long runs are thinned (per span of
samples the first one, the minimum and the maximum are kept) so that the file stays small, and
the figure's caption then says so.
"""
from __future__ import annotations

import datetime as _dt
import html
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..core.environment import PARAMETER_NAMES
from ..core.health import LEVEL_NAMES, STATES
from ..io.estimates import ForceReference, match_reference
from .report_models import model_note, model_sections
from .report_style import (  # noqa: F401  (display: the report's number format, re-exported)
    _MAX_POINTS,
    BOUNDS,
    ESTIMATE,
    INK,
    LEVEL_COLOURS,
    PANEL,
    PAPER,
    PARAMETER_LABELS,
    REFERENCE,
    STATE_COLOURS,
    STATE_LABELS,
    TRUTH,
    _cell,
    _figure,
    display,
    parameter_label,
)

_DOT = " \u00b7 "
SMOOTHING_WINDOW = 0.05  # s, trailing mean drawn over the per-sample force (display only)

# --------------------------------------------------------------------------------------------
# tables


def parameter_table(summary: Mapping[str, Any]) -> str:
    head = ("<tr><th>Parameter</th><th>Unit</th><th>Estimate</th><th>Std (1&sigma;)</th>"
            "<th>Truth</th><th>Error</th><th>Relative error</th><th>Converged</th>"
            "<th>Time to convergence (s)</th></tr>")
    rows = []
    for p in summary["parameters"]:
        k = f"parameters.{p}"
        rows.append(
            f"<tr><th scope=\"row\">{parameter_label(p)}</th>"
            + _cell(summary, f"{k}.unit", "unit")
            + "".join(_cell(summary, f"{k}.{f}") for f in
                      ("final", "std", "truth", "error", "relative_error", "converged",
                       "time_to_convergence_s"))
            + "</tr>")
    return (f'<table class="grid" id="parameters"><thead>{head}</thead><tbody>'
            + "".join(rows) + "</tbody></table>")


def _pairs_table(summary: Mapping[str, Any], table_id: str,
                 items: Sequence[tuple[str, str]]) -> str:
    rows = "".join(f"<tr><th scope=\"row\">{html.escape(label)}</th>{_cell(summary, key)}</tr>"
                   for label, key in items)
    return f'<table class="pairs" id="{table_id}"><tbody>{rows}</tbody></table>'


def force_table(summary: Mapping[str, Any]) -> str:
    if summary["force"].get("reference") is None:
        return '<p class="note" id="force-none">No reference wrench in this bag: name one ' \
               "with --reference-topic to get force errors.</p>"
    return _pairs_table(summary, "force", (
        ("Reference", "force.reference"), ("Matched samples", "force.matched_samples"),
        ("RMSE after bias learning (N)", "force.rmse_N"),
        ("RMSE in contact (N)", "force.rmse_contact_N"),
        ("Largest error in contact (N)", "force.max_error_contact_N")))


def run_table(summary: Mapping[str, Any]) -> str:
    items = [("Joint states read", "run.samples_read"),
             ("Samples estimated", "run.samples_estimated"),
             ("Samples rejected", "run.samples_rejected"),
             ("Duration of the stamps (s)", "run.duration_s"),
             ("First contact at (s)", "first_contact_s"),
             ("All parameters converged after (s)", "time_to_convergence_s"),
             ("Wall time (s)", "run.wall_time_s"),
             ("Throughput (samples/s)", "run.throughput_samples_per_s"),
             ("Times real time", "run.real_time_factor")]
    items += [(f"Rejected: {reason.replace('_', ' ')}", f"rejects.{reason}")
              for reason, n in summary["rejects"].items() if n]
    return _pairs_table(summary, "run", items)


# --------------------------------------------------------------------------------------------
# plots


def _thin(t: np.ndarray, *ys: np.ndarray, points: int = _MAX_POINTS
          ) -> tuple[np.ndarray, ...]:
    """Keep at most about ``points`` samples: per bucket the first sample plus, for the first
    series, its minimum and maximum (so short spikes stay visible; NaN ignored, buckets
    without a finite value keep their first sample only)."""
    n = len(t)
    if n <= points:
        return (t, *ys)
    starts = np.unique(np.linspace(0, n, points // 3 + 1).astype(int)[:-1])
    keep = [starts, [n - 1]]
    if ys:
        y = ys[0]
        sizes = np.diff(np.append(starts, n))
        bucket = np.repeat(np.arange(len(starts)), sizes)
        finite = np.logical_or.reduceat(np.isfinite(y), starts)
        for extreme in (np.fmin.reduceat(y, starts), np.fmax.reduceat(y, starts)):
            at = np.flatnonzero(y == extreme[bucket])    # first occurrence per bucket
            first = at[np.concatenate(([True], bucket[at[1:]] != bucket[at[:-1]]))]
            keep.append(first[finite[bucket[first]]])
    idx = np.unique(np.concatenate(keep))
    return (t[idx], *(y[idx] for y in ys))


def thinning_note(n: int, tables: bool = True, points: int = _MAX_POINTS) -> str:
    """The sentence a figure's caption gets when :func:`_thin` drew its lines from only some of
    their ``n`` samples (empty when it drew them all); ``tables``: add that the tables do not."""
    if n <= points:
        return ""
    return (f" Lines thinned for drawing: of the {n:,} samples, each of {points // 3} equal "
            "spans keeps its first sample and its smallest and largest value (about "
            f"{points:,} points per line)." + (" The tables use every sample." if tables else ""))


def force_figure(cols: Mapping[str, np.ndarray], ref: ForceReference | None) -> str:
    t = cols["time"]
    t0 = float(t[0]) if len(t) else 0.0
    chart = _figure(3, 1, 5.4)
    dt = float(np.median(np.diff(t))) if len(t) > 1 else 1.0
    width = max(1, int(round(SMOOTHING_WINDOW / dt))) if dt > 0 else 1
    for i, axis in enumerate("xyz"):
        ax = chart.panels[i][0]
        raw = cols[f"force_{axis}"]
        et, ey = _thin(t - t0, raw)
        ax.line(et, ey, ESTIMATE, width=0.6, alpha=0.3, label="estimate, each sample")
        if width > 1 and len(raw) > width:
            mean = np.convolve(raw, np.ones(width) / width, mode="valid")
            mt, my = _thin(t[width - 1:] - t0, mean)
            ax.line(mt, my, ESTIMATE, width=1.2,
                    label=f"estimate, {SMOOTHING_WINDOW * 1e3:.0f} ms trailing mean")
        if ref is not None:
            rt, ry = _thin(ref.time - t0, ref.force[:, i])
            ax.line(rt, ry, REFERENCE, width=1.5, label="reference")
        ax.ylabel = f"force {axis} (N)"
        if i == 0:
            ax.title = "Force the robot applies, world frame"
            ax.legend = {"where": "upper left", "columns": 3}
    chart.panels[-1][0].xlabel = "time since first sample (s)"
    return chart.svg()


def parameter_figure(cols: Mapping[str, np.ndarray], summary: Mapping[str, Any]) -> str:
    t = cols["time"]
    t0 = float(t[0]) if len(t) else 0.0
    shown = [(p, summary["parameters"][p]["unit"]) for p in summary["parameters"]]
    if len(shown) > len(PARAMETER_NAMES):   # the cartesian model: the diagonals and f_s
        shown = [(p, u) for p, u in shown if p.rpartition("_")[2] in ("xx", "yy", "zz")
                 or p.startswith("static_force")]
    ncols = 2 if len(shown) <= 4 else 3
    nrows = (len(shown) + ncols - 1) // ncols
    chart = _figure(nrows, ncols, 2.8 * nrows)
    for k, (p, unit) in enumerate(shown):
        ax = chart.panels[k // ncols][k % ncols]
        value, std = cols[p], cols[f"{p}_std"]
        tt, v, s = _thin(t - t0, value, std)
        ax.band(tt, v - 2 * s, v + 2 * s, ESTIMATE, 0.18, label="\u00b12 std")
        ax.line(tt, v, ESTIMATE, width=1.2, label="estimate")
        truth = summary["parameters"][p]["truth"]
        if truth is not None:
            ax.hline(truth, TRUTH, width=1.4, dash="5 3", label="truth")
        finite = v[np.isfinite(v)]
        if len(finite):  # keep the prior's wide band from flattening the estimate
            lo = min(float(np.min(finite)), truth if truth is not None else np.inf)
            hi = max(float(np.max(finite)), truth if truth is not None else -np.inf)
            pad = 0.25 * (hi - lo) + 0.05 * max(abs(hi), abs(lo), 1e-3)
            ax.ylim = (lo - pad, hi + pad)
        ax.title = f"{parameter_label(p)} ({unit})"
        if k == 0:
            ax.legend = {"where": "upper left", "columns": 3}
        if k >= len(shown) - ncols:
            ax.xlabel = "time since first sample (s)"
    return chart.svg()


def _runs(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(start (k,), end (k,)) of each run of equal values of ``codes`` (n,): end exclusive."""
    n = len(codes)
    change = np.flatnonzero(codes[1:] != codes[:-1]) + 1
    return np.concatenate(([0], change)), np.concatenate((change, [n]))


def _level_names(level: np.ndarray) -> np.ndarray:
    """Level names (n,) from the level column (n,): OK, WARN, ERROR, STALE, or ? where the
    value is not a level."""
    code = np.trunc(np.where(np.isfinite(level), level, -1.0))
    code = np.where((code >= 0) & (code < len(LEVEL_NAMES)), code, len(LEVEL_NAMES))
    return np.array([*(LEVEL_NAMES[k] for k in range(len(LEVEL_NAMES))), "?"],
                    dtype=object)[code.astype(int)]


def health_figure(cols: Mapping[str, np.ndarray]) -> str:
    t = cols["time"]
    t0 = float(t[0]) if len(t) else 0.0
    chart = _figure(1, 1, 2.1, bottom=0.95)
    ax = chart.panels[0][0]
    end = np.append(t[1:], t[-1]) - t0 if len(t) else t
    states = np.asarray(cols["state"], dtype=object)
    seen_states, seen_levels = [], []
    for words, colours, seen, y in ((states, STATE_COLOURS, seen_states, 1.1),
                                    (_level_names(cols["level"]), LEVEL_COLOURS, seen_levels,
                                     0.1)):
        if not len(t):
            continue
        a, b = _runs(words)
        left = t[a] - t0
        runs = words[a].tolist()
        # one bar per run, in time order (a later bar is drawn over an earlier one where
        # both fall on the same pixel)
        ax.bars(left, end[b - 1] - left, y, 0.8, [colours.get(w, "#cccccc") for w in runs])
        seen += list(dict.fromkeys(runs))
    ax.ylim = (0.0, 2.0)
    ax.ytick_labels = ([0.5, 1.5], ["level", "state"])
    ax.grid = False
    ax.xlabel = "time since first sample (s)"
    ax.title = "Health timeline"
    ax.legend_items = [("patch", STATE_COLOURS.get(s, "#cccccc"), STATE_LABELS.get(s, s))
                       for s in STATES if s in seen_states]
    ax.legend_items += [("patch", LEVEL_COLOURS[lev], lev) for lev in LEVEL_NAMES.values()
                        if lev in seen_levels]
    ax.legend = {"where": "below", "columns": min(len(ax.legend_items), 9) or 1}
    return chart.svg()


def _nis_used(cols: Mapping[str, np.ndarray]) -> np.ndarray:
    """Samples (n,) bool with a filter consistency figure to plot."""
    avg, hi = cols["nis_average"], cols["nis_upper"]
    return np.isfinite(avg) & np.isfinite(hi) & (avg > 0)


def nis_figure(cols: Mapping[str, np.ndarray]) -> str:
    t = cols["time"]
    t0 = float(t[0]) if len(t) else 0.0
    chart = _figure(1, 1, 2.6)
    ax = chart.panels[0][0]
    avg, lo, hi = cols["nis_average"], cols["nis_lower"], cols["nis_upper"]
    used = _nis_used(cols)
    if used.any():
        tt, a, lw, up = _thin(t[used] - t0, avg[used], lo[used], hi[used])
        ax.band(tt, lw, up, BOUNDS, 0.2, label="95 % bounds")
        ax.line(tt, a, ESTIMATE, width=1.2, label="NIS average")
        ax.hline(1.0, INK, width=0.6, dash="1 2")
        ax.log_y = True
        ax.legend = {"where": "upper right", "columns": 2}
    else:
        ax.note("no filter updates (no contact)", INK)
    ax.title = "Normalized innovation squared (consistency of the filter)"
    ax.xlabel = "time since first sample (s)"
    return chart.svg()


# --------------------------------------------------------------------------------------------
# the page

_CSS = f"""
:root {{ --ink: {INK}; --paper: {PAPER}; --panel: {PANEL}; --accent: {ESTIMATE}; }}
* {{ box-sizing: border-box; }}
body {{ margin: 0; background: var(--paper); color: var(--ink);
  font: 15px/1.45 "DejaVu Sans", "Liberation Sans", sans-serif; }}
.masthead {{ background: var(--ink); color: #f6f4ef; padding: 18px 32px 14px;
  border-bottom: 5px solid var(--accent); }}
.masthead h1 {{ margin: 0; font-size: 22px; letter-spacing: 0.02em; }}
.masthead p {{ margin: 4px 0 0; opacity: 0.8; font-size: 13px; }}
main {{ max-width: 1040px; margin: 0 auto; padding: 18px 24px 40px; }}
.verdict {{ display: flex; gap: 12px; flex-wrap: wrap; margin: 6px 0 18px; }}
.chip {{ padding: 6px 12px; border-radius: 3px; background: var(--panel);
  border-left: 6px solid var(--chip); font-weight: bold; }}
section {{ background: var(--panel); margin: 0 0 18px; padding: 14px 18px;
  border: 1px solid #e3e0d8; }}
h2 {{ font-size: 16px; margin: 0 0 10px; color: var(--accent); text-transform: uppercase;
  letter-spacing: 0.06em; }}
table {{ border-collapse: collapse; font-size: 14px; }}
table.grid {{ width: 100%; }}
table.grid th, table.grid td {{ padding: 5px 8px; border-bottom: 1px solid #ece9e2; }}
table.grid thead th {{ text-align: right; font-size: 12px; color: #56606a;
  border-bottom: 2px solid var(--ink); }}
table.grid thead th:first-child, table.grid tbody th {{ text-align: left; }}
table.pairs th {{ text-align: left; font-weight: normal; padding: 3px 18px 3px 0;
  color: #56606a; }}
td.num {{ text-align: right; font-variant-numeric: tabular-nums; }}
td.unit {{ text-align: right; color: #56606a; }}
.two {{ display: grid; grid-template-columns: 1fr 1fr; gap: 18px; }}
.note {{ color: #56606a; font-size: 13px; }}
figure {{ margin: 0; }}
figure svg {{ width: 100%; height: auto; display: block; }}
figcaption {{ font-size: 12px; color: #56606a; margin-top: 4px; }}
footer {{ font-size: 12px; color: #56606a; }}
"""


def _chip(text: str, colour: str) -> str:
    return f'<span class="chip" style="--chip: {colour}">{html.escape(text)}</span>'


def build_report(summary: Mapping[str, Any], cols: Mapping[str, np.ndarray],
                 reference: ForceReference | None, title: str | None = None) -> str:
    """The report page as HTML text."""
    src = summary.get("source", {})
    bag_name = Path(str(src.get("bag", "run"))).name
    heading = title or f"Interaction estimate \u2014 {bag_name}"
    sub = [f"bag {src.get('bag', '?')}"]
    if src.get("scenario"):
        sub.append(f"scenario {src['scenario']}")
    sub.append(f"{src.get('tool', 'replay')}, {_dt.date.today().isoformat()}")
    conv = summary.get("time_to_convergence_s")
    count = len(summary["parameters"])
    every = "all four parameters" if count == 4 else f"all {count} parameters"
    verdict = _chip(f"{every} converged" + (f" after {conv:.2f} s of contact"
                                                       if conv is not None else "")
                    if summary.get("converged") else "not all parameters converged at the end",
                    STATE_COLOURS["converged"] if summary.get("converged")
                    else STATE_COLOURS["contact_lost"])
    final_state = summary.get("final_state") or "?"
    verdict += _chip(f"final state: {STATE_LABELS.get(final_state, final_state)}",
                     STATE_COLOURS.get(final_state, "#cccccc"))
    level = summary.get("final_level") or "?"
    verdict += _chip(f"final level: {level}", LEVEL_COLOURS.get(level, "#cccccc"))
    changed = src.get("settings_changed") or {}
    settings_text = ", ".join(f"{k} = {v}" for k, v in sorted(changed.items())) or "defaults"
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html.escape(heading)}</title><style>{_CSS}</style></head><body>",
        f'<header class="masthead"><h1>{html.escape(heading)}</h1>'
        f"<p>{html.escape(_DOT.join(sub))}</p></header><main>",
        f'<div class="verdict">{verdict}</div>',
        '<section><h2>Object parameters</h2>', model_note(summary), parameter_table(summary),
        '<p class="note">Estimate and standard deviation at the last sample; time to '
        "convergence counts from the first contact. Error = estimate \u2212 truth.</p>"
        "</section>",
        model_sections(summary, cols),
        '<section class="two"><div><h2>Force</h2>', force_table(summary),
        "</div><div><h2>Run</h2>", run_table(summary), "</div></section>",
        '<section><h2>Force, estimate and reference</h2><figure id="fig-force">',
        force_figure(cols, reference),
        "<figcaption>Force the robot applies to the object, world frame, N: each sample "
        f"(light), its {SMOOTHING_WINDOW * 1e3:.0f} ms trailing mean (for reading only; the "
        "tables use every sample) and the reference."
        + thinning_note(len(cols["time"]) if reference is None
                        else max(len(cols["time"]), len(reference.time)), tables=False)
        + "</figcaption>"
        "</figure></section>",
        '<section><h2>Parameters</h2><figure id="fig-parameters">',
        parameter_figure(cols, summary),
        "<figcaption>Estimate with its \u00b12 standard-deviation band; dashed: the "
        "truth, where known." + thinning_note(len(cols["time"]))
        + "</figcaption></figure></section>",
        '<section><h2>Health</h2><figure id="fig-health">', health_figure(cols),
        "<figcaption>Upper band: the health state word; lower band: the level "
        "(OK, WARN, ERROR, STALE).</figcaption></figure></section>",
        '<section><h2>Filter consistency</h2><figure id="fig-nis">', nis_figure(cols),
        "<figcaption>Average NIS over the filter's window against its two-sided 95 % "
        "chi-square interval; inside the band the noise model fits."
        + thinning_note(int(np.count_nonzero(_nis_used(cols)))) + "</figcaption>"
        "</figure></section>",
        f"<footer><p>Settings changed from the defaults: {html.escape(settings_text)}.</p>"
        f"<p>URDF: {html.escape(str(src.get('urdf', '?')))}. Efforts: "
        f"{html.escape(str(src.get('efforts', '?')))}.</p>"
        "<p>The estimates are not a safety function.</p></footer>",
        "</main></body></html>",
    ]
    return "\n".join(parts) + "\n"


def write_report(path: Path, summary: Mapping[str, Any], cols: Mapping[str, np.ndarray],
                 reference: ForceReference | None, title: str | None = None) -> None:
    Path(path).write_text(build_report(summary, cols, reference, title), encoding="utf-8")


__all__ = ["build_report", "write_report", "display", "match_reference"]
