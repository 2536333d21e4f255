"""report.html in a real browser: headless Chromium (Debian package ``chromium``) parses the page
without console errors and renders its plots (the screenshot shows the report's own colours).

Skipped, saying why, only where the chromium binary is absent (``apt-get install chromium``).
"""
from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from interaction_estimator.offline import report
from interaction_estimator.offline.replay import ReplayRequest, replay
from interaction_estimator.sim.recording import write_simulated_bag
from interaction_estimator.sim.simulator import simulate

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(
    CHROMIUM is None, reason="chromium is not installed here (Debian: apt-get install chromium);"
                             " the report's browser rendering test needs it")

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run",
         "--hide-scrollbars", "--enable-logging=stderr", "--v=0"]
# console messages, uncaught script errors and failed loads as Chromium logs them on stderr
_PAGE_ERROR = re.compile(r"CONSOLE\(|Uncaught|Failed to load resource|net::ERR_")


def _chromium(tmp: Path, *args: str) -> subprocess.CompletedProcess:
    profile = tmp / f"profile-{len(list(tmp.glob('profile-*')))}"  # a fresh profile each run
    return subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", *args],
                          capture_output=True, text=True, timeout=120)


def _page_errors(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if _PAGE_ERROR.search(line)]


@pytest.fixture(scope="module")
def report_page(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("browser")
    write_simulated_bag(d / "bag", simulate("toolbox", duration=6.0, seed=3))
    replay(ReplayRequest(d / "bag", d / "out", progress=False))
    return d / "out" / "report.html"


def _hex(colour: str) -> np.ndarray:
    return np.array([int(colour[i:i + 2], 16) for i in (1, 3, 5)], float)


def _pixels_near(img: np.ndarray, colour: str, tol: float = 14.0) -> int:
    return int(np.count_nonzero(np.all(np.abs(img - _hex(colour)) <= tol, axis=-1)))


def test_error_detection_catches_a_broken_page(tmp_path):
    # negative control: a page with a script error and a missing image must be flagged,
    # so that an empty error list below means something
    bad = tmp_path / "bad.html"
    bad.write_text('<html><body><img src="missing.png"><script>no_such_function();</script>'
                   "</body></html>")
    r = _chromium(tmp_path, "--dump-dom", bad.as_uri())
    assert _page_errors(r.stderr), r.stderr[-2000:]


def test_report_opens_without_errors(report_page, tmp_path):
    # reference: Chromium's own HTML/SVG parser (the DOM it serializes back)
    r = _chromium(tmp_path, "--dump-dom", report_page.as_uri())
    assert r.returncode == 0, r.stderr[-2000:]
    assert _page_errors(r.stderr) == []
    dom = r.stdout
    assert dom.count("<svg") == 4
    for figure in ("fig-force", "fig-parameters", "fig-health", "fig-nis"):
        assert f'id="{figure}"' in dom
    assert 'id="parameters"' in dom and dom.count('data-key="parameters.') == 4 * 8


def test_report_screenshot_shows_the_plots(report_page, tmp_path):
    shot = tmp_path / "report.png"
    r = _chromium(tmp_path, "--window-size=1100,3600", f"--screenshot={shot}",
                  report_page.as_uri())
    assert r.returncode == 0 and shot.exists(), r.stderr[-2000:]
    assert _page_errors(r.stderr) == []
    import matplotlib.image as mpimg
    img = mpimg.imread(shot)[..., :3] * 255.0  # reference: the PNG as Chromium rendered it
    assert img.shape[0] == 3600 and img.shape[1] == 1100
    assert img.std() > 20  # not blank
    # the report's own colours, drawn only by the plots (lines, bands, bars)
    counts = {name: _pixels_near(img, colour) for name, colour in (
        ("estimate", report.ESTIMATE), ("reference", report.REFERENCE),
        ("truth", report.TRUTH), ("in_contact", report.STATE_COLOURS["in_contact"]),
        ("learning_bias", report.STATE_COLOURS["learning_bias"]))}
    assert counts["estimate"] > 2000, counts
    assert all(n > 200 for n in counts.values()), counts
