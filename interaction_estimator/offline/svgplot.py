"""A small SVG chart writer for the replay report: panels of lines, bands, horizontal lines and
bars, linear or logarithmic y axes, ticks, grid, titles and legends, as inline SVG text.

Why not matplotlib (which drew these plots before): measured on a 62 s, 1 kHz replay of the
7-joint arm (test/benchmarks/bench_startup.py, this machine), importing matplotlib's figure and
SVG backend took 0.5-0.6 s and drawing the report's four figures 0.6 s more (the log-scale
figure alone 0.14 s, its tick labels set by mathtext): about a third of the whole replay
process. These charts need none of its generality; writing them here costs a few
milliseconds. Units: points (1/72 in), as matplotlib's SVG output, so the page looks the same.
"""
from __future__ import annotations

import html
import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

PT_PER_IN = 72.0
_CLIP_IDS = itertools.count()   # clip-path ids unique within a page of several charts


def _fmt(x: float) -> str:
    return f"{x:.2f}".rstrip("0").rstrip(".")


def nice_ticks(lo: float, hi: float, target: int = 6) -> list[float]:
    """Round tick values covering [lo, hi]: steps of 1, 2, 2.5 or 5 times a power of ten
    (the usual "nice numbers" rule; common practice, no source)."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo]
    raw = (hi - lo) / max(target - 1, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1.0, 2.0, 2.5, 5.0, 10.0) if m * power >= raw)
    first = math.ceil(lo / step - 1e-9) * step
    ticks, k = [], 0
    while first + k * step <= hi + 1e-9 * step:
        ticks.append(round(first + k * step, 12))
        k += 1
    return ticks


def tick_label(x: float) -> str:
    if x == 0:
        return "0"
    if abs(x) >= 1e5 or abs(x) < 1e-3:
        return f"{x:.0e}".replace("e+0", "e").replace("e-0", "e-")
    return f"{x:.6g}"


def log_ticks(lo: float, hi: float) -> list[float]:
    """Decades within [lo, hi] (lo > 0); with fewer than two, 2x and 5x each decade too."""
    a, b = math.floor(math.log10(lo)), math.ceil(math.log10(hi))
    decades = [10.0 ** k for k in range(a, b + 1) if lo <= 10.0 ** k <= hi]
    if len(decades) >= 2:
        return decades
    return [m * 10.0 ** k for k in range(a, b + 1) for m in (1.0, 2.0, 5.0)
            if lo <= m * 10.0 ** k <= hi]


@dataclass
class _Series:
    kind: str                    # line, band, hline, bars, text
    x: np.ndarray | None = None
    y: np.ndarray | None = None
    y2: np.ndarray | None = None
    colour: str = "#000000"
    width: float = 1.0
    alpha: float = 1.0
    dash: str = ""
    label: str | None = None
    extra: dict = field(default_factory=dict)


class Panel:
    """One plot area. Add series, then :class:`Chart` draws it."""

    def __init__(self):
        self.series: list[_Series] = []
        self.title = self.xlabel = self.ylabel = ""
        self.log_y = False
        self.ylim: tuple[float, float] | None = None
        self.ytick_labels: tuple[Sequence[float], Sequence[str]] | None = None
        self.grid = True
        self.legend: dict | None = None   # {"where": "upper left" | "below", "columns": n}
        self.legend_items: list[tuple[str, str, str]] = []  # (kind, colour, label) extras

    def line(self, x, y, colour: str, width: float = 1.0, alpha: float = 1.0,
             dash: str = "", label: str | None = None) -> None:
        self.series.append(_Series("line", np.asarray(x, float), np.asarray(y, float),
                                   colour=colour, width=width, alpha=alpha, dash=dash,
                                   label=label))

    def band(self, x, lower, upper, colour: str, alpha: float, label: str | None = None):
        self.series.append(_Series("band", np.asarray(x, float), np.asarray(lower, float),
                                   np.asarray(upper, float), colour=colour, alpha=alpha,
                                   label=label))

    def hline(self, y: float, colour: str, width: float = 1.0, dash: str = "",
              label: str | None = None) -> None:
        self.series.append(_Series("hline", y=np.array([float(y)]), colour=colour,
                                   width=width, dash=dash, label=label))

    def bars(self, left, widths, y: float, height: float, colours: Sequence[str]) -> None:
        """Horizontal bars from ``left`` (k,) with ``widths`` (k,), at y..y+height."""
        self.series.append(_Series("bars", np.asarray(left, float), np.asarray(widths, float),
                                   extra={"y": y, "h": height, "colours": list(colours)}))

    def note(self, text: str, colour: str) -> None:
        """A text in the middle of the panel (no data to draw)."""
        self.series.append(_Series("text", colour=colour, label=None, extra={"text": text}))

    # --- ranges ------------------------------------------------------------------------------
    def _x_range(self) -> tuple[float, float]:
        xs = []
        for s in self.series:
            if s.kind in ("line", "band") and len(s.x):
                xs += [np.nanmin(s.x), np.nanmax(s.x)]
            elif s.kind == "bars" and len(s.x):
                xs += [float(np.min(s.x)), float(np.max(s.x + s.y))]
        xs = [v for v in xs if math.isfinite(v)]
        if not xs:
            return 0.0, 1.0
        lo, hi = min(xs), max(xs)
        pad = 0.05 * (hi - lo) if hi > lo else 0.5
        return lo - pad, hi + pad

    def _y_range(self) -> tuple[float, float]:
        if self.ylim is not None:
            return self.ylim
        ys: list[float] = []
        for s in self.series:
            arrays = ([s.y] if s.kind in ("line", "hline") else [s.y, s.y2]
                      if s.kind == "band" else [])
            for a in arrays:
                a = a[np.isfinite(a)]
                if self.log_y:
                    a = a[a > 0]
                if len(a):
                    ys += [float(a.min()), float(a.max())]
        if not ys:
            return (0.1, 10.0) if self.log_y else (0.0, 1.0)
        lo, hi = min(ys), max(ys)
        if self.log_y:
            llo, lhi = math.log10(lo), math.log10(hi)
            pad = 0.05 * (lhi - llo) if lhi > llo else 0.5
            return 10 ** (llo - pad), 10 ** (lhi + pad)
        pad = 0.05 * (hi - lo) if hi > lo else max(abs(hi) * 0.05, 0.5)
        return lo - pad, hi + pad


class Chart:
    """A grid of panels drawn into one SVG (``width_in`` x ``height_in`` inches; margins in
    inches, as matplotlib's ``subplots_adjust`` takes fractions of them)."""

    def __init__(self, rows: int, cols: int, width_in: float, height_in: float,
                 left_in: float, right_in: float, bottom_in: float, top_in: float,
                 hspace: float, wspace: float, ink: str, grid: str, spine: str,
                 background: str, font_size: float = 9.0):
        self.rows, self.cols = rows, cols
        self.w, self.h = width_in * PT_PER_IN, height_in * PT_PER_IN
        self.margins = tuple(v * PT_PER_IN for v in (left_in, right_in, bottom_in, top_in))
        self.hspace, self.wspace = hspace, wspace
        self.ink, self.grid_colour, self.spine, self.background = ink, grid, spine, background
        self.font = font_size
        self.panels = [[Panel() for _ in range(cols)] for _ in range(rows)]

    def _boxes(self):
        left, right, bottom, top = self.margins
        avail_w, avail_h = self.w - left - right, self.h - bottom - top
        pw = avail_w / (self.cols + self.wspace * (self.cols - 1))
        ph = avail_h / (self.rows + self.hspace * (self.rows - 1))
        for r in range(self.rows):
            for c in range(self.cols):
                x0 = left + c * pw * (1 + self.wspace)
                y0 = top + r * ph * (1 + self.hspace)
                yield self.panels[r][c], x0, y0, pw, ph

    def svg(self) -> str:
        out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {_fmt(self.w)} '
               f'{_fmt(self.h)}" width="{_fmt(self.w)}pt" height="{_fmt(self.h)}pt" '
               f'font-family="DejaVu Sans, Liberation Sans, sans-serif" '
               f'font-size="{self.font}">',
               f'<rect width="100%" height="100%" fill="{self.background}"/>']
        for panel, x0, y0, pw, ph in self._boxes():
            out.append(self._panel(panel, x0, y0, pw, ph))
        out.append("</svg>")
        return "\n".join(out)

    # --- one panel ---------------------------------------------------------------------------
    def _panel(self, p: Panel, x0: float, y0: float, pw: float, ph: float) -> str:
        xlo, xhi = p._x_range()
        ylo, yhi = p._y_range()
        if p.log_y:
            ylo, yhi = math.log10(max(ylo, 1e-300)), math.log10(max(yhi, 1e-300))
        sx = pw / (xhi - xlo) if xhi > xlo else 1.0
        sy = ph / (yhi - ylo) if yhi > ylo else 1.0

        def X(x):
            return x0 + (np.asarray(x, float) - xlo) * sx

        def Y(y):
            y = np.asarray(y, float)
            if p.log_y:
                with np.errstate(divide="ignore", invalid="ignore"):
                    y = np.where(y > 0, np.log10(np.where(y > 0, y, 1.0)), np.nan)
            return y0 + ph - (y - ylo) * sy

        clip = f"plot-clip-{next(_CLIP_IDS)}"
        parts = [f'<g><clipPath id="{clip}"><rect x="{_fmt(x0)}" y="{_fmt(y0)}" '
                 f'width="{_fmt(pw)}" height="{_fmt(ph)}"/></clipPath>']
        # ticks and grid
        xt = [t for t in nice_ticks(xlo, xhi) if xlo <= t <= xhi]
        if p.ytick_labels is not None:
            yt, ylabels = list(p.ytick_labels[0]), list(p.ytick_labels[1])
        elif p.log_y:
            yt = log_ticks(10 ** ylo, 10 ** yhi)
            ylabels = [tick_label(v) for v in yt]
        else:
            yt = [t for t in nice_ticks(ylo, yhi, 5) if ylo <= t <= yhi]
            ylabels = [tick_label(v) for v in yt]
        f = self.font
        for t in xt:
            px = float(X(t))
            if p.grid:
                parts.append(f'<line x1="{_fmt(px)}" y1="{_fmt(y0)}" x2="{_fmt(px)}" '
                             f'y2="{_fmt(y0 + ph)}" stroke="{self.grid_colour}" '
                             'stroke-width="0.6"/>')
            parts.append(f'<text x="{_fmt(px)}" y="{_fmt(y0 + ph + f + 3)}" '
                         f'text-anchor="middle" fill="{self.ink}">{tick_label(t)}</text>')
        for t, label in zip(yt, ylabels):
            py = float(Y(t))
            if p.grid:
                parts.append(f'<line x1="{_fmt(x0)}" y1="{_fmt(py)}" x2="{_fmt(x0 + pw)}" '
                             f'y2="{_fmt(py)}" stroke="{self.grid_colour}" '
                             'stroke-width="0.6"/>')
            parts.append(f'<text x="{_fmt(x0 - 4)}" y="{_fmt(py + f * 0.35)}" '
                         f'text-anchor="end" fill="{self.ink}">{html.escape(label)}</text>')
        # data
        body = []
        for s in p.series:
            if s.kind == "line":
                body += [_polyline(X(s.x[a:b]), Y(s.y[a:b]), s)
                         for a, b in _finite_runs(s.x, Y(s.y))]
            elif s.kind == "band":
                yl, yu = Y(s.y), Y(s.y2)
                for a, b in _finite_runs(s.x, yl + yu):
                    xs = X(s.x[a:b])
                    pts = np.concatenate([np.stack([xs, yl[a:b]], 1),
                                          np.stack([xs[::-1], yu[a:b][::-1]], 1)])
                    body.append(f'<polygon points="{_points(pts)}" fill="{s.colour}" '
                                f'fill-opacity="{s.alpha:g}" stroke="none"/>')
            elif s.kind == "hline":
                py = float(Y(s.y[0]))
                if math.isfinite(py):
                    body.append(f'<line x1="{_fmt(x0)}" y1="{_fmt(py)}" x2="{_fmt(x0 + pw)}" '
                                f'y2="{_fmt(py)}" stroke="{s.colour}" '
                                f'stroke-width="{s.width:g}"{_dash(s.dash)}/>')
            elif s.kind == "bars":
                top = float(Y(s.extra["y"] + s.extra["h"]))
                height = float(Y(s.extra["y"])) - top
                lefts, widths = X(s.x), s.y * sx
                for lx, wx, colour in zip(lefts.tolist(), widths.tolist(), s.extra["colours"]):
                    body.append(f'<rect x="{_fmt(lx)}" y="{_fmt(top)}" '
                                f'width="{_fmt(max(wx, 0.3))}" height="{_fmt(height)}" '
                                f'fill="{colour}"/>')
            elif s.kind == "text":
                body.append(f'<text x="{_fmt(x0 + pw / 2)}" y="{_fmt(y0 + ph / 2)}" '
                            f'text-anchor="middle" fill="{s.colour}">'
                            f'{html.escape(s.extra["text"])}</text>')
        parts.append(f'<g clip-path="url(#{clip})">' + "".join(body) + "</g>")
        # spines: left and bottom
        parts.append(f'<path d="M{_fmt(x0)} {_fmt(y0)}V{_fmt(y0 + ph)}H{_fmt(x0 + pw)}" '
                     f'fill="none" stroke="{self.spine}" stroke-width="0.8"/>')
        if p.title:
            parts.append(f'<text x="{_fmt(x0)}" y="{_fmt(y0 - 6)}" font-size="{f + 1:g}" '
                         f'font-weight="bold" fill="{self.ink}">{html.escape(p.title)}</text>')
        if p.xlabel:
            parts.append(f'<text x="{_fmt(x0 + pw / 2)}" y="{_fmt(y0 + ph + 2 * f + 8)}" '
                         f'text-anchor="middle" fill="{self.ink}">'
                         f'{html.escape(p.xlabel)}</text>')
        if p.ylabel:
            cx, cy = x0 - 40, y0 + ph / 2
            parts.append(f'<text x="{_fmt(cx)}" y="{_fmt(cy)}" text-anchor="middle" '
                         f'transform="rotate(-90 {_fmt(cx)} {_fmt(cy)})" fill="{self.ink}">'
                         f'{html.escape(p.ylabel)}</text>')
        if p.legend is not None:
            parts.append(self._legend(p, x0, y0, pw, ph))
        parts.append("</g>")
        return "".join(parts)

    def _legend(self, p: Panel, x0: float, y0: float, pw: float, ph: float) -> str:
        items = [(s.kind, s.colour, s.label, s.alpha, s.dash) for s in p.series if s.label]
        items += [(kind, colour, label, 1.0, "") for kind, colour, label in p.legend_items]
        if not items:
            return ""
        f = self.font
        columns = max(1, p.legend.get("columns", len(items)))
        widths = [28 + 0.6 * f * len(label) for _, _, label, _, _ in items]
        col_w = max(widths)
        where = p.legend.get("where", "upper left")
        if where == "below":
            total = min(columns, len(items)) * col_w
            lx, ly = x0 + (pw - total) / 2, y0 + ph + 2 * f + 20
        elif where == "upper right":
            lx, ly = x0 + pw - min(columns, len(items)) * col_w, y0 + f
        else:
            lx, ly = x0 + 6, y0 + f
        out = []
        for i, (kind, colour, label, alpha, dash) in enumerate(items):
            cx = lx + (i % columns) * col_w
            cy = ly + (i // columns) * (f + 4)
            if kind in ("band", "bars", "patch"):
                out.append(f'<rect x="{_fmt(cx)}" y="{_fmt(cy - f * 0.7)}" width="18" '
                           f'height="{_fmt(f * 0.8)}" fill="{colour}" '
                           f'fill-opacity="{alpha:g}"/>')
            else:
                out.append(f'<line x1="{_fmt(cx)}" y1="{_fmt(cy - f * 0.3)}" '
                           f'x2="{_fmt(cx + 18)}" y2="{_fmt(cy - f * 0.3)}" stroke="{colour}" '
                           f'stroke-opacity="{alpha:g}" stroke-width="1.5"{_dash(dash)}/>')
            out.append(f'<text x="{_fmt(cx + 23)}" y="{_fmt(cy)}" fill="{self.ink}">'
                       f'{html.escape(label)}</text>')
        return "".join(out)


def _dash(dash: str) -> str:
    return f' stroke-dasharray="{dash}"' if dash else ""


def _points(xy: np.ndarray) -> str:
    return " ".join(f"{x:.2f},{y:.2f}" for x, y in xy.tolist())


def _polyline(xs: np.ndarray, ys: np.ndarray, s: _Series) -> str:
    return (f'<polyline points="{_points(np.stack([xs, ys], 1))}" fill="none" '
            f'stroke="{s.colour}" stroke-opacity="{s.alpha:g}" stroke-width="{s.width:g}" '
            f'stroke-linejoin="round"{_dash(s.dash)}/>')


def _finite_runs(x: np.ndarray, y: np.ndarray) -> list[tuple[int, int]]:
    """(start, end) of each run of samples where x and y are finite (lines break at gaps)."""
    ok = np.isfinite(x) & np.isfinite(y)
    if not ok.any():
        return []
    edges = np.flatnonzero(np.diff(np.concatenate(([0], ok.astype(np.int8), [0]))))
    return [(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2]) if b - a >= 1]
