"""The one decorator for the estimator's compiled per-sample arithmetic, and its cache.

The stages' per-sample arithmetic is written as plain Python functions on numpy record arrays
(structured dtypes with named fields) and compiled to machine code by Numba (Lam, Pitrou and
Seibert, "Numba: a LLVM-based Python JIT compiler", LLVM-HPC 2015). This module imports no stage:
it is the leaf every compiled module builds on.

- ``error_model="numpy"``: a division by zero gives inf or NaN, as numpy does, instead of raising;
  every stage checks its outputs for finiteness where it matters.
- no ``fastmath``: NaN and infinity keep their IEEE 754 meaning (the finiteness checks rely on it).
- ``cache=True``: the machine code is kept on disk, so a new process loads it (a fraction of a
  second) instead of compiling (about half a minute here). The cache directory is
  ``$NUMBA_CACHE_DIR`` or ``~/.cache/interaction_estimator``, in a subdirectory named by a hash
  of the sources of every module of the package that applies ``@kernel`` or ``@entry_kernel``
  (found by reading the sources) and of the Numba version: Numba checks only the file of the
  function it loads, not the files of the functions it calls, so without the hash an edit of
  one stage could leave a stale Pipeline step in the cache.

:class:`EntryKernel` is for the functions Python calls per sample (the Pipeline's step): they
are compiled for one explicit signature and then closed to further compilation, so an argument
of the wrong type raises ``TypeError`` at once instead of compiling a new specialization for
half a minute inside a running node. :func:`~interaction_estimator.core.warmup.warm_up` loads
every compiled function once (``make setup`` runs it).
"""
from __future__ import annotations

import hashlib
import os
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numba


def _kernel_sources() -> list[Path]:
    """Every module of the package that defines compiled functions (it applies ``@kernel``):
    found by reading the sources, so a new compiled module keys the cache without a list to
    keep by hand."""
    package = Path(__file__).resolve().parent.parent
    here = Path(__file__).resolve()
    return sorted(path for path in package.rglob("*.py")
                  if path == here or b"@kernel" in path.read_bytes()
                  or b"@entry_kernel" in path.read_bytes())


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
numba.config.CACHE_DIR = str(CACHE_DIR)  # type: ignore[attr-defined]  # read at decoration

kernel = numba.njit(cache=True, nogil=True, error_model="numpy")


class EntryKernel:
    """A compiled function called from Python with one fixed signature.

    ``signature()`` returns the Numba signature (built lazily, from prototype arguments, so that
    importing a module compiles nothing). :meth:`prepare` compiles it, or loads it from the
    cache, and closes the function to other signatures: afterwards a call with arguments of
    another type raises ``TypeError`` naming them. :attr:`fast` is the compiled entry point of
    that signature, called without Numba's per-call type dispatch (about 1 us per call for a
    few record arrays, measured here): only for callers that build every argument themselves
    with the declared types, as the Pipeline does."""

    def __init__(self, function: Callable[..., Any], signature: Callable[[], Any]):
        self.dispatcher = kernel(function)
        self._signature = signature
        self._fast: Callable[..., Any] | None = None
        self.__doc__ = function.__doc__
        self.__name__ = function.__name__

    def prepare(self) -> Callable[..., Any]:
        """Compile or load the one signature; returns the entry point (see :attr:`fast`)."""
        if self._fast is None:
            signature = self._signature()
            self.dispatcher.compile(signature)
            self.dispatcher.disable_compile()
            compiled = self.dispatcher.overloads[signature.args]
            self._fast = compiled.entry_point  # type: ignore[attr-defined]  # numba's stub
        return self._fast

    @property
    def fast(self) -> Callable[..., Any]:
        return self._fast if self._fast is not None else self.prepare()

    def __call__(self, *args: Any) -> Any:
        """Checked call: the declared signature only (TypeError for anything else)."""
        self.prepare()
        return self.dispatcher(*args)


def entry_kernel(signature: Callable[[], Any]) -> Callable[[Callable[..., Any]], EntryKernel]:
    """Decorator: ``@entry_kernel(lambda: signature)`` makes an :class:`EntryKernel`."""
    return lambda function: EntryKernel(function, signature)
