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

``python -m interaction_estimator.core.compiled`` compiles (or loads) every function once and says
how long it took; ``make setup`` runs it, so that a test, the demo or the node never compiles
while it runs.
"""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

import numba

def _kernel_sources() -> list[Path]:
    """Every module of the package that defines compiled functions (it applies ``@kernel``):
    found by reading the sources, so a new compiled module keys the cache without a list to
    keep by hand."""
    package = Path(__file__).resolve().parent.parent
    return sorted(path for path in package.rglob("*.py")
                  if b"@kernel" in path.read_bytes() or path == Path(__file__).resolve())


def _cache_dir() -> Path:
    digest = hashlib.sha256(numba.__version__.encode())
    package = Path(__file__).resolve().parent.parent
    for path in _kernel_sources():
        digest.update(str(path.relative_to(package)).encode())
        digest.update(path.read_bytes())
    base = os.environ.get("NUMBA_CACHE_DIR") or os.path.join(
        os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache"),
        "interaction_estimator")
    return Path(base) / f"kernels-{digest.hexdigest()[:16]}"


CACHE_DIR = _cache_dir()
numba.config.CACHE_DIR = str(CACHE_DIR)   # read when each function below is decorated

kernel = numba.njit(cache=True, nogil=True, error_model="numpy")
