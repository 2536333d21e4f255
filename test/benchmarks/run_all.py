"""Runs every benchmark script in this folder with its quick settings and prints the figures.

`make bench` calls this. Benchmarks print; they never assert. ROS 2 benchmarks stay on this
machine (ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST, a domain of their own).
"""
from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
# script -> arguments for `make bench` (each script's --help shows the full-length options)
PLAN = {
    "bench_pipeline.py": ["--samples", "4000", "--memory-minutes", "10"],
    "bench_environment.py": [],
    "bench_accuracy.py": [],
    "bench_node_callback.py": [],
    "bench_node.py": [],   # 60 s per subject, in 2 s turns
    "bench_replay.py": ["--minutes", "10"],
    "bench_identification.py": [],   # 60 s commissioning bag of a 7-joint arm
    "bench_startup.py": ["--long-minutes", "10", "--repeat", "3"],
    "bench_fleet.py": ["--bags", "8", "--seconds", "20", "--repeat", "2"],
}


def main() -> int:
    env = dict(os.environ)
    env["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
    env.setdefault("ROS_DOMAIN_ID", str(7 + os.getpid() % 80))
    failures = []
    for script, args in PLAN.items():
        path = HERE / script
        if not path.exists():
            print(f"== {script}: not present, skipped\n", flush=True)
            continue
        print(f"== {script} {' '.join(args)}", flush=True)
        t0 = time.perf_counter()
        rc = subprocess.call([sys.executable, str(path), *args], env=env)
        print(f"== {script}: exit {rc}, {time.perf_counter() - t0:.0f} s wall\n", flush=True)
        if rc:
            failures.append(script)
    if failures:
        print("benchmarks that failed to run: " + ", ".join(failures))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
