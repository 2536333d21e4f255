"""Quick start: what a command imports, --no-report, --out with missing folders, and the report's
SVG charts.

References: Python's own import log (``python -X importtime``), the operating system's view of
the files written, byte comparison with a full replay, and the standard library's XML parser
for the charts.
"""
from __future__ import annotations

import subprocess
import sys
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from interaction_estimator import cli
from interaction_estimator.offline import svgplot
from interaction_estimator.sim.recording import write_simulated_bag
from interaction_estimator.sim.simulator import simulate

HEAVY = ("scipy", "matplotlib", "pinocchio", "numba", "rosbags", "rclpy",
         "interaction_estimator.core.pipeline", "interaction_estimator.sim.simulator",
         "interaction_estimator.offline.tune")


def imported_modules(args: list[str]) -> set[str]:
    """Modules a real process of the command imports (reference: python -X importtime)."""
    r = subprocess.run([sys.executable, "-X", "importtime", "-m", "interaction_estimator.cli",
                        *args], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr[-2000:]
    return {line.split("|")[-1].strip() for line in r.stderr.splitlines()
            if line.startswith("import time:") and "|" in line}


def test_help_imports_nothing_heavy():
    mods = imported_modules(["--help"])
    assert "interaction_estimator" in mods   # the package (cli itself runs as __main__)
    heavy = sorted(m for m in mods if m.split(".")[0] in HEAVY or m in HEAVY)
    assert heavy == []
    # a subcommand's help loads what its arguments need, and no more
    mods = imported_modules(["replay", "--help"])
    assert not any(m.startswith(("matplotlib", "interaction_estimator.offline.tune",
                                 "interaction_estimator.sim")) for m in mods)


@pytest.fixture(scope="module")
def bag(tmp_path_factory):
    d = tmp_path_factory.mktemp("quick")
    write_simulated_bag(d / "drawer", simulate("drawer", duration=3.5, seed=1))
    return d / "drawer"


def test_no_report_and_missing_output_folders(bag, tmp_path, capsys):
    full, bare = tmp_path / "full", tmp_path / "a" / "b" / "c"
    assert cli.main(["replay", str(bag), "--out", str(full)]) == 0
    assert cli.main(["replay", str(bag), "--out", str(bare), "--no-report"]) == 0
    out = capsys.readouterr().out
    assert "report.html" not in out.splitlines()[-1]
    assert sorted(p.name for p in bare.iterdir()) == ["estimates.csv", "summary.json"]
    assert sorted(p.name for p in full.iterdir()) == ["estimates.csv", "report.html",
                                                       "summary.json"]
    assert (bare / "estimates.csv").read_bytes() == (full / "estimates.csv").read_bytes()
    # a failed replay leaves none of the folders it made
    code = cli.main(["replay", str(tmp_path / "no_bag"), "--out", str(tmp_path / "x" / "y")])
    assert code == 2 and not (tmp_path / "x").exists()
    # a file in the way is named
    (tmp_path / "file").write_text("")
    code = cli.main(["replay", str(bag), "--out", str(tmp_path / "file" / "o")])
    assert code == 2 and "is a file" in capsys.readouterr().err


def test_chart_is_valid_svg_and_maps_data_linearly():
    chart = svgplot.Chart(1, 1, 6.0, 3.0, 0.75, 0.2, 0.5, 0.35, 0.4, 0.2, "#111111",
                          "#dddddd", "#888888", "#ffffff")
    x = np.linspace(0.0, 10.0, 50)
    y = 3.0 * x - 4.0
    y[20] = np.nan                                  # a gap splits the line in two
    p = chart.panels[0][0]
    p.line(x, y, "#0f6e7a", label="estimate")
    p.title, p.xlabel = "T", "time (s)"
    p.legend = {"where": "upper left"}
    root = ET.fromstring(chart.svg())               # reference: the XML parser
    ns = {"s": "http://www.w3.org/2000/svg"}
    lines = root.findall(".//s:polyline", ns)
    assert len(lines) == 2
    pts = np.array([[float(v) for v in pair.split(",")]
                    for pl in lines for pair in pl.get("points").split()])
    data = np.stack([np.delete(x, 20), np.delete(y, 20)], 1)
    # reference: numpy least squares; the drawing is an affine map of the data per axis
    for k in (0, 1):
        A = np.stack([data[:, k], np.ones(len(data))], 1)
        coef, res, *_ = np.linalg.lstsq(A, pts[:, k], rcond=None)
        assert np.max(np.abs(A @ coef - pts[:, k])) < 0.01
    texts = [t.text for t in root.iter("{http://www.w3.org/2000/svg}text")]
    assert "T" in texts and "time (s)" in texts and "estimate" in texts


@pytest.mark.parametrize("lo,hi", [(0.0, 62.0), (-1.3, 0.7), (1e-4, 3e-4), (-500.0, 12000.0)])
def test_ticks_are_round_and_cover_the_range(lo, hi):
    ticks = svgplot.nice_ticks(lo, hi)
    assert 3 <= len(ticks) <= 11
    steps = np.diff(ticks)
    assert np.allclose(steps, steps[0])
    mantissa = steps[0] / 10 ** np.floor(np.log10(steps[0]))
    assert any(abs(mantissa - m) < 1e-9 for m in (1.0, 2.0, 2.5, 5.0))
    assert ticks[0] >= lo - 1e-12 and ticks[-1] <= hi + 1e-12
    assert ticks[0] - steps[0] < lo and ticks[-1] + steps[0] > hi
