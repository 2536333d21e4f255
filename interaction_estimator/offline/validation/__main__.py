"""``python -m interaction_estimator.offline.validation``: the Monte-Carlo validation table.

Examples::

    python -m interaction_estimator.offline.validation                 # 200 runs, 2 processes
    python -m interaction_estimator.offline.validation --runs 20 --jobs 1
    python -m interaction_estimator.offline.validation --seeds 3,17,40-49 --episodes
    python -m interaction_estimator.offline.validation --robots panda,ur5 --runs 50
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path


def parse_seeds(text: str) -> list[int]:
    """'3,17,40-49' -> [3, 17, 40, ..., 49]."""
    seeds: list[int] = []
    for part in text.split(","):
        part = part.strip()
        if not part:
            continue
        try:
            if "-" in part:
                a, b = part.split("-", 1)
                lo, hi = int(a), int(b)
                if hi < lo:
                    raise ValueError
                seeds.extend(range(lo, hi + 1))
            else:
                seeds.append(int(part))
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"seed list {text!r}: {part!r} is neither a number nor a range like 40-49"
            ) from None
    if not seeds or min(seeds) < 0:
        raise argparse.ArgumentTypeError(f"seed list {text!r}: expected non-negative seeds")
    return seeds


def main(argv=None) -> int:
    from .robots import ROBOT_NAMES
    from .runner import default_jobs, evaluate_runs
    from .scenarios import default_cache_dir
    from .table import build_table, render

    ap = argparse.ArgumentParser(
        prog="python -m interaction_estimator.offline.validation",
        description="Monte-Carlo validation of the object estimates "
        "(issue 17): seeded MuJoCo runs, scored against "
        "the truth, a batch least-squares fit and a naive "
        "recursive least squares.",
    )
    ap.add_argument(
        "--runs",
        type=int,
        default=200,
        help="number of runs, seeds first-seed .. first-seed + runs - 1 (200)",
    )
    ap.add_argument("--first-seed", type=int, default=0, help="first seed (0)")
    ap.add_argument(
        "--seeds", type=parse_seeds, default=None, help="explicit seeds instead, e.g. 3,17,40-49"
    )
    ap.add_argument(
        "--robots",
        default="",
        help=f"keep only runs on these robots (comma-separated: {', '.join(ROBOT_NAMES)})",
    )
    ap.add_argument("--jobs", type=int, default=default_jobs(), help="worker processes (2)")
    ap.add_argument(
        "--cache",
        type=Path,
        default=None,
        help=f"simulation cache folder (default {default_cache_dir()})",
    )
    ap.add_argument(
        "--no-cache", action="store_true", help="simulate every run afresh, store nothing"
    )
    ap.add_argument(
        "--short",
        action="store_true",
        help="the short variant of each run (contacts 0.45 x as long; the test suite's subset)",
    )
    ap.add_argument("--episodes", action="store_true", help="also print one line per episode")
    ap.add_argument("--json", type=Path, default=None, help="write every run's scores to this file")
    args = ap.parse_args(argv)
    if args.runs < 1:
        ap.error(f"--runs {args.runs}: expected at least 1")
    if args.jobs < 1:
        ap.error(f"--jobs {args.jobs}: expected at least 1")
    seeds = args.seeds or list(range(args.first_seed, args.first_seed + args.runs))
    if args.robots:
        wanted = [r.strip() for r in args.robots.split(",") if r.strip()]
        bad = [r for r in wanted if r not in ROBOT_NAMES]
        if bad:
            ap.error(f"--robots: unknown {bad}; expected some of {list(ROBOT_NAMES)}")
        # a seed's robot is its index modulo the catalogue (scenarios.make_spec)
        seeds = [s for s in seeds if ROBOT_NAMES[s % len(ROBOT_NAMES)] in wanted]
    cache = None if args.no_cache else (args.cache or default_cache_dir())
    t0 = time.perf_counter()

    def progress(done, total, result):
        if sys.stderr.isatty() or done % 10 == 0 or done == total:
            print(
                f"\r{done}/{total} runs, {time.perf_counter() - t0:.0f} s",
                end="",
                file=sys.stderr,
                flush=True,
            )

    results = evaluate_runs(seeds, cache, jobs=args.jobs, progress=progress, short=args.short)
    wall = time.perf_counter() - t0
    print(file=sys.stderr)
    lines, figures = build_table(results)
    print(
        f"Monte-Carlo validation: {len(seeds)} runs (seeds {seeds[0]}..{seeds[-1]}), "
        f"{args.jobs} processes, {wall:.0f} s wall"
    )
    print(render(lines))
    print(LEGEND)
    sim = sum(r.get("time_simulation", 0.0) for r in results)
    est = sum(r.get("time_estimator", 0.0) for r in results)
    print(f"process time: simulation/cache {sim:.0f} s, estimator {est:.0f} s")
    if args.episodes:
        print()
        print(episode_lines(results))
    if args.json:
        args.json.write_text(
            json.dumps({"figures": figures, "runs": results}, indent=1, default=str),
            encoding="utf-8",
        )
    return 0


LEGEND = """\
Episode: a contact with one unchanging object (a run with a change has two). Error: |estimate -
truth| / max(|truth|, s) at the episode's end, s = the value whose contribution is 5 % of the RMS
force along u. Excited: the motion determines the parameter (sensor-noise bound <= 2 % of that
scale, motion above the kinematic noise). Identifiable: excited, and a least-squares fit of the
estimator's own force on MuJoCo's kinematics errs <= 2 %. Batch LS: numpy.linalg.lstsq of the
estimator's own filter rows of the contact; naive RLS: the same rows, no forgetting, std from
its P and residual variance, converged when 3 std <= 5 % of max(|estimate|, s).
Definitions: interaction_estimator/offline/validation/scoring.py."""


def episode_lines(results) -> str:
    """One line per episode: what it was and how each method did (errors in % of d)."""
    out = [
        "seed robot rate motion change ep kind excited(m,d,k,f) | estimator err % | "
        "conv end | t_conv | batch err % | rls err %"
    ]
    for r in results:
        if "error" in r:
            out.append(f"{r['seed']} FAILED: {r['error']}")
            continue
        for ep in r["episodes"]:
            ex = "".join("x" if e else "." for e in ep["excited"])
            fmt = lambda v: " ".join("inf" if x == float("inf") else f"{100 * x:.1f}" for x in v)  # noqa: E731
            e = ep["estimator"]
            out.append(
                f"{ep['seed']} {ep['robot']} {ep['rate']:g} {ep['motion']} {ep['change']} "
                f"{ep['episode']} {ep['kind']} {ex} | {fmt(e['error'])} | "
                f"{'yes' if e['converged_end'] else 'no'} | {e['time_to_convergence']:.2f} | "
                f"{fmt(ep['batch']['error'])} | {fmt(ep['rls']['error'])}"
            )
    return "\n".join(out)


if __name__ == "__main__":
    sys.exit(main())
