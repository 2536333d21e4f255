"""Writing rosbag2 bags (MCAP or sqlite3) through the ``rosbags`` writer.

A bag is built through :class:`~.files.Staged` (in a temporary directory beside the target,
renamed into place when complete), so a failed write leaves nothing that looks like a bag.
"""
from __future__ import annotations

from pathlib import Path
from typing import Any

from .cdr import typestore
from .files import Staged
from .ground_truth import BagError

STORAGES = ("mcap", "sqlite3")


def _qos(transient_local: bool, reliable: bool = True):
    from rosbags.interfaces import (
        Qos,
        QosDurability,
        QosHistory,
        QosLiveliness,
        QosReliability,
        QosTime,
    )
    zero = QosTime(0, 0)
    return Qos(QosHistory.KEEP_LAST, 1 if transient_local else 100,
               QosReliability.RELIABLE if reliable else QosReliability.BEST_EFFORT,
               QosDurability.TRANSIENT_LOCAL if transient_local else QosDurability.VOLATILE,
               zero, zero, QosLiveliness.AUTOMATIC, zero, False)


class BagWriter:
    """Writes a new rosbag2 bag (``storage`` 'mcap' or 'sqlite3'); use as a context manager.

    The bag appears at ``path`` when the ``with`` block ends without error; on error nothing is
    left. BagError if ``path`` exists or its parent directory does not.
    """

    def __init__(self, path: str | Path, storage: str = "mcap"):
        self.path = Path(path)
        if storage not in STORAGES:
            raise BagError(f"storage {storage!r} is not supported; expected one of "
                           f"{', '.join(STORAGES)}")
        if self.path.exists():
            raise BagError(f"output bag {str(self.path)!r} exists already; expected a new path "
                           "(remove it or choose another)")
        parent = self.path.parent
        if not parent.is_dir():
            raise BagError(f"cannot write bag {str(self.path)!r}: directory {str(parent)!r} "
                           "does not exist")
        self.storage = storage
        self._connections: dict[str, Any] = {}
        self._custom: dict[str, str] = {}
        self._writer = None
        self._staged: Staged | None = None

    def __enter__(self) -> BagWriter:
        from rosbags.rosbag2 import StoragePlugin, Writer
        plugin = StoragePlugin.MCAP if self.storage == "mcap" else StoragePlugin.SQLITE3
        # rosbags names the storage file after the bag directory: the staged path has the
        # final name (in a temporary directory)
        self._staged = Staged(self.path)
        try:
            self._writer = Writer(self._staged.path, version=9, storage_plugin=plugin)
            self._writer.open()
        except BaseException:
            self._staged.discard()
            raise
        return self

    def set_metadata(self, key: str, value: str) -> None:
        """A custom_data entry of the bag's metadata (text)."""
        self._custom[key] = value

    def connection(self, topic: str, msgtype: str, transient_local: bool = False) -> Any:
        conn = self._connections.get(topic)
        if conn is None:
            assert self._writer is not None
            conn = self._writer.add_connection(
                topic, msgtype, typestore=typestore(),
                offered_qos_profiles=[_qos(transient_local)])
            self._connections[topic] = conn
        return conn

    def write(self, topic: str, msgtype: str, log_time: float | int, raw: bytes,
              transient_local: bool = False) -> None:
        """Write CDR bytes; log_time in s (float) or ns (int)."""
        ns = log_time if isinstance(log_time, int) else int(round(log_time * 1e9))
        assert self._writer is not None
        self._writer.write(self.connection(topic, msgtype, transient_local), ns, raw)

    def write_message(self, topic: str, msgtype: str, log_time: float | int, msg: Any,
                      transient_local: bool = False) -> None:
        """Serialize a rosbags message object and write it."""
        self.write(topic, msgtype, log_time, bytes(typestore().serialize_cdr(msg, msgtype)),
                   transient_local)

    def __exit__(self, exc_type: Any, exc: Any, tb: Any) -> None:
        writer, staged = self._writer, self._staged
        assert writer is not None and staged is not None
        try:
            if exc_type is None:
                for k, v in self._custom.items():
                    writer.set_custom_data(k, v)
                writer.close()
                staged.commit()
        finally:
            if exc_type is not None:
                try:
                    writer.close()
                except Exception:  # the first error is the one to report
                    pass
            staged.discard()
