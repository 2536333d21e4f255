"""Fleet replay throughput: bags per minute on a local Dask cluster with 1 and 2 workers, beside
the local process pool with 1 and 2 jobs (prints figures, asserts nothing).

Builds ``--bags`` bags of the 7-joint Marten arm (``--seconds`` each at 1 kHz, seeds 0..n-1; see
bench_startup.py), starts a Dask LocalCluster on 127.0.0.1 only (one single-threaded worker
process per worker; the scheduler and workers listen on loopback), and runs the real command as
a process: ``interaction-estimator replay DIR --out OUT --no-report [--cluster ADDRESS |
--jobs N]``. Each subject runs ``--repeat`` times, in alternation. The cluster's own start-up
(scheduler and workers) is timed apart; the workers are kept between runs, as on a fleet, and
warmed by one unmeasured run, so every measured run finds the compiled code loaded in them.

Usage: python test/benchmarks/bench_fleet.py [--bags N] [--seconds S] [--repeat R]
"""
from __future__ import annotations

import argparse
import json
import logging
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_startup import PARAMS, command, write_arm_bag  # noqa: E402


def run(args: list[str]) -> float:
    t0 = time.perf_counter()
    r = subprocess.run(args, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if r.returncode != 0:
        raise SystemExit(f"{' '.join(args)} failed ({r.returncode}):\n{r.stderr[-2000:]}")
    return wall


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--bags", type=int, default=8, help="bags (default 8)")
    parser.add_argument("--seconds", type=float, default=20.0,
                        help="length of each bag in s at 1 kHz (default 20)")
    parser.add_argument("--repeat", type=int, default=2, help="runs per subject (default 2)")
    args = parser.parse_args(argv)
    try:
        from distributed import LocalCluster
    except ImportError:
        print("Dask distributed is not installed (the [fleet] extra): nothing to measure")
        return
    logging.getLogger("distributed").setLevel(logging.ERROR)   # figures, not Dask's chatter
    work = Path(tempfile.mkdtemp(prefix="bench_fleet."))
    cmd = command()
    clusters = []
    try:
        bags = work / "bags"
        bags.mkdir()
        t0 = time.perf_counter()
        for k in range(args.bags):
            write_arm_bag(bags / f"arm_{k:03d}", args.seconds, seed=k)
        print(f"{args.bags} bags of {args.seconds:g} s at 1 kHz (7-joint arm), built in "
              f"{time.perf_counter() - t0:.1f} s", flush=True)
        params = work / "params.yaml"
        params.write_text(PARAMS)
        subjects: dict[str, list[str]] = {}
        for workers in (1, 2):
            t0 = time.perf_counter()
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                   host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                   silence_logs=logging.ERROR)
            clusters.append(cluster)
            print(f"Dask cluster with {workers} worker(s) on {cluster.scheduler_address} "
                  f"started in {time.perf_counter() - t0:.1f} s", flush=True)
            subjects[f"dask, {workers} worker(s)"] = ["--cluster", cluster.scheduler_address]
            # unmeasured: each worker imports the package and loads the compiled code once, as
            # the long-lived workers of a fleet have done before the night's bags arrive
            warm = work / f"warm_{workers}"
            run([*cmd, "replay", *[str(bags / f"arm_{k:03d}") for k in range(workers)],
                 "--out", str(warm), "--params", str(params), "--no-report",
                 "--cluster", cluster.scheduler_address])
            shutil.rmtree(warm, ignore_errors=True)
            subjects[f"local, --jobs {workers}"] = ["--jobs", str(workers)]
        walls: dict[str, list[float]] = {k: [] for k in subjects}
        for _ in range(args.repeat):
            for name, extra in subjects.items():
                out = work / f"out_{len(walls[name])}_{name.split(',')[0]}"
                walls[name].append(run([*cmd, "replay", str(bags), "--out", str(out),
                                        "--params", str(params), "--no-report", *extra]))
                doc = json.loads((out / "runs.json").read_text())
                assert doc["failed"] == 0, doc
                shutil.rmtree(out, ignore_errors=True)
        print(f"\n{'subject':<24}{'median s':>10}{'bags/min':>10}{'runs (s)':>28}")
        for name, w in walls.items():
            med = statistics.median(w)
            print(f"{name:<24}{med:10.2f}{args.bags / med * 60:10.1f}    "
                  + " ".join(f"{x:.2f}" for x in w))
        print("(Dask workers warmed by one unmeasured run; each local run starts its "
              "processes anew)")
    finally:
        for c in clusters:
            c.close()
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
