"""ROS 2 messages as CDR bytes, without a ROS installation: the frequent messages decoded and
encoded directly, the rest through the ``rosbags`` (de)serializer. Pure bytes: no rclpy here.

Encoding: plain little-endian CDR (XCDR1, what ROS 2's default middleware sends and rosbag2
stores): a 4-byte encapsulation header, then the fields in order, each primitive aligned to its
size counted from the end of the header, a string as uint32 length (terminating NUL included),
its UTF-8 bytes and a NUL, a sequence as uint32 count then its elements. Padding is zero.

Why by hand (measured reasons; test/benchmarks/bench_replay.py and bench_node_callback.py):
rosbags' generic deserializer takes about 13 us per 10-joint JointState against 3 us one at a
time and under 1 us per message in a chunk's batch here (:class:`JointStateDecoder`); in the
node, converting message objects to and from rclpy's C structures and serializing them cost
more than everything else the node does per message outside the pipeline. The node checks the
encoders below against rclpy's own serializer once at start-up
(:mod:`interaction_estimator.ros.messages`) and falls back to message objects should they ever
disagree; the tests check them against rclpy and rosbags.

Time: a header stamp (sec, nanosec) is :func:`stamp_seconds` seconds, the one conversion the
node, the replay and the bag reader use (so they see bit-identical sample times);
:func:`seconds_to_stamp` is its inverse, rounded to the nearest nanosecond.
"""
from __future__ import annotations

import struct
from collections.abc import Sequence
from dataclasses import dataclass
from itertools import repeat
from typing import Any

import numpy as np

JOINT_STATE = "sensor_msgs/msg/JointState"
STRING = "std_msgs/msg/String"
WRENCH_STAMPED = "geometry_msgs/msg/WrenchStamped"
FLOAT64_MULTI_ARRAY = "std_msgs/msg/Float64MultiArray"
DIAGNOSTIC_STATUS = "diagnostic_msgs/msg/DiagnosticStatus"
ODOMETRY = "nav_msgs/msg/Odometry"
IMU = "sensor_msgs/msg/Imu"

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
# a moving base's inputs: nav_msgs/Odometry and sensor_msgs/Imu
#
# Both are a header (stamp, frame_id), for Odometry one more string (child_frame_id), then only
# doubles, 8-aligned: Odometry 85 (pose: position 3, orientation 4 [x, y, z, w], covariance 36;
# twist: linear 3, angular 3, covariance 36), Imu 37 (orientation 4, its covariance 9, angular
# velocity 3, its covariance 9, linear acceleration 3, its covariance 9). A recording's messages
# of one topic share their strings and length, so a batch is read as one strided array after
# one comparison of their string bytes (as for JointState; about 1 us per message against
# 40-60 us for rosbags' deserializer here); anything else goes through rosbags.

_ODOMETRY_DOUBLES = 85
_IMU_DOUBLES = 37


@dataclass(frozen=True)
class BaseBatch:
    """Decoded Odometry or Imu messages of one topic: stamps (k,) s (``stamp_seconds``), the
    stamps' (sec, nanosec) being zero (k,) bool, frame_id and child_frame_id ('' for Imu) of
    each (lists), and their doubles (k, 85) or (k, 37) in message order."""

    time: np.ndarray
    unstamped: np.ndarray
    frame_id: list[str]
    child_frame_id: list[str]
    values: np.ndarray


def _strings_end(buf: bytes, strings: int) -> tuple[list[str], int]:
    """The header's frame_id (and ``strings`` - 1 more strings) of a little-endian CDR
    message: (the strings, the offset of the first double after them)."""
    off = 12
    out = []
    for _ in range(strings):
        off = _align(off, 4)
        (n,) = _U32.unpack_from(buf, off)
        if n == 0 or off + 4 + n > len(buf):
            raise ValueError("bad string")
        out.append(buf[off + 4:off + 3 + n].decode())
        off += 4 + n
    return out, _align(off, 8)


def _decode_fixed_many(raws: Sequence[bytes], strings: int, doubles: int,
                       msgtype: str) -> BaseBatch:
    k = len(raws)
    values = np.zeros((k, doubles))
    secs = np.zeros(k, np.int64)
    nsecs = np.zeros(k, np.int64)
    names: list[list[str]] = []
    i = 0
    while i < k:
        buf = raws[i] if isinstance(raws[i], bytes) else bytes(raws[i])
        try:
            if buf[:2] != b"\x00\x01":
                raise ValueError("not little-endian CDR")
            found, off = _strings_end(buf, strings)
            if off + 8 * doubles != len(buf):
                raise ValueError("length does not add up")
        except (ValueError, struct.error, UnicodeDecodeError):
            sec, nsec, found, row = _decode_fixed_generic(buf, msgtype)
            secs[i], nsecs[i], values[i] = sec, nsec, row
            names.append(found)
            i += 1
            continue
        # the following messages with the same length and the same bytes up to the doubles
        size, head = len(buf), buf[12:off]
        j = i + 1
        while j < k and len(raws[j]) == size and raws[j][12:off] == head \
                and raws[j][:2] == b"\x00\x01":
            j += 1
        joined = b"".join(bytes(r) for r in raws[i:j])
        secs[i:j] = np.ndarray((j - i,), "<i4", joined, 4, (size,))
        nsecs[i:j] = np.ndarray((j - i,), "<u4", joined, 8, (size,))
        values[i:j] = np.ndarray((j - i, doubles), "<f8", joined, off, (size, 8))
        names.extend([found] * (j - i))
        i = j
    unstamped = (secs == 0) & (nsecs == 0)
    t = stamp_seconds(secs.astype(float), nsecs.astype(float))
    return BaseBatch(t, unstamped, [n[0] for n in names],
                     [n[1] if len(n) > 1 else "" for n in names], values)


def _decode_fixed_generic(buf: bytes, msgtype: str) -> tuple[int, int, list[str], np.ndarray]:
    """One Odometry or Imu through rosbags' deserializer (any CDR it reads)."""
    msg = typestore().deserialize_cdr(buf, msgtype)
    stamp = msg.header.stamp
    if msgtype == ODOMETRY:
        pose, twist = msg.pose.pose, msg.twist.twist
        row = np.concatenate([
            [pose.position.x, pose.position.y, pose.position.z, pose.orientation.x,
             pose.orientation.y, pose.orientation.z, pose.orientation.w],
            np.asarray(msg.pose.covariance, float),
            [twist.linear.x, twist.linear.y, twist.linear.z, twist.angular.x,
             twist.angular.y, twist.angular.z],
            np.asarray(msg.twist.covariance, float)])
        return (int(stamp.sec), int(stamp.nanosec), [msg.header.frame_id, msg.child_frame_id],
                row)
    o, w, a = msg.orientation, msg.angular_velocity, msg.linear_acceleration
    row = np.concatenate([[o.x, o.y, o.z, o.w], np.asarray(msg.orientation_covariance, float),
                          [w.x, w.y, w.z], np.asarray(msg.angular_velocity_covariance, float),
                          [a.x, a.y, a.z],
                          np.asarray(msg.linear_acceleration_covariance, float)])
    return int(stamp.sec), int(stamp.nanosec), [msg.header.frame_id], row


def decode_odometry_many(raws: Sequence[bytes]) -> BaseBatch:
    """nav_msgs/Odometry CDR bytes -> a :class:`BaseBatch` (doubles (k, 85): position 0:3,
    orientation 3:7 [x, y, z, w], pose covariance 7:43, linear 43:46, angular 46:49, twist
    covariance 49:85)."""
    return _decode_fixed_many(raws, 2, _ODOMETRY_DOUBLES, ODOMETRY)


def decode_imu_many(raws: Sequence[bytes]) -> BaseBatch:
    """sensor_msgs/Imu CDR bytes -> a :class:`BaseBatch` (doubles (k, 37): orientation 0:4
    [x, y, z, w], its covariance 4:13, angular velocity 13:16, its covariance 16:25, linear
    acceleration 25:28, its covariance 28:37)."""
    return _decode_fixed_many(raws, 1, _IMU_DOUBLES, IMU)


def odometry_fields(values: np.ndarray) -> tuple[np.ndarray, ...]:
    """(position, orientation, pose_covariance, linear, angular, twist_covariance) of one row
    of :func:`decode_odometry_many`'s doubles."""
    return (values[0:3], values[3:7], values[7:43], values[43:46], values[46:49],
            values[49:85])


def imu_fields(values: np.ndarray) -> tuple[np.ndarray, ...]:
    """(orientation, orientation_covariance, angular_velocity, angular_velocity_covariance,
    linear_acceleration, linear_acceleration_covariance) of one row of
    :func:`decode_imu_many`'s doubles."""
    return (values[0:4], values[4:13], values[13:16], values[16:25], values[25:28],
            values[28:37])


def encode_odometry(sec: int, nanosec: int, frame_id: str, child_frame_id: str,
                    position: Sequence[float], orientation: Sequence[float],
                    linear: Sequence[float], angular: Sequence[float],
                    pose_covariance: Sequence[float] = (0.0,) * 36,
                    twist_covariance: Sequence[float] = (0.0,) * 36) -> bytes:
    """nav_msgs/Odometry as little-endian CDR (orientation [x, y, z, w]; the twist in the
    child frame)."""
    out = bytearray(_CDR_LE)
    out += struct.pack("<iI", sec, nanosec)
    out += _cdr_string(frame_id, len(out))
    out += _cdr_string(child_frame_id, len(out))
    out += b"\x00" * (-(len(out) - 4) % 8)
    out += struct.pack("<85d", *position, *orientation, *pose_covariance, *linear, *angular,
                       *twist_covariance)
    return bytes(out)


def encode_imu(sec: int, nanosec: int, frame_id: str, orientation: Sequence[float],
               angular_velocity: Sequence[float], linear_acceleration: Sequence[float],
               orientation_covariance: Sequence[float] = (0.0,) * 9,
               angular_velocity_covariance: Sequence[float] = (0.0,) * 9,
               linear_acceleration_covariance: Sequence[float] = (0.0,) * 9) -> bytes:
    """sensor_msgs/Imu as little-endian CDR (orientation [x, y, z, w])."""
    out = bytearray(_CDR_LE)
    out += struct.pack("<iI", sec, nanosec)
    out += _cdr_string(frame_id, len(out))
    out += b"\x00" * (-(len(out) - 4) % 8)
    out += struct.pack("<37d", *orientation, *orientation_covariance, *angular_velocity,
                       *angular_velocity_covariance, *linear_acceleration,
                       *linear_acceleration_covariance)
    return bytes(out)


# --------------------------------------------------------------------------------------------
# the node's messages: JointState in, ~/wrench, ~/environment and ~/status out


class JointStateReader:
    """sensor_msgs/JointState CDR bytes -> (sec, nanosec, names, position, velocity, effort),
    read by :class:`JointStateDecoder` (names decoded once per distinct name list, the arrays
    as aligned float64 copies (n,)). :meth:`read` returns None for bytes it does not handle
    (not little-endian plain CDR, or a layout that does not add up; counted in
    ``fallbacks``): the node then deserializes them with rclpy. Values and lengths are not
    checked here: the pipeline's validator does that and counts what it rejects.
    """

    def __init__(self) -> None:
        self._decoder = JointStateDecoder(generic_fallback=False)

    @property
    def fallbacks(self) -> int:
        return self._decoder.fallbacks

    def read(self, buf: bytes) -> tuple[int, int, tuple[str, ...], np.ndarray, np.ndarray,
                                        np.ndarray] | None:
        try:
            sec, nanosec, _, names, position, velocity, effort = self._decoder.fields(buf)
        except ValueError:
            return None
        return sec, nanosec, names, position, velocity, effort


_ZEROS = bytes(8)
# zeros after a string's UTF-8 bytes: its NUL, then padding to 4, by (byte length mod 4)
_STRING_TAILS = (b"\x00" * 4, b"\x00" * 3, b"\x00" * 2, b"\x00")


def _string4(text: str) -> bytes:
    """A CDR string (starting 4-aligned), without padding after it."""
    data = text.encode()
    return _U32.pack(len(data) + 1) + data + b"\x00"


def _pad(chunk: bytes, size: int = 4) -> bytes:
    """``chunk`` (starting ``size``-aligned) followed by zeros up to a multiple of ``size``."""
    return chunk + _ZEROS[:-len(chunk) % size]


class WrenchEncoder:
    """geometry_msgs/WrenchStamped as CDR bytes for one frame_id: the stamp, then force (N)
    and torque (N·m)."""

    def __init__(self, frame_id: str):
        self.frame_id = frame_id
        # stamp at 0 (8 bytes), frame_id at 8, the six doubles 8-aligned after it
        frame = _string4(frame_id)
        frame += _ZEROS[:-(8 + len(frame)) % 8]
        self._frame = frame
        self._pack = struct.Struct(f"<4siI{len(frame)}s6d").pack

    def encode(self, sec: int, nanosec: int, force: Sequence[float],
               torque: Sequence[float]) -> bytes:
        """Stamp (sec, nanosec), force (3,) N and torque (3,) N·m as floats."""
        return self._pack(_CDR_LE, sec, nanosec, self._frame, *force, *torque)


class Float64MultiArrayEncoder:
    """std_msgs/Float64MultiArray of a fixed layout and length as CDR bytes.

    dims: the layout's dimensions as (label, size, stride); count: the number of doubles of
    every message. :meth:`encode` takes the doubles."""

    def __init__(self, dims: Sequence[tuple[str, int, int]], count: int, data_offset: int = 0):
        body = bytearray(_U32.pack(len(dims)))
        for label, size, stride in dims:
            body += _pad(_string4(label))
            body += _U32.pack(size) + _U32.pack(stride)
        body += _U32.pack(data_offset)
        body += _U32.pack(count)                  # data: count doubles, 8-aligned
        body += _ZEROS[:-len(body) % 8]
        self.count = count
        self._pack = struct.Struct(f"<{4 + len(body)}s{count}d").pack
        self._prefix = _CDR_LE + bytes(body)

    def encode(self, *values: float) -> bytes:
        return self._pack(self._prefix, *values)


class StatusEncoder:
    """diagnostic_msgs/DiagnosticStatus as CDR bytes from a status record: anything with
    ``level`` (0-3), ``name``, ``message``, ``hardware_id`` and ``pairs`` (the key-values as
    (key, value) text pairs), such as :class:`~.node_outputs.StatusFields`."""

    def __init__(self) -> None:
        self._keys: dict[str, bytes] = {}   # key -> its padded CDR string (keys are few)

    def encode(self, status: Any) -> bytes:
        pairs = status.pairs
        parts = [_CDR_LE, bytes((status.level, 0, 0, 0)), _pad(_string4(status.name)),
                 _pad(_string4(status.message)), _pad(_string4(status.hardware_id)),
                 _U32.pack(len(pairs))]
        keys, pack, tails = self._keys, _U32.pack, _STRING_TAILS
        for key, value in pairs:
            chunk = keys.get(key)
            if chunk is None:
                if len(keys) > 1000:  # bounded, whatever keys come
                    keys.clear()
                chunk = keys[key] = _pad(_string4(key))
            data = value.encode()
            n = len(data)
            parts += (chunk, pack(n + 1), data, tails[n & 3])
        out = b"".join(parts)
        if pairs:  # no padding after the last string: only its NUL
            out = out[:len(out) - len(parts[-1]) + 1]
        return out
