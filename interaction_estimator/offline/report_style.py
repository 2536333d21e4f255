"""The report's style: palette, number display, table cells and the chart set-up (shared by
:mod:`.report` and :mod:`.report_models`)."""
from __future__ import annotations

import html
import json
import math
from collections.abc import Mapping
from typing import Any

from .svgplot import Chart

# Our palette (hex): ink and paper, estimate, its band, the reference, the truth.
INK = "#1d2731"
PAPER = "#f6f4ef"
PANEL = "#ffffff"
ESTIMATE = "#0f6e7a"
REFERENCE = "#d9822b"
TRUTH = "#a4243b"
BOUNDS = "#7b6aa8"
STATE_COLOURS = {"learning_bias": "#8e7cc3", "free_motion": "#9aa5b1",
                 "in_contact": "#4f86c6", "converged": "#2e7d4f", "contact_lost": "#c2543c"}
LEVEL_COLOURS = {"OK": "#7cc16a", "WARN": "#e8b931", "ERROR": "#b5302a", "STALE": "#5d6873"}
STATE_LABELS = {"learning_bias": "learning bias", "free_motion": "free motion",
                "in_contact": "in contact", "converged": "converged",
                "contact_lost": "contact lost"}
PARAMETER_LABELS = {"mass": "Mass", "damping": "Damping", "stiffness": "Stiffness",
                    "static_force": "Static force"}
_MAX_POINTS = 1500  # per line, after thinning


# --------------------------------------------------------------------------------------------
# number formatting (display only; data-value keeps the exact number)


def display(value: Any) -> str:
    """How a summary value is shown: 4 significant digits, yes/no, or a dash for None."""
    if value is None:
        return "\u2014"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            return "\u2014"
        if value != 0 and (abs(value) >= 1e5 or abs(value) < 1e-3):
            return f"{value:.3e}"
        return f"{value:.4g}"
    return str(value)


def _cell(summary: Mapping[str, Any], key: str, css: str = "num") -> str:
    value: Any = summary
    for part in key.split("."):
        value = value[part]
    raw = json.dumps(value)
    return (f'<td class="{css}" data-key="{html.escape(key)}" '
            f'data-value="{html.escape(raw)}">{html.escape(display(value))}</td>')


def parameter_label(name: str) -> str:
    """A parameter's label: ``mass`` -> Mass, ``stiffness_xy`` -> Stiffness xy."""
    if name in PARAMETER_LABELS:
        return PARAMETER_LABELS[name]
    base, _, axes = name.rpartition("_")
    if base in PARAMETER_LABELS:
        return f"{PARAMETER_LABELS[base]} {axes}"
    return name.replace("_", " ").capitalize()


def _figure(rows: int, cols: int, height: float, bottom: float = 0.5, hspace: float = 0.45
            ) -> Chart:
    """A chart of rows x cols panels, 9.6 in wide and ``height`` in high (fixed margins in
    inches), in the report's colours."""
    return Chart(rows, cols, 9.6, height, left_in=0.75, right_in=0.2, bottom_in=bottom,
                 top_in=0.35, hspace=hspace, wspace=0.18, ink=INK, grid="#e3e0d8",
                 spine="#8a949e", background=PANEL)
