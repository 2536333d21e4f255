"""rosbag2 reading and writing (MCAP and sqlite3) through the ``rosbags`` library.

What a bag may hold, by role (relative names; a bag recorded on a robot usually has them with a
leading slash or under a namespace, and both are found):

| role | default topic | type | use |
|---|---|---|---|
| joint_states | ``joint_states`` | sensor_msgs/msg/JointState | positions (rad, m), velocities (rad/s, m/s), efforts (N·m, N) |
| joint_efforts | ``joint_efforts`` | sensor_msgs/msg/JointState | efforts alone, matched to joint states by stamp (optional) |
| robot_description | ``robot_description`` | std_msgs/msg/String | URDF text (optional: ``--urdf FILE`` instead) |
| reference | ``ground_truth/wrench`` | geometry_msgs/msg/WrenchStamped | force the robot applies, world frame, N (optional) |
| parameters | ``ground_truth/parameters`` | std_msgs/msg/String | ground truth as JSON (optional, see below) |

Ground truth of the object's parameters is a JSON document (:data:`TRUTH_FORMAT`) in one
std_msgs/String message on ``ground_truth/parameters``; the same text is also stored in the bag's
metadata (``custom_data``, key :data:`TRUTH_METADATA_KEY`), and either place is read. Its keys:
``format``, ``parameters`` ({mass kg, damping N·s/m, stiffness N/m, static_force N}, or null when
the recording has no object, such as the free-motion ``commissioning`` scenario), ``units``
(absent with null parameters), and optionally ``scenario``, ``description``, ``contact_time``
(s, null without contact), ``settings`` (recommended estimator settings by dotted name),
``seed``, ``effort_side``, ``noise``.

JointState messages are decoded straight from their CDR bytes (:class:`JointStateDecoder`: the
stamp, the names once per distinct name list, the three float64 arrays copied into one aligned
block; a run of messages with the same layout as one array), which is several times faster
than the generic deserializer; anything unusual (big-endian data, a layout that does not add
up) falls back to the ``rosbags`` deserializer. The joint states of a single-file MCAP bag are
read straight from its chunks (:func:`_mcap_plan`), in the order the ``rosbags`` reader gives;
other bags go through that reader. The tests check all of it against ``rosbags`` and against
ROS 2's own serializer.

Errors a user can cause (missing, truncated or empty bag, no joint states, no efforts, a topic of
the wrong type, unreadable ground truth) raise :class:`BagError` with a message that names what
was found and what was expected. Bags are written into a temporary directory beside the target
and renamed into place when complete, so a failed write leaves nothing that looks like a bag.
"""
from __future__ import annotations

import json
import math
import os
import shutil
import struct
import tempfile
import zlib
from dataclasses import dataclass, field, replace
from itertools import repeat
from pathlib import Path, PurePath
from typing import Any, Iterator, Mapping, Sequence

import numpy as np

from ..core.samples import Sample, SampleBlock

JOINT_STATE = "sensor_msgs/msg/JointState"
STRING = "std_msgs/msg/String"
WRENCH_STAMPED = "geometry_msgs/msg/WrenchStamped"
FLOAT64_MULTI_ARRAY = "std_msgs/msg/Float64MultiArray"
DIAGNOSTIC_STATUS = "diagnostic_msgs/msg/DiagnosticStatus"

TRUTH_FORMAT = "interaction_estimator.ground_truth/1"
TRUTH_METADATA_KEY = "interaction_estimator.ground_truth"
STORAGES = ("mcap", "sqlite3")
SIMULATED_TIME_OFFSET = 1.0  # s added to simulation time in the stamps of a simulated bag

ROLE_TYPES: dict[str, str] = {
    "joint_states": JOINT_STATE,
    "joint_efforts": JOINT_STATE,
    "robot_description": STRING,
    "reference": WRENCH_STAMPED,
    "parameters": STRING,
}

_EFFORT_PROBE = 20  # joint states looked at to decide whether the bag carries efforts at all


class BagError(ValueError):
    """A bag cannot be used as asked: the message names what was found and what was expected."""


@dataclass(frozen=True)
class TopicNames:
    """Topic of each role (see the module table). Relative names also match ``/name`` and
    ``/<namespace>/name``; a name starting with ``/`` matches only itself."""

    joint_states: str = "joint_states"
    joint_efforts: str = "joint_efforts"
    robot_description: str = "robot_description"
    reference: str = "ground_truth/wrench"
    parameters: str = "ground_truth/parameters"

    @classmethod
    def roles(cls) -> tuple[str, ...]:
        return tuple(ROLE_TYPES)

    def with_overrides(self, pairs: Sequence[str]) -> "TopicNames":
        """Apply ``ROLE=TOPIC`` strings (from ``--topics``); BagError names a bad one."""
        changes: dict[str, str] = {}
        for pair in pairs:
            role, sep, topic = pair.partition("=")
            role, topic = role.strip(), topic.strip()
            if not sep or not topic:
                raise BagError(f"--topics: {pair!r} is not ROLE=TOPIC; expected for example "
                               f"joint_states=/marten/joint_states (roles: "
                               f"{', '.join(self.roles())})")
            if role not in ROLE_TYPES:
                raise BagError(f"--topics: unknown role {role!r} in {pair!r}; expected one of "
                               f"{', '.join(self.roles())}")
            changes[role] = topic
        return replace(self, **changes)


# --------------------------------------------------------------------------------------------
# typestore (shared, built once per process)

_TYPESTORE = None


def typestore():
    """The rosbags typestore for ROS 2 Jazzy message definitions (built on first use)."""
    global _TYPESTORE
    if _TYPESTORE is None:
        from rosbags.typesys import Stores, get_typestore
        _TYPESTORE = get_typestore(Stores.ROS2_JAZZY)
    return _TYPESTORE


def stamp_seconds(sec: int, nanosec: int) -> float:
    """A header stamp in seconds as a float: ``sec + nanosec * 1e-9`` (the one formula used by
    the node and the replay, so both see bit-identical sample times)."""
    return sec + nanosec * 1e-9


def seconds_to_stamp(t: float) -> tuple[int, int]:
    """Seconds -> (sec, nanosec), rounded to the nearest nanosecond."""
    ns = int(round(t * 1e9))
    return ns // 1_000_000_000, ns % 1_000_000_000


# --------------------------------------------------------------------------------------------
# CDR (little-endian XCDR1, as ROS 2 writes it) for the frequent messages

_U32 = struct.Struct("<I")
_STAMP_LEN = struct.Struct("<iII")
_STAMP = struct.Struct("<iI")
_CDR_LE = b"\x00\x01\x00\x00"
_LE_ID = np.frombuffer(_CDR_LE[:2], np.uint8)   # little-endian plain CDR


def _align(offset: int, size: int) -> int:
    """Align an absolute buffer offset; CDR alignment counts from after the 4-byte header."""
    rel = offset - 4
    return offset + (-rel % size)


@dataclass(frozen=True)
class JointStateRecord:
    """One decoded JointState: stamp (sec, nanosec), frame_id, names, arrays (n,) float64."""

    sec: int
    nanosec: int
    frame_id: str
    names: tuple[str, ...]
    position: np.ndarray
    velocity: np.ndarray
    effort: np.ndarray


class JointStateDecoder:
    """Decodes sensor_msgs/JointState CDR bytes; caches the name list between messages.

    Once a message has been decoded in full, the next ones of the same length with the same
    bytes from the frame_id to the arrays (frame_id, names, padding; every joint with position,
    velocity and effort) are read by one comparison of those bytes, one unpack of the stamp and
    of the three array lengths, and one copy of the three arrays into an aligned (3, n) block
    (the arrays of a CDR message are 4 bytes off 8-byte alignment in memory, and numpy
    arithmetic on unaligned arrays is slower).
    """

    def __init__(self, generic_fallback: bool = True) -> None:
        self._names_bytes = b""
        self._names: tuple[str, ...] = ()
        self._same: tuple[Any, ...] | None = None  # the layout of the last full decode
        # bytes it does not read itself: rosbags' deserializer, or (False) a ValueError
        self._generic = generic_fallback
        self.fallbacks = 0  # messages it did not read itself
        self.quick = 0      # messages read in one step by the layout of the previous one

    def decode(self, raw: bytes | memoryview) -> JointStateRecord:
        return JointStateRecord(*self.fields(raw))

    def fields(self, raw: bytes | memoryview) -> tuple[int, int, str, tuple[str, ...],
                                                       np.ndarray, np.ndarray, np.ndarray]:
        """(sec, nanosec, frame_id, names, position (n,), velocity (n,), effort (n,))."""
        buf = raw if isinstance(raw, bytes) else bytes(raw)
        same = self._same
        if (same is not None and len(buf) == same[0] and buf.startswith(same[1], 12)
                and buf.startswith(b"\x00\x01") and same[2].unpack_from(buf, same[3]) == same[4]):
            self.quick += 1
            sec, nsec = _STAMP.unpack_from(buf, 4)
            block = np.frombuffer(buf, "<f8", same[5], same[6]).reshape(3, -1)[:, 1:].copy()
            return sec, nsec, same[7], same[8], block[0], block[1], block[2]
        try:
            if buf[:2] != b"\x00\x01":
                raise ValueError("not little-endian CDR")
            return self._decode_le(buf)
        except (ValueError, struct.error, IndexError, UnicodeDecodeError) as exc:
            self.fallbacks += 1
            self._same = None
            if not self._generic:
                raise ValueError(f"JointState bytes not read: {exc}") from None
            rec = _decode_joint_state_generic(buf)
            return (rec.sec, rec.nanosec, rec.frame_id, rec.names, rec.position, rec.velocity,
                    rec.effort)

    def fields_many(self, raws: Sequence[bytes]) -> list[tuple[int, int, str, tuple[str, ...],
                                                                np.ndarray, np.ndarray,
                                                                np.ndarray]]:
        """:meth:`fields` of each message. When they all have the layout of the message
        decoded before them (the usual case in a recording), they are read together (see
        :meth:`block_many`)."""
        first = []
        if self._same is None and raws:   # learn the layout from the first message
            first, raws = [self.fields(raws[0])], raws[1:]
        whole = self.block_many(raws)
        if whole is None:
            return first + [self.fields(r) for r in raws]
        secs, nsecs, frame_id, names, block = whole
        return first + list(zip(secs, nsecs, repeat(frame_id), repeat(names), block[:, 0],
                                block[:, 1], block[:, 2]))

    def block_many(self, raws: Sequence[bytes]) -> tuple[list[int], list[int], str,
                                                          tuple[str, ...], np.ndarray] | None:
        """Messages that all have the layout of the message decoded before them, read
        together: their bytes side by side as one (k, length) array, the layout checked on all
        at once, stamps and arrays taken as strided columns (one copy for all the arrays).
        Returns (secs, nanosecs, frame_id, names, block (k, 3, n): position, velocity, effort),
        or None when they do not (or are fewer than 4): decode them one by one then."""
        k = len(raws)
        same = self._same
        if k < 4 or same is None:
            return None
        size, head, _, c0, _, _, start, frame_id, names = same
        n = len(names)
        if not all(len(r) == size for r in raws):
            return None
        joined = b"".join(raws)
        rows = np.frombuffer(joined, np.uint8).reshape(k, size)
        c1 = start + 8 + 8 * n
        c2 = c1 + 8 + 8 * n
        count = np.frombuffer(_U32.pack(n), np.uint8)
        ok = ((rows[:, :2] == _LE_ID).all(1)
              & (rows[:, 12:12 + len(head)] == np.frombuffer(head, np.uint8)).all(1)
              & (rows[:, c0:c0 + 4] == count).all(1) & (rows[:, c1:c1 + 4] == count).all(1)
              & (rows[:, c2:c2 + 4] == count).all(1))
        if not ok.all():
            return None
        self.quick += k
        secs = np.ndarray((k,), "<i4", joined, 4, (size,)).tolist()
        nsecs = np.ndarray((k,), "<u4", joined, 8, (size,)).tolist()
        block = np.ndarray((k, 3, n), "<f8", joined, start + 8, (size, 8 * (n + 1), 8)).copy()
        return secs, nsecs, frame_id, names, block

    def _decode_le(self, buf: bytes) -> tuple[int, int, str, tuple[str, ...],
                                              np.ndarray, np.ndarray, np.ndarray]:
        sec, nsec, flen = _STAMP_LEN.unpack_from(buf, 4)
        if flen == 0:
            raise ValueError("string without terminator")
        frame_id = buf[16:16 + flen - 1].decode()
        off = _align(16 + flen, 4)
        cached = self._names_bytes
        if cached and buf.startswith(cached, off):
            names = self._names
            off += len(cached)
        else:
            start = off
            (count,) = _U32.unpack_from(buf, off)
            off += 4
            out = []
            for _ in range(count):
                off = _align(off, 4)
                (slen,) = _U32.unpack_from(buf, off)
                if slen == 0 or off + 4 + slen > len(buf):
                    raise ValueError("bad string")
                out.append(buf[off + 4:off + 3 + slen].decode())
                off += 4 + slen
            names = tuple(out)
            self._names_bytes, self._names = buf[start:off], names
        arrays = []
        counts = []
        first = off
        for _ in range(3):
            off = _align(off, 4)
            counts.append(off)
            (n,) = _U32.unpack_from(buf, off)
            off += 4
            if n:
                off = _align(off, 8)
                if off + 8 * n > len(buf):
                    raise ValueError("array runs past the end")
                arrays.append(np.frombuffer(buf, "<f8", n, off))   # copied below
                off += 8 * n
            else:
                arrays.append(_EMPTY)
        n = len(names)
        self._same = None
        if n and all(len(a) == n for a in arrays):
            # the next message with these bytes up to the arrays is read in one step
            c0, c1, c2 = counts
            head = _align(first, 4)
            self._same = (len(buf), buf[12:head],
                          struct.Struct(f"<I{c1 - c0 - 4}xI{c2 - c1 - 4}xI"), c0, (n, n, n),
                          3 * (n + 1), _align(c0 + 4, 8) - 8, frame_id, names)
            block = np.frombuffer(buf, "<f8", 3 * (n + 1), _align(c0 + 4, 8) - 8)
            block = block.reshape(3, -1)[:, 1:].copy()
            return sec, nsec, frame_id, names, block[0], block[1], block[2]
        return (sec, nsec, frame_id, names, *(a.copy() if len(a) else a for a in arrays))


_EMPTY = np.zeros(0)


def _decode_joint_state_generic(buf: bytes) -> JointStateRecord:
    msg = typestore().deserialize_cdr(buf, JOINT_STATE)
    return JointStateRecord(
        int(msg.header.stamp.sec), int(msg.header.stamp.nanosec), msg.header.frame_id,
        tuple(msg.name), np.asarray(msg.position, float), np.asarray(msg.velocity, float),
        np.asarray(msg.effort, float))


def _cdr_string(text: str, offset: int) -> bytes:
    """A CDR string starting at an absolute offset (padding before it included)."""
    data = text.encode() + b"\x00"
    pad = -(offset - 4) % 4
    return b"\x00" * pad + _U32.pack(len(data)) + data


def _names_section(names: Sequence[str]) -> bytes:
    out = bytearray(_U32.pack(len(names)))
    for n in names:  # starts 4-aligned, so the padding does not depend on where it is placed
        out += _cdr_string(n, 4 + len(out))
    return bytes(out)


class JointStateEncoder:
    """Encodes sensor_msgs/JointState as little-endian CDR, byte-identical to rosbags'
    serializer (zero padding); the name section is cached."""

    def __init__(self) -> None:
        self._cache: dict[tuple[str, ...], bytes] = {}

    def encode(self, sec: int, nanosec: int, frame_id: str, names: Sequence[str],
               position: np.ndarray, velocity: np.ndarray, effort: np.ndarray) -> bytes:
        key = tuple(names)
        section = self._cache.get(key)
        if section is None:
            section = _names_section(key)
            if len(self._cache) > 16:
                self._cache.clear()
            self._cache[key] = section
        out = bytearray(_CDR_LE)
        out += struct.pack("<iI", sec, nanosec)
        out += _cdr_string(frame_id, len(out))
        out += b"\x00" * (-(len(out) - 4) % 4)
        out += section
        for arr in (position, velocity, effort):
            a = np.ascontiguousarray(arr, dtype="<f8")
            out += b"\x00" * (-(len(out) - 4) % 4)
            out += _U32.pack(a.size)
            if a.size:
                out += b"\x00" * (-(len(out) - 4) % 8)
                out += a.tobytes()
        return bytes(out)


def encode_wrench_stamped(sec: int, nanosec: int, frame_id: str, force: Sequence[float],
                          torque: Sequence[float]) -> bytes:
    """geometry_msgs/WrenchStamped as little-endian CDR (force N, torque N·m)."""
    out = bytearray(_CDR_LE)
    out += struct.pack("<iI", sec, nanosec)
    out += _cdr_string(frame_id, len(out))
    out += b"\x00" * (-(len(out) - 4) % 8)
    out += struct.pack("<6d", *force, *torque)
    return bytes(out)


def decode_wrench_stamped(raw: bytes | memoryview) -> tuple[int, int, str, np.ndarray]:
    """(sec, nanosec, frame_id, [fx, fy, fz, tx, ty, tz]) from WrenchStamped CDR bytes."""
    buf = bytes(raw)
    if buf[:2] == b"\x00\x01":
        try:
            sec, nsec, flen = _STAMP_LEN.unpack_from(buf, 4)
            off = _align(16 + flen, 8)
            if flen and off + 48 <= len(buf):
                return (sec, nsec, buf[16:16 + flen - 1].decode(),
                        np.array(struct.unpack_from("<6d", buf, off)))
        except (struct.error, UnicodeDecodeError):
            pass
    msg = typestore().deserialize_cdr(buf, WRENCH_STAMPED)
    f, t = msg.wrench.force, msg.wrench.torque
    return (int(msg.header.stamp.sec), int(msg.header.stamp.nanosec), msg.header.frame_id,
            np.array([f.x, f.y, f.z, t.x, t.y, t.z]))


def decode_wrench_stamped_many(raws: Sequence[bytes]) -> tuple[np.ndarray, np.ndarray, str]:
    """(stamps (k,) s, [fx, fy, fz, tx, ty, tz] (k, 6), frame_id of the last) of k
    WrenchStamped messages: read as one array when they share length and frame_id (a
    recording), else message by message (:func:`decode_wrench_stamped`). Stamps as
    :func:`stamp_seconds` makes them."""
    k = len(raws)
    if k > 1 and raws[0][:2] == b"\x00\x01" and len(raws[0]) >= 16:
        size = len(raws[0])
        (flen,) = _U32.unpack_from(raws[0], 12)
        off = _align(16 + flen, 8)
        if flen and off + 48 <= size and all(len(r) == size for r in raws):
            joined = b"".join(raws)
            rows = np.frombuffer(joined, np.uint8).reshape(k, size)
            if (rows[:, :2] == _LE_ID).all() and (rows[:, 12:16 + flen] ==
                                                  rows[0, 12:16 + flen]).all():
                secs = np.ndarray((k,), "<i4", joined, 4, (size,)).astype(float)
                nsecs = np.ndarray((k,), "<u4", joined, 8, (size,)).astype(float)
                values = np.ndarray((k, 6), "<f8", joined, off, (size, 8)).astype(float)
                return secs + nsecs * 1e-9, values, raws[0][16:16 + flen - 1].decode()
    times, values, frame = [], [], ""
    for raw in raws:
        sec, nsec, frame, w = decode_wrench_stamped(raw)
        times.append(stamp_seconds(sec, nsec))
        values.append(w)
    return np.array(times, float), np.array(values, float).reshape(-1, 6), frame


def encode_string(text: str) -> bytes:
    """std_msgs/String as CDR."""
    return bytes(_CDR_LE + _cdr_string(text, 4))


def decode_string(raw: bytes | memoryview) -> str:
    return typestore().deserialize_cdr(bytes(raw), STRING).data


def encode_float64_multi_array(labels: Sequence[str], data: Sequence[float]) -> bytes:
    """std_msgs/Float64MultiArray: one layout dimension per label (size 1, stride 1), data."""
    ts = typestore()
    arr = ts.types[FLOAT64_MULTI_ARRAY]
    layout = ts.types["std_msgs/msg/MultiArrayLayout"]
    dim = ts.types["std_msgs/msg/MultiArrayDimension"]
    values = np.asarray(data, float)
    msg = arr(layout=layout(dim=[dim(label=lab, size=1, stride=1) for lab in labels],
                            data_offset=0), data=values)
    return bytes(ts.serialize_cdr(msg, FLOAT64_MULTI_ARRAY))


def float64_multi_array_values(raw: bytes | memoryview) -> tuple[list[str], np.ndarray]:
    """(dimension labels, data) of a Float64MultiArray."""
    msg = typestore().deserialize_cdr(bytes(raw), FLOAT64_MULTI_ARRAY)
    return [d.label for d in msg.layout.dim], np.asarray(msg.data, float)


# --------------------------------------------------------------------------------------------
# reading


@dataclass(frozen=True)
class GroundTruth:
    """Ground truth stored in a bag: parameters {name: value} in kg, N·s/m, N/m, N (None when
    the recording has no object: free motion only), and the rest of the JSON document
    (``extra``: scenario, contact_time s, recommended settings, ...)."""

    parameters: dict[str, float] | None
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def settings(self) -> dict[str, Any]:
        """Recommended estimator settings by dotted name (may be empty)."""
        s = self.extra.get("settings") or {}
        return dict(s) if isinstance(s, Mapping) else {}

    def to_json(self) -> str:
        units = ({} if self.parameters is None else
                 {"units": {"mass": "kg", "damping": "N·s/m", "stiffness": "N/m",
                            "static_force": "N"}})
        return json.dumps({"format": TRUTH_FORMAT, "parameters": self.parameters, **units,
                           **self.extra}, sort_keys=True)

    @classmethod
    def from_json(cls, text: str, where: str) -> "GroundTruth":
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise BagError(f"{where}: ground truth is not valid JSON ({exc}); expected a "
                           f"document of format {TRUTH_FORMAT!r}") from None
        if not isinstance(doc, dict) or doc.get("format") != TRUTH_FORMAT:
            found = doc.get("format") if isinstance(doc, dict) else type(doc).__name__
            raise BagError(f"{where}: ground truth has format {found!r}; expected "
                           f"{TRUTH_FORMAT!r}")
        params = doc.get("parameters")
        names = ("mass", "damping", "stiffness", "static_force")
        extra = {k: v for k, v in doc.items() if k not in ("format", "parameters", "units")}
        if params is None and "parameters" in doc:   # null: a recording without an object
            return cls(None, extra)
        if not isinstance(params, dict) or not all(
                isinstance(params.get(n), (int, float)) and not isinstance(params.get(n), bool)
                for n in names):
            raise BagError(f"{where}: ground truth 'parameters' is {params!r}; expected numbers "
                           f"for {', '.join(names)}, or null for a recording without an object")
        return cls({n: float(params[n]) for n in names}, extra)


@dataclass(frozen=True)
class ReferenceWrench:
    """A WrenchStamped series: time (M,) s (stamps), force (M, 3) N, torque (M, 3) N·m."""

    topic: str
    frame_id: str
    time: np.ndarray
    force: np.ndarray
    torque: np.ndarray


@dataclass(frozen=True)
class BagInfo:
    """What a bag holds: path, storage ('mcap' or 'sqlite3'), topics {name: (type, count)},
    span of the recording (s, log time), the topics chosen for each role."""

    path: str
    storage: str
    topics: dict[str, tuple[str, int]]
    duration: float
    start_time: float
    joint_states: str
    joint_state_count: int
    joint_efforts: str | None
    robot_description: str | None
    reference: str | None
    parameters: str | None


# --------------------------------------------------------------------------------------------
# MCAP chunks read directly (the joint states of a long bag)
#
# The general reader builds several Python objects per message (4 to 6 us of CPU per message
# on the development machine, against about 1 us here): the joint states of a single-file MCAP
# bag are read here from the file's chunks with a few struct unpacks per record instead. Record
# layouts: the MCAP specification (mcap.dev), as rosbag2 writes it. Anything this does not
# cover (records outside chunks, chunks whose time ranges overlap, chunk compression other than
# none or zstd, several files, rosbag2's own file or message compression) is left to the
# general reader; the order is the general reader's: by log time, equal times in file order.

_MCAP_MAGIC = b"\x89MCAP0\r\n"
_OP_FOOTER, _OP_CHANNEL, _OP_MESSAGE, _OP_CHUNK, _OP_DATA_END = 0x02, 0x04, 0x05, 0x06, 0x0F
_RECORD = struct.Struct("<BQ")           # opcode, content length
_CHUNK_HEAD = struct.Struct("<QQQII")    # first, last log time, size, crc, compression length
_MESSAGE_HEAD = struct.Struct("<HIQ")    # channel id, sequence, log time (then publish time)
_U64 = struct.Struct("<Q")
_U16 = struct.Struct("<H")


@dataclass(frozen=True)
class _McapChunk:
    """Where a chunk's records are (file offset, length in the file), their compression and
    uncompressed size and CRC-32 (0: none), and the log times it spans (ns)."""

    offset: int
    length: int
    compression: str
    size: int
    crc: int
    first: int
    last: int


def _channel_topic(content: bytes, at: int = 0) -> tuple[int, str]:
    """(channel id, topic) of a Channel record's content."""
    (cid,) = _U16.unpack_from(content, at)
    (n,) = _U32.unpack_from(content, at + 4)
    return cid, content[at + 8:at + 8 + n].decode()


def _mcap_plan(path: Path) -> tuple[list[_McapChunk], dict[int, str]] | None:
    """The chunks of an MCAP file and its channels outside chunks ({id: topic}), or None when
    the file is not laid out for :func:`_mcap_batches`."""
    chunks: list[_McapChunk] = []
    channels: dict[int, str] = {}
    last = -1
    with open(path, "rb") as fh:
        size = os.fstat(fh.fileno()).st_size
        if fh.read(8) != _MCAP_MAGIC:
            return None
        pos = 8
        while pos + 9 <= size:
            fh.seek(pos)
            op, length = _RECORD.unpack(fh.read(9))
            body = pos + 9
            if body + length > size:
                return None
            if op == _OP_CHUNK:
                first, end, usize, crc, clen = _CHUNK_HEAD.unpack(fh.read(_CHUNK_HEAD.size))
                compression = fh.read(clen).decode()
                (rlen,) = _U64.unpack(fh.read(8))
                offset = body + _CHUNK_HEAD.size + clen + 8
                if compression not in ("", "zstd") or offset + rlen > body + length \
                        or first < last:
                    return None
                last = max(last, end)
                chunks.append(_McapChunk(offset, rlen, compression, usize, crc, first, end))
            elif op == _OP_CHANNEL:
                cid, topic = _channel_topic(fh.read(length))
                channels[cid] = topic
            elif op == _OP_MESSAGE:
                return None
            elif op in (_OP_DATA_END, _OP_FOOTER):
                break
            pos = body + length
    return chunks, channels


def _zstd() -> Any:
    try:
        from compression import zstd  # Python 3.14
    except ImportError:
        from backports import zstd  # what rosbags installs before 3.14
    return zstd


def _mcap_batches(path: Path, plan: tuple[list[_McapChunk], dict[int, str]], topic: str
                  ) -> Iterator[tuple[list[int], list[bytes]]]:
    """([log time ns], [CDR bytes]) of the messages on ``topic``, one batch per chunk (each
    chunk's messages in log-time order, stable; the plan's chunks do not overlap in time)."""
    chunks, channels = plan
    wanted = {cid for cid, t in channels.items() if t == topic}
    unpack_record, unpack_message = _RECORD.unpack_from, _MESSAGE_HEAD.unpack_from
    with open(path, "rb") as fh:
        for chunk in chunks:
            fh.seek(chunk.offset)
            data = fh.read(chunk.length)
            if len(data) == chunk.length and chunk.compression == "zstd":
                data = _zstd().decompress(data)
            if len(data) != chunk.size or (chunk.crc and zlib.crc32(data) != chunk.crc):
                raise BagError(f"MCAP chunk at byte {chunk.offset} of {str(path)!r} is "
                               "damaged (its size or checksum does not match)")
            times: list[int] = []
            raws: list[bytes] = []
            first, last = chunk.first, chunk.last
            pos, end = 0, len(data)
            while pos < end:
                op, length = unpack_record(data, pos)
                body = pos + 9
                pos = body + length
                if pos > end:
                    raise BagError(f"MCAP chunk at byte {chunk.offset} of {str(path)!r} is "
                                   "damaged (a record runs past its end)")
                if op == _OP_MESSAGE:
                    cid, _, t = unpack_message(data, body)
                    if cid in wanted and first <= t <= last:
                        times.append(t)
                        raws.append(data[body + 22:pos])
                elif op == _OP_CHANNEL:
                    cid, name = _channel_topic(data, body)
                    if name == topic:
                        wanted.add(cid)
                    else:
                        wanted.discard(cid)
            if times != sorted(times):
                order = sorted(range(len(times)), key=times.__getitem__)
                times = [times[i] for i in order]
                raws = [raws[i] for i in order]
            if times:
                yield times, raws


def _storage_of(path: Path) -> str:
    if path.is_dir():
        files = list(path.glob("*.mcap")) + list(path.glob("*.db3"))
        return "sqlite3" if files and files[0].suffix == ".db3" else "mcap"
    return "sqlite3" if path.suffix == ".db3" else "mcap"


def _match_topic(wanted: str, topics: Mapping[str, Any]) -> list[str]:
    if wanted.startswith("/"):
        return [wanted] if wanted in topics else []
    exact = [t for t in (wanted, "/" + wanted) if t in topics]
    if exact:
        return exact[:1]
    return sorted(t for t in topics if t.endswith("/" + wanted))


class RecordedBag:
    """An open bag with its topics resolved by role. Use as a context manager.

    ``RecordedBag(path, topics=TopicNames(), reference_topic=None)``: ``reference_topic`` names a
    WrenchStamped topic to compare with (default: ``ground_truth/wrench`` when present).
    Raises BagError for every problem a user can cause.
    """

    def __init__(self, path: str | Path, topics: TopicNames = TopicNames(),
                 reference_topic: str | None = None):
        from rosbags.rosbag2 import Reader
        self.path = Path(path)
        self.names = topics
        p = self.path
        if not p.exists():
            raise BagError(f"bag {str(p)!r} does not exist; expected a rosbag2 directory (with "
                           "metadata.yaml) or a .mcap or .db3 file")
        if p.is_dir() and not (p / "metadata.yaml").exists():
            raise BagError(f"bag directory {str(p)!r} has no metadata.yaml; expected a rosbag2 "
                           "directory as written by 'ros2 bag record' (or a .mcap/.db3 file)")
        if p.is_file() and p.suffix not in (".mcap", ".db3"):
            raise BagError(f"bag file {str(p)!r} has suffix {p.suffix!r}; expected a rosbag2 "
                           "directory, a .mcap file or a .db3 file")
        try:
            self._reader = Reader(p)
            self._reader.open()
        except Exception as exc:  # rosbags raises ReaderError, OSError, struct/format errors
            raise BagError(f"bag {str(p)!r} cannot be opened (truncated or damaged?): "
                           f"{_short(exc)}; expected a complete rosbag2 bag") from None
        try:
            self._resolve(reference_topic)
        except BaseException:
            self.close()
            raise

    # --- set-up -------------------------------------------------------------------------
    def _resolve(self, reference_topic: str | None) -> None:
        r = self._reader
        topics = {name: (info.msgtype or "(several types)", info.msgcount)
                  for name, info in r.topics.items()}
        self._connections = {name: info.connections for name, info in r.topics.items()}
        where = f"bag {str(self.path)!r}"
        if r.message_count == 0 or not topics:
            raise BagError(f"{where} holds no messages; expected joint states "
                           f"({JOINT_STATE}) on {self.names.joint_states!r}")
        listing = ", ".join(f"{t} ({ty}, {n})" for t, (ty, n) in sorted(topics.items()))

        def pick(role: str, wanted: str | None, required: bool) -> str | None:
            if wanted is None:
                return None
            found = _match_topic(wanted, topics)
            if len(found) > 1:
                raise BagError(f"{where}: several topics match {role} {wanted!r}: {found}; "
                               f"name one with --topics {role}=TOPIC")
            if not found:
                if required:
                    js = [t for t, (ty, _) in topics.items() if ty == ROLE_TYPES[role]]
                    hint = (f"; {ROLE_TYPES[role]} topics present: {', '.join(sorted(js))} "
                            f"(choose one with --topics {role}=TOPIC)" if js else "")
                    raise BagError(f"{where} has no {role} topic {wanted!r}; expected "
                                   f"{ROLE_TYPES[role]} messages there. Its topics: "
                                   f"{listing}{hint}")
                return None
            name = found[0]
            kind = topics[name][0]
            if kind != ROLE_TYPES[role]:
                raise BagError(f"{where}: topic {name!r} ({role}) is of type {kind}; expected "
                               f"{ROLE_TYPES[role]}")
            return name

        states = pick("joint_states", self.names.joint_states, True)
        assert states is not None
        if topics[states][1] == 0:
            raise BagError(f"{where}: topic {states!r} holds no messages; expected joint states")
        ref_wanted = reference_topic if reference_topic else self.names.reference
        ref = pick("reference", ref_wanted, reference_topic is not None)
        self.info = BagInfo(
            path=str(self.path), storage=_storage_of(self.path), topics=topics,
            duration=r.duration * 1e-9, start_time=r.start_time * 1e-9, joint_states=states,
            joint_state_count=topics[states][1],
            joint_efforts=pick("joint_efforts", self.names.joint_efforts, False),
            robot_description=pick("robot_description", self.names.robot_description, False),
            reference=ref, parameters=pick("parameters", self.names.parameters, False))
        self._check_efforts()

    def _check_efforts(self) -> None:
        decoder = JointStateDecoder()
        seen = 0
        messages = self._topic_messages(self.info.joint_states)
        try:
            for _, raw in messages:
                rec = decoder.decode(raw)
                if len(rec.effort):
                    self.efforts_in_states = True
                    return
                seen += 1
                if seen >= _EFFORT_PROBE:
                    break
        finally:
            messages.close()
        self.efforts_in_states = False
        if self.info.joint_efforts is None:
            raise BagError(
                f"bag {str(self.path)!r}: joint states on {self.info.joint_states!r} carry no "
                f"efforts (empty effort arrays in the first {seen} messages) and there is no "
                f"{self.names.joint_efforts!r} topic; expected efforts (N·m, N) in the "
                "JointState messages or a separate JointState topic named with "
                "--topics joint_efforts=TOPIC")

    def _messages(self, topic: str) -> Iterator[tuple[Any, int, bytes]]:
        try:
            yield from self._reader.messages(connections=self._connections[topic])
        except BagError:
            raise
        except Exception as exc:
            raise BagError(f"bag {str(self.path)!r} cannot be read past some point on "
                           f"{topic!r} (truncated or damaged?): {_short(exc)}") from None

    def _topic_batches(self, topic: str, size: int = 1000
                       ) -> Iterator[tuple[list[int], list[bytes]]]:
        """([log time ns], [CDR bytes]) of the messages on ``topic`` in batches, in the order
        of :meth:`_messages`: read straight from the chunks of a single-file MCAP bag (one
        batch per chunk) where :func:`_mcap_plan` allows, else through the general reader
        (batches of ``size``)."""
        direct = self._direct()
        if direct is None:
            times: list[int] = []
            raws: list[bytes] = []
            for _, log_ns, raw in self._messages(topic):
                times.append(log_ns)
                raws.append(raw if isinstance(raw, bytes) else bytes(raw))
                if len(raws) == size:
                    yield times, raws
                    times, raws = [], []
            if raws:
                yield times, raws
            return
        try:
            yield from _mcap_batches(direct[0], direct[1], topic)
        except Exception as exc:
            raise BagError(f"bag {str(self.path)!r} cannot be read past some point on "
                           f"{topic!r} (truncated or damaged?): {_short(exc)}") from None

    def _topic_messages(self, topic: str) -> Iterator[tuple[int, bytes]]:
        """(log time ns, CDR bytes) of the messages on ``topic`` (see :meth:`_topic_batches`)."""
        for times, raws in self._topic_batches(topic, 20):
            yield from zip(times, raws)

    def _direct(self) -> tuple[Path, tuple[list[_McapChunk], dict[int, str]]] | None:
        """(MCAP file, its plan) when the bag can be read by :func:`_mcap_batches`."""
        if not hasattr(self, "_direct_plan"):
            self._direct_plan = None
            try:
                mcap = self._mcap_file()
                plan = _mcap_plan(mcap) if mcap is not None else None
                if plan is not None:
                    self._direct_plan = (mcap, plan)
            except (OSError, ValueError, KeyError, TypeError, AttributeError, struct.error):
                pass  # the general reader reads it (and reports what is wrong with it)
        return self._direct_plan

    def _mcap_file(self) -> Path | None:
        """The bag's one MCAP file when it has one and no rosbag2-level compression."""
        p = self.path
        if p.is_file():
            return p if p.suffix == ".mcap" else None
        import yaml
        meta = yaml.safe_load((p / "metadata.yaml").read_text(encoding="utf-8"))
        meta = meta["rosbag2_bagfile_information"]
        files = meta.get("relative_file_paths") or []
        if meta.get("storage_identifier") != "mcap" or len(files) != 1 or \
                str(meta.get("compression_mode") or "").lower() not in ("", "none"):
            return None
        f = p / PurePath(files[0]).name
        return f if f.suffix == ".mcap" and f.is_file() else None

    # --- contents ------------------------------------------------------------------------
    def urdf(self) -> str | None:
        """The first robot_description message, or None when the bag has none."""
        if self.info.robot_description is None:
            return None
        return self._first_string(self.info.robot_description)

    def _first_string(self, topic: str) -> str | None:
        messages = self._messages(topic)
        try:
            for _, _, raw in messages:
                return decode_string(raw)
            return None
        finally:
            messages.close()

    def truth(self) -> GroundTruth | None:
        """Ground truth from ``ground_truth/parameters`` or the metadata, or None."""
        if self.info.parameters is not None:
            text = self._first_string(self.info.parameters)
            if text is not None:
                return GroundTruth.from_json(text, f"bag {str(self.path)!r}, "
                                                   f"{self.info.parameters}")
        custom = getattr(getattr(self._reader.storage, "metadata", None), "custom", None) or {}
        if TRUTH_METADATA_KEY in custom:
            return GroundTruth.from_json(custom[TRUTH_METADATA_KEY],
                                         f"bag {str(self.path)!r}, metadata custom_data")
        return None

    def reference(self) -> ReferenceWrench | None:
        """The reference wrench series, or None when the bag has none."""
        topic = self.info.reference
        if topic is None:
            return None
        times, values, frame = [np.zeros(0)], [np.zeros((0, 6))], ""
        for _, raws in self._topic_batches(topic):
            t, w, frame = decode_wrench_stamped_many(raws)
            times.append(t)
            values.append(w)
        w = np.concatenate(values)
        return ReferenceWrench(topic, frame, np.concatenate(times), w[:, :3], w[:, 3:])

    def samples(self, stamp_tolerance: float = 0.0005,
                separate_efforts: bool | None = None) -> Iterator[Sample]:
        """Joint states in recorded order as Samples (time s = header stamp; a zero stamp is
        replaced by the log time and flagged ``stamp_from_receive``).

        separate_efforts: take efforts from the joint_efforts topic (matched by stamp within
        ``stamp_tolerance`` s); None: only when the joint states carry none.
        """
        for block in self.sample_blocks(stamp_tolerance, separate_efforts):
            for i in range(len(block)):
                yield block.sample(i)

    def sample_blocks(self, stamp_tolerance: float = 0.0005,
                      separate_efforts: bool | None = None) -> Iterator[SampleBlock]:
        """The joint states of :meth:`samples`, in recorded order, as blocks of consecutive
        messages with one layout (a block per storage chunk, where the messages allow; one
        message per block otherwise)."""
        if separate_efforts is None:
            separate_efforts = not self.efforts_in_states
        if separate_efforts and self.info.joint_efforts is None:
            raise BagError(f"bag {str(self.path)!r} has no joint_efforts topic "
                           f"{self.names.joint_efforts!r}; expected one because "
                           "input.separate_efforts is true")
        efforts = _EffortMatcher(self, stamp_tolerance) if separate_efforts else None
        decoder = JointStateDecoder()
        for log_times, raws in self._topic_batches(self.info.joint_states):
            if efforts is None:
                if decoder._same is None and raws:   # the first message teaches the layout
                    yield self._one_block(log_times[0], decoder.fields(raws[0]), None)
                    log_times, raws = log_times[1:], raws[1:]
                whole = decoder.block_many(raws)
                if whole is not None:
                    secs, nsecs, _, names, block = whole
                    sec, nsec = np.array(secs, np.int64), np.array(nsecs, np.int64)
                    unstamped = (sec == 0) & (nsec == 0)
                    # the stamp in seconds as stamp_seconds computes it, one by one
                    t = sec.astype(float) + nsec.astype(float) * 1e-9
                    if unstamped.any():   # unstamped: the log (receive) time instead
                        t[unstamped] = np.asarray(log_times, float)[unstamped] * 1e-9
                    yield SampleBlock(t, names, block[:, 0], block[:, 1], block[:, 2],
                                      unstamped)
                    continue
            for log_ns, fields in zip(log_times, decoder.fields_many(raws)):
                yield self._one_block(log_ns, fields, efforts)

    @staticmethod
    def _one_block(log_ns: int, fields: tuple, efforts: "_EffortMatcher | None") -> SampleBlock:
        sec, nsec, _, names, position, velocity, effort = fields
        unstamped = sec == 0 and nsec == 0
        # a zero stamp: the log (receive) time instead
        t = log_ns * 1e-9 if unstamped else sec + nsec * 1e-9   # stamp_seconds, inlined
        if efforts is not None:
            effort = efforts.effort_for(t, names)
        return SampleBlock.of(Sample(t, names, position, velocity, effort, unstamped))

    def close(self) -> None:
        reader = getattr(self, "_reader", None)
        if reader is not None and reader.is_open:
            reader.close()

    def __enter__(self) -> "RecordedBag":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()


class _EffortMatcher:
    """Efforts from a separate JointState topic, looked up by nearest stamp."""

    def __init__(self, bag: RecordedBag, tolerance: float):
        decoder = JointStateDecoder()
        times, records = [], []
        assert bag.info.joint_efforts is not None
        for log_ns, raw in bag._topic_messages(bag.info.joint_efforts):
            rec = decoder.decode(raw)
            zero = rec.sec == 0 and rec.nanosec == 0
            times.append(log_ns * 1e-9 if zero else stamp_seconds(rec.sec, rec.nanosec))
            records.append((rec.names, np.array(rec.effort)))
        order = np.argsort(times, kind="stable")
        self.times = np.asarray(times)[order]
        self.records = [records[i] for i in order]
        self.tolerance = tolerance

    def effort_for(self, t: float, names: tuple[str, ...]) -> np.ndarray:
        """Efforts (n,) in the order of ``names``; empty when no message is close enough or
        a joint is missing (the pipeline then rejects the sample as missing_effort)."""
        if not len(self.times):
            return _EMPTY
        i = int(np.searchsorted(self.times, t))
        best = min((j for j in (i - 1, i) if 0 <= j < len(self.times)),
                   key=lambda j: abs(self.times[j] - t))
        if abs(self.times[best] - t) > self.tolerance:
            return _EMPTY
        enames, values = self.records[best]
        if not enames and len(values) == len(names):
            return values
        index = {n: k for k, n in enumerate(enames)}
        if len(values) != len(enames) or any(n not in index for n in names):
            return _EMPTY
        return values[[index[n] for n in names]]


def _short(exc: BaseException) -> str:
    text = str(exc).strip() or type(exc).__name__
    return text if len(text) < 300 else text[:297] + "..."


# --------------------------------------------------------------------------------------------
# writing


def _qos(transient_local: bool, reliable: bool = True):
    from rosbags.interfaces import (Qos, QosDurability, QosHistory, QosLiveliness,
                                    QosReliability, QosTime)
    zero = QosTime(0, 0)
    return Qos(QosHistory.KEEP_LAST, 1 if transient_local else 100,
               QosReliability.RELIABLE if reliable else QosReliability.BEST_EFFORT,
               QosDurability.TRANSIENT_LOCAL if transient_local else QosDurability.VOLATILE,
               zero, zero, QosLiveliness.AUTOMATIC, zero, False)


class BagWriter:
    """Writes a new rosbag2 bag (``storage`` 'mcap' or 'sqlite3'); use as a context manager.

    The bag is built in a temporary directory beside ``path`` and renamed to ``path`` when the
    ``with`` block ends without error; on error the temporary directory is removed. BagError if
    ``path`` exists or its parent directory does not.
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
        self._tmp = Path(tempfile.mkdtemp(prefix=f".{self.path.name}.", suffix=".partial",
                                          dir=parent))
        self._connections: dict[str, Any] = {}
        self._custom: dict[str, str] = {}
        self._writer = None

    def __enter__(self) -> "BagWriter":
        from rosbags.rosbag2 import StoragePlugin, Writer
        plugin = StoragePlugin.MCAP if self.storage == "mcap" else StoragePlugin.SQLITE3
        # rosbags names the storage file after the bag directory: build it inside the temp
        # directory under the final name, then move it into place.
        self._inner = self._tmp / self.path.name
        self._writer = Writer(self._inner, version=9, storage_plugin=plugin)
        self._writer.open()
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
        writer = self._writer
        try:
            if exc_type is None:
                assert writer is not None
                for k, v in self._custom.items():
                    writer.set_custom_data(k, v)
                writer.close()
                os.replace(self._inner, self.path)
        finally:
            if exc_type is not None and writer is not None:
                try:
                    writer.close()
                except Exception:
                    pass
            shutil.rmtree(self._tmp, ignore_errors=True)


def write_simulated_bag(path: str | Path, run: Any, storage: str = "mcap",
                        description: str = "") -> None:
    """Write a :class:`~.scenarios.simulator.SimulatedRun` as a bag: ``/robot_description``
    (transient local), ``/joint_states`` (efforts included; stamps = simulation time +
    :data:`SIMULATED_TIME_OFFSET`, since a zero stamp means "unset"),
    ``/ground_truth/wrench`` (true force the robot applies, world frame ``odom``-style URDF
    root, N; zero throughout for a scenario without an object) and the ground truth on
    ``/ground_truth/parameters`` and in the metadata (parameters and contact time null when the
    scenario has no object)."""
    from ..core.model import RobotModel  # only for the root frame name
    root = RobotModel(run.urdf, run.contact_frame).root_frame
    truth_params = None
    if run.truth.get("has_object", True):
        truth_params = {k: float(run.truth[k]) for k in ("mass", "damping", "stiffness",
                                                          "static_force")}
    t0 = SIMULATED_TIME_OFFSET
    contact_time = run.truth.get("contact_time", math.nan)
    extra = {"scenario": run.scenario, "description": description,
             "contact_time": None if contact_time is None else t0 + float(contact_time),
             "time_offset": t0,
             "settings": _jsonable(run.settings), "seed": run.truth.get("seed"),
             "effort_side": run.truth.get("effort_side"), "noise": run.truth.get("noise"),
             "bias": _jsonable(run.truth.get("bias")),
             "effort_noise": _jsonable(run.truth.get("effort_noise")),
             "velocity_noise": _jsonable(run.truth.get("velocity_noise")),
             "joint_names": list(run.joint_names), "world_frame": root}
    truth = GroundTruth(truth_params, extra)
    enc = JointStateEncoder()
    names = tuple(run.joint_names)
    with BagWriter(path, storage) as w:
        text = truth.to_json()
        w.set_metadata(TRUTH_METADATA_KEY, text)
        w.write("/robot_description", STRING, 0, encode_string(run.urdf), transient_local=True)
        w.write("/ground_truth/parameters", STRING, 0, encode_string(text),
                transient_local=True)
        for k, t in enumerate(run.time):
            sec, nsec = seconds_to_stamp(t0 + float(t))
            ns = sec * 1_000_000_000 + nsec
            w.write("/joint_states", JOINT_STATE, ns,
                    enc.encode(sec, nsec, "", names, run.position[k], run.velocity[k],
                               run.effort[k]))
            w.write("/ground_truth/wrench", WRENCH_STAMPED, ns,
                    encode_wrench_stamped(sec, nsec, root, run.true_force[k], (0.0, 0.0, 0.0)))


def _jsonable(value: Any) -> Any:
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return value.item()
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    return value
