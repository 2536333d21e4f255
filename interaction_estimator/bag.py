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
stamp, the names once per distinct name list, the three float64 arrays as numpy views), which is
several times faster than the generic deserializer; anything unusual (big-endian data, a layout
that does not add up) falls back to the ``rosbags`` deserializer. The tests check both against
``rosbags`` and against ROS 2's own serializer.

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
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Iterator, Mapping, Sequence

import numpy as np

from .samples import Sample

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
_CDR_LE = b"\x00\x01\x00\x00"


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
    """Decodes sensor_msgs/JointState CDR bytes; caches the name list between messages."""

    def __init__(self) -> None:
        self._names_bytes = b""
        self._names: tuple[str, ...] = ()
        self.fallbacks = 0  # messages decoded by the generic deserializer

    def decode(self, raw: bytes | memoryview) -> JointStateRecord:
        buf = raw if isinstance(raw, bytes) else bytes(raw)
        try:
            if buf[:2] != b"\x00\x01":
                raise ValueError("not little-endian CDR")
            return self._decode_le(buf)
        except (ValueError, struct.error, IndexError, UnicodeDecodeError):
            self.fallbacks += 1
            return _decode_joint_state_generic(buf)

    def _decode_le(self, buf: bytes) -> JointStateRecord:
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
        for _ in range(3):
            off = _align(off, 4)
            (n,) = _U32.unpack_from(buf, off)
            off += 4
            if n:
                off = _align(off, 8)
                if off + 8 * n > len(buf):
                    raise ValueError("array runs past the end")
                arrays.append(np.frombuffer(buf, "<f8", n, off))
                off += 8 * n
            else:
                arrays.append(_EMPTY)
        return JointStateRecord(sec, nsec, frame_id, names, arrays[0], arrays[1], arrays[2])


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
        messages = self._messages(self.info.joint_states)
        try:
            for _, _, raw in messages:
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
        times, values, frame = [], [], ""
        for _, _, raw in self._messages(topic):
            sec, nsec, frame, w = decode_wrench_stamped(raw)
            times.append(stamp_seconds(sec, nsec))
            values.append(w)
        w = np.array(values).reshape(-1, 6)
        return ReferenceWrench(topic, frame, np.array(times), w[:, :3], w[:, 3:])

    def samples(self, stamp_tolerance: float = 0.0005,
                separate_efforts: bool | None = None) -> Iterator[Sample]:
        """Joint states in recorded order as Samples (time s = header stamp; a zero stamp is
        replaced by the log time and flagged ``stamp_from_receive``).

        separate_efforts: take efforts from the joint_efforts topic (matched by stamp within
        ``stamp_tolerance`` s); None: only when the joint states carry none.
        """
        if separate_efforts is None:
            separate_efforts = not self.efforts_in_states
        if separate_efforts and self.info.joint_efforts is None:
            raise BagError(f"bag {str(self.path)!r} has no joint_efforts topic "
                           f"{self.names.joint_efforts!r}; expected one because "
                           "input.separate_efforts is true")
        efforts = _EffortMatcher(self, stamp_tolerance) if separate_efforts else None
        decoder = JointStateDecoder()
        for _, log_ns, raw in self._messages(self.info.joint_states):
            rec = decoder.decode(raw)
            from_receive = rec.sec == 0 and rec.nanosec == 0
            t = log_ns * 1e-9 if from_receive else stamp_seconds(rec.sec, rec.nanosec)
            effort = rec.effort if efforts is None else efforts.effort_for(t, rec.names)
            yield Sample(t, rec.names, rec.position, rec.velocity, effort, from_receive)

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
        for _, log_ns, raw in bag._messages(bag.info.joint_efforts):
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
    from .model import RobotModel  # only for the root frame name
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
