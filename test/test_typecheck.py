"""The estimation core passes a static type check (mypy, configured in setup.cfg)."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_core_type_checks():
    # mypy (PyPI, pinned in requirements-test.txt): no errors in interaction_estimator/core
    result = subprocess.run([sys.executable, "-m", "mypy", "interaction_estimator/core"],
                            cwd=ROOT, capture_output=True, text=True, timeout=600)
    assert result.returncode == 0, result.stdout + result.stderr
