"""Per-update cost of the environment filter, in µs. Prints figures; asserts nothing.

Run: .venv/bin/python test/benchmarks/bench_environment.py
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from interaction_estimator.core.environment import EnvironmentFilter  # noqa: E402
from interaction_estimator.core.settings import Settings  # noqa: E402

N = 20000
REPEATS = 3


def _data(kind: str, rng: np.random.Generator):
    """Invented drawer motion at 1 kHz: x (m), x' (m/s), x'' (m/s^2), force f (N)."""
    t = np.arange(N) * 1e-3
    w1, w2 = 2 * np.pi * 0.6, 2 * np.pi * 1.9
    x = 0.04 * np.sin(w1 * t) + 0.015 * np.sin(w2 * t)
    v = 0.04 * w1 * np.cos(w1 * t) + 0.015 * w2 * np.cos(w2 * t)
    a = -0.04 * w1 ** 2 * np.sin(w1 * t) - 0.015 * w2 ** 2 * np.sin(w2 * t)
    theta = np.array([3.0, 20.0, 400.0, 5.0])
    if kind == "constant velocity (mass not excited)":
        v = np.full_like(t, 0.2)
        x = 0.2 * t
        a = rng.normal(0, 0.005, N)
    if kind == "negative damping (projection every step)":
        theta = np.array([3.0, -4.0, 400.0, 5.0])
    H = np.column_stack([a, v, x, np.ones(N)])
    return t, H, H @ theta + rng.normal(0, 0.5, N)


def _time(settings: Settings, t, H, f) -> float:
    best = float("inf")
    rows = list(H)  # the pipeline hands one (4,) array per sample
    for _ in range(REPEATS):
        flt = EnvironmentFilter(settings)
        update = flt.update
        start = time.perf_counter()
        for k in range(N):
            update(t[k], rows[k], f[k])
        best = min(best, (time.perf_counter() - start) / N)
    return best * 1e6


def main() -> None:
    rng = np.random.default_rng(0)
    cases = [
        ("default (0.1 s blocks, noise learned)", {}, "excited"),
        ("every row a block", {"filter.update_interval": 0.0}, "excited"),
        ("noise fixed", {"filter.learn_noise": False}, "excited"),
        ("memory 10 s", {"filter.memory": 10.0}, "excited"),
        ("default", {}, "constant velocity (mass not excited)"),
        ("default", {}, "negative damping (projection every step)"),
    ]
    print(f"environment filter, {N} updates, best of {REPEATS}")
    for label, values, kind in cases:
        t, H, f = _data(kind, rng)
        us = _time(Settings(values), t, H, f)
        print(f"  {label:40s} {kind:42s} {us:6.1f} µs/update")


if __name__ == "__main__":
    main()
