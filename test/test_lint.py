"""Lint as part of the tests: ruff over the package and the tests, with the project's own
configuration (ruff.toml: pycodestyle E/W, pyflakes F, isort I, bugbear B, pyupgrade UP; lines of
100 characters). Reference: ruff itself (PyPI ``ruff``, pinned in requirements-test.txt)."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]


def test_ruff_finds_nothing():
    r = subprocess.run([sys.executable, "-m", "ruff", "check", "--no-cache",
                        "--output-format", "concise",
                        "interaction_estimator", "test", "launch", "setup.py"],
                       cwd=REPO, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, f"ruff findings:\n{r.stdout}{r.stderr}"
