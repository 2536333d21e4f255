"""One run from seed to scores, and many of them in parallel processes."""
from __future__ import annotations

import os
import tempfile
import time
import traceback
from pathlib import Path

from .methods import NaiveRLS, run_estimator
from .robots import robots
from .scenarios import make_spec, measure, parameter_file, simulate
from .scoring import score_episodes


def evaluate_run(seed: int, cache_dir: str | Path | None = None, short: bool = False) -> dict:
    """Simulate (or load) the run of ``seed``, write its parameter file, feed the estimator,
    run the baselines, score every episode. Returns a JSON-able dict: the spec's summary,
    ``episodes`` (scoring.score_episodes), timings (s) and ``error`` (text) when it failed."""
    from ...io.parameter_file import load_parameter_file
    out: dict = {"seed": int(seed)}
    try:
        t0 = time.perf_counter()
        spec = make_spec(seed, short=short)
        out["spec"] = spec.summary()
        entry = robots()[spec.robot]
        run = simulate(spec, None if cache_dir is None else Path(cache_dir))
        t1 = time.perf_counter()
        measured = measure(run, spec)
        with tempfile.TemporaryDirectory(prefix="validation_") as tmp:
            path = Path(tmp) / f"run_{seed:05d}.yaml"
            path.write_text(parameter_file(spec, entry), encoding="utf-8")
            settings = load_parameter_file(path)
        trace = run_estimator(measured, run.urdf, settings)
        t2 = time.perf_counter()
        rls = NaiveRLS().run(trace.rows_index, trace.rows_time, trace.rows_h, trace.rows_f,
                             len(measured.time))
        out["episodes"] = score_episodes(run, measured, spec, trace, rls)
        out["rejected"] = int(trace.rejected)
        out["samples"] = int(len(measured.time))
        out["time_simulation"] = t1 - t0
        out["time_estimator"] = t2 - t1
        out["time_scoring"] = time.perf_counter() - t2
        out["notes"] = run.notes
    except Exception as exc:   # a failed run is reported in the table, never dropped
        out["error"] = f"{type(exc).__name__}: {exc}"
        out["traceback"] = traceback.format_exc()
    return out


def _worker(args):
    seed, cache_dir, short = args
    return evaluate_run(seed, cache_dir, short)


def evaluate_runs(seeds, cache_dir=None, jobs: int = 1, progress=None,
                  short: bool = False) -> list[dict]:
    """``evaluate_run`` for every seed, on ``jobs`` processes (spawned: MuJoCo, Numba and
    Pinocchio are not fork-safe to share); results in seed order. ``progress(done, total,
    result)`` is called as runs finish."""
    seeds = [int(s) for s in seeds]
    args = [(s, None if cache_dir is None else str(cache_dir), short) for s in seeds]
    results: dict[int, dict] = {}
    if jobs <= 1:
        for a in args:
            r = _worker(a)
            results[r["seed"]] = r
            if progress:
                progress(len(results), len(seeds), r)
    else:
        import multiprocessing as mp
        ctx = mp.get_context("spawn")
        # longest first would balance better, but a run's length is only known once drawn
        with ctx.Pool(processes=jobs, maxtasksperchild=50) as pool:
            for r in pool.imap_unordered(_worker, args, chunksize=1):
                results[r["seed"]] = r
                if progress:
                    progress(len(results), len(seeds), r)
    return [results[s] for s in seeds]


def default_jobs() -> int:
    return max(1, min(2, os.cpu_count() or 1))
