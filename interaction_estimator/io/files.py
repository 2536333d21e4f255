"""The one way the package writes a file or a directory: complete, or not at all.

:class:`Staged` hands out a temporary path beside the target, inside a fresh hidden directory
in the target's own folder (so that the final rename stays on one file system, where
``os.replace`` is atomic). The caller writes there under the target's own name (a bag
directory's storage file is named after the directory), and :meth:`Staged.commit` renames it
into place. Whatever was at the target before (an earlier result) is replaced only then; a file
is replaced in one step, a directory is moved aside first and removed after the rename.
Without a commit (an error) the temporary directory is removed: a failed write leaves nothing
that looks like a result.
"""
from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path
from typing import Any


class Staged:
    """A file or directory written at :attr:`path` and moved to ``target`` on :meth:`commit`.

    Use as a context manager (``with Staged(target) as tmp: write(tmp)``: committed when the
    block ends without error, discarded otherwise) or call :meth:`commit` / :meth:`discard`.
    """

    def __init__(self, target: str | Path):
        self.target = Path(target)
        self._dir = Path(tempfile.mkdtemp(prefix=f".{self.target.name}.", suffix=".partial",
                                          dir=self.target.parent))
        self.path = self._dir / self.target.name
        self.committed = False

    def commit(self) -> None:
        """Move the written path to the target (replacing what was there)."""
        old = None
        if self.target.is_dir() and not self.target.is_symlink():
            old = self.target.with_name(f".{self.target.name}.old-{os.getpid()}")
            shutil.rmtree(old, ignore_errors=True)
            os.replace(self.target, old)
        os.replace(self.path, self.target)
        self.committed = True
        self.discard()
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)

    def discard(self) -> None:
        """Remove the temporary directory (and anything not committed in it)."""
        shutil.rmtree(self._dir, ignore_errors=True)

    def __enter__(self) -> Path:
        return self.path

    def __exit__(self, exc_type: Any, exc: Any, tb: Any) -> None:
        if exc_type is None and not self.committed:
            self.commit()
        else:
            self.discard()


def write_atomic(path: str | Path, data: str | bytes) -> None:
    """Write ``data`` (text as UTF-8, or bytes) to ``path`` through :class:`Staged`."""
    with Staged(path) as tmp:
        if isinstance(data, str):
            tmp.write_text(data, encoding="utf-8")
        else:
            tmp.write_bytes(data)
