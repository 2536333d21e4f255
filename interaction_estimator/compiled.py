"""The one decorator for the estimator's compiled per-sample arithmetic, and its cache.

The stages' per-sample arithmetic (observer, bias, contact monitor, wrench map, direction,
kinematics, environment filter) is written as plain Python functions on float arrays and compiled
to machine code by Numba (Lam, Pitrou and Seibert, "Numba: a LLVM-based Python JIT compiler",
LLVM-HPC 2015). Each stage's class calls its own functions; the Pipeline calls all of them in one
compiled step (:mod:`.pipeline_step`), so a sample costs one call from Python instead of a hundred
small numpy calls. The estimates.csv writer (:mod:`.estimates`) writes its rows the same way.

- ``error_model="numpy"``: a division by zero gives inf or NaN, as numpy does, instead of raising;
  every stage checks its outputs for finiteness where it matters.
- no ``fastmath``: NaN and infinity keep their IEEE 754 meaning (the finiteness checks rely on it).
- ``cache=True``: the machine code is kept on disk, so a new process loads it (a fraction of a
  second) instead of compiling (about a minute on a small computer). The cache directory is
  ``$NUMBA_CACHE_DIR`` or ``~/.cache/interaction_estimator``, in a subdirectory named by a hash
  of the sources of every module with compiled functions (and of the Numba version): Numba
  checks only the file of the function it loads, not the files of the functions it calls, so
  without the hash an edit of one stage could leave a stale Pipeline step in the cache.

``python -m interaction_estimator.compiled`` compiles (or loads) every function once and says
how long it took; ``make setup`` runs it, so that a test, the demo or the node never compiles
while it runs.
"""
from __future__ import annotations

import hashlib
import os
import sys
import time
from pathlib import Path

import numba

# the modules whose functions are compiled (their sources name the cache directory)
KERNEL_MODULES = ("compiled", "health", "observer", "wrench", "environment", "pipeline_step",
                  "estimates")


def _cache_dir() -> Path:
    here = Path(__file__).resolve().parent
    digest = hashlib.sha256(numba.__version__.encode())
    for name in KERNEL_MODULES:
        digest.update((here / f"{name}.py").read_bytes())
    base = os.environ.get("NUMBA_CACHE_DIR") or os.path.join(
        os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache"),
        "interaction_estimator")
    return Path(base) / f"kernels-{digest.hexdigest()[:16]}"


CACHE_DIR = _cache_dir()
numba.config.CACHE_DIR = str(CACHE_DIR)   # read when each function below is decorated

kernel = numba.njit(cache=True, nogil=True, error_model="numpy")


def warm_up() -> float:
    """Compile, or load from the cache, every compiled function for the argument types the
    package uses: a Pipeline on the built-in robot in both observer forms and both wrench
    modes, through contact, each stage on its own, and the estimates.csv writer on a small
    table. Returns the seconds it took."""
    import tempfile

    import numpy as np

    from .environment import EnvironmentFilter
    from .estimates import _NUMERIC, STATES, EstimateTable, float_texts, write_csv
    from .observer import (BiasEstimator, ContactMonitor, FrictionModel,
                           KalmanMomentumObserver, MomentumObserver)
    from .pipeline import Pipeline
    from .samples import Sample, SampleBlock
    from .scenarios import marten
    from .settings import Settings
    from .wrench import AlongKinematics, Direction, WrenchMap

    start = time.perf_counter()
    urdf = marten.arm_urdf()
    for extra in ({}, {"observer.form": "first_order", "wrench.mode": "wrench",
                       "direction.mode": "estimated", "effort_side": "motor",
                       "friction.viscous": [0.1]}):
        settings = Settings({"contact.hold_time": 0.0, "bias.startup": 0.01, **extra})
        pipe = Pipeline(settings, urdf)
        names = pipe.model.joint_names
        zeros = np.zeros(len(names))
        for k in range(60):
            push = np.full(len(names), 30.0 if k > 30 else 0.0)
            pipe.process(Sample(k * 1e-3, names, zeros + 0.3, zeros + 0.01 * k, push))
        rows = np.ones((20, len(names)))   # and a recording's block (Pipeline.process_block)
        pipe.process_block(SampleBlock(np.arange(60, 80) * 1e-3, names, rows * 0.3,
                                       rows * 0.6, rows * 30.0, np.zeros(20, bool)))
    n = 2
    obs = [KalmanMomentumObserver(np.full(n, 50.0), 0.003, 0.1, 1.0),
           KalmanMomentumObserver(np.array([50.0, 60.0]), 0.003, 0.1, 1.0),
           MomentumObserver(np.full(n, 50.0), 1.0)]
    for k in range(3):
        for o in obs:
            o.step(k * 1e-3, np.ones(n), np.zeros(n), np.eye(n))
    FrictionModel(np.ones(n), np.ones(n), 0.01, True).torque(np.ones(n))
    bias = BiasEstimator(np.zeros(n), 0.2, 10.0, 10.0, True)
    bias.update(0.001, 0.001, np.ones(n))
    monitor = ContactMonitor(n, 6.0, 3.0, 0.0, 0.05, 2.0)
    monitor.step(0.0, np.ones(n))
    monitor.learn_power(0.01, np.ones(n))
    _ = monitor.weights
    WrenchMap(False, 1e-3).solve(np.ones((6, n)), np.ones(n), np.ones(n))
    Direction("estimated", [1, 0, 0], 0.5, 10.0, 0.0).update(1e-3, np.eye(3), np.ones(3))
    kin = AlongKinematics(0.01, 2, 1e-3, 50.0)
    for k in range(20):
        kin.push(k * 1e-3, 1e-4, 0.1, 1.0)
    kin.aligned_row(1e-3)
    kin.start_contact(0.0)
    flt = EnvironmentFilter(Settings())
    flt.update(0.0, np.array([0.1, 0.2, 0.01, 1.0]), 3.0)
    flt.inflate("warm-up")
    EnvironmentFilter._project([1.0, -1.0, -1.0, 0.0], np.eye(4).ravel().tolist(), (True,) * 4)
    table = EstimateTable()
    for k in range(3):
        table.append_values([float(k)] * len(_NUMERIC), STATES[k])
    with tempfile.TemporaryDirectory() as tmp:
        write_csv(Path(tmp) / "estimates.csv", table)
    float_texts(np.array([0.1, -2.5e-7]))
    return time.perf_counter() - start


def main() -> int:
    seconds = warm_up()
    print(f"interaction_estimator: compiled functions ready in {seconds:.1f} s "
          f"(cache: {CACHE_DIR})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
