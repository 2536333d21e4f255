"""Reading rosbag2 bags (MCAP and sqlite3) through the ``rosbags`` reader.

What a bag may hold, by role and default topic (relative names; a bag recorded on a robot usually
has them with a leading slash or under a namespace, and both are found):

* ``joint_states`` (default topic ``joint_states``, sensor_msgs/msg/JointState): positions
  (rad, m), velocities (rad/s, m/s), efforts (N·m, N);
* ``joint_efforts`` (``joint_efforts``, sensor_msgs/msg/JointState, optional): efforts alone,
  matched to joint states by stamp;
* ``robot_description`` (``robot_description``, std_msgs/msg/String, optional: ``--urdf FILE``
  instead): URDF text;
* ``reference`` (``ground_truth/wrench``, geometry_msgs/msg/WrenchStamped, optional): force the
  robot applies, world frame, N;
* ``parameters`` (``ground_truth/parameters``, std_msgs/msg/String, optional): ground truth as
  JSON (see :mod:`.ground_truth`);
* ``odometry`` (``odometry``, nav_msgs/msg/Odometry) and ``imu`` (``imu``, sensor_msgs/msg/Imu),
  a moving base's inputs (``base.source: odometry``): when no topic of that name exists and the
  bag holds exactly one topic of that type, that one is taken.

Messages come from the ``rosbags`` reader (by log time, equal times in file order) in batches of
:data:`BATCH` messages, about a storage chunk's worth. A batch of JointState messages with one
layout is decoded as one array by :class:`~.cdr.JointStateDecoder` into one
:class:`~interaction_estimator.core.samples.SampleBlock`; separate efforts are paired with the
joint states by :class:`~.effort_matching.EffortMatcher`, the node's own matcher, fed in
recorded order.

Errors a user can cause (missing, truncated or empty bag, no joint states, no efforts, a topic of
the wrong type, unreadable ground truth) raise :class:`BagError` with a message that names what
was found and what was expected.
"""
from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from ..core.base import ImuMessage, OdometryMessage
from ..core.samples import Sample, SampleBlock
from .cdr import (
    IMU,
    JOINT_STATE,
    ODOMETRY,
    STRING,
    WRENCH_STAMPED,
    JointStateDecoder,
    decode_imu_many,
    decode_odometry_many,
    decode_string,
    decode_wrench_stamped_many,
    imu_fields,
    odometry_fields,
    stamp_seconds,
)
from .effort_matching import EffortMatcher, efforts_in_order
from .ground_truth import TRUTH_METADATA_KEY, BagError, GroundTruth, ReferenceWrench

ROLE_TYPES: dict[str, str] = {
    "joint_states": JOINT_STATE,
    "joint_efforts": JOINT_STATE,
    "robot_description": STRING,
    "reference": WRENCH_STAMPED,
    "parameters": STRING,
    "odometry": ODOMETRY,
    "imu": IMU,
}
# roles found by type when no topic has their name and exactly one topic has their type
_BY_TYPE = ("odometry", "imu")

_EFFORT_PROBE = 20  # joint states looked at to decide whether the bag carries efforts at all
BATCH = 2000        # messages per batch read (a 1 MiB MCAP chunk holds ~2500 10-joint states)
_EMPTY = np.zeros(0)


@dataclass(frozen=True)
class TopicNames:
    """Topic of each role (see the module table). Relative names also match ``/name`` and
    ``/<namespace>/name``; a name starting with ``/`` matches only itself."""

    joint_states: str = "joint_states"
    joint_efforts: str = "joint_efforts"
    robot_description: str = "robot_description"
    reference: str = "ground_truth/wrench"
    parameters: str = "ground_truth/parameters"
    odometry: str = "odometry"
    imu: str = "imu"

    @classmethod
    def roles(cls) -> tuple[str, ...]:
        return tuple(ROLE_TYPES)

    def with_overrides(self, pairs: Sequence[str]) -> TopicNames:
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
    odometry: str | None = None
    imu: str | None = None


def _short(exc: BaseException) -> str:
    text = str(exc).strip() or type(exc).__name__
    return text if len(text) < 300 else text[:297] + "..."


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
            if not found and role in _BY_TYPE:
                found = [t for t, (ty, _) in topics.items() if ty == ROLE_TYPES[role]]
                if len(found) > 1:
                    raise BagError(f"{where}: no {role} topic {wanted!r}, and several "
                                   f"{ROLE_TYPES[role]} topics: {sorted(found)}; name one with "
                                   f"--topics {role}=TOPIC")
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
            reference=ref, parameters=pick("parameters", self.names.parameters, False),
            odometry=pick("odometry", self.names.odometry, False),
            imu=pick("imu", self.names.imu, False))
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

    def _messages(self, *topics: str) -> Iterator[tuple[Any, int, bytes]]:
        """(connection, log time ns, CDR bytes) of the messages on ``topics``, in the reader's
        order (log time; equal times in file order)."""
        connections = [c for t in topics for c in self._connections[t]]
        try:
            yield from self._reader.messages(connections=connections)
        except BagError:
            raise
        except Exception as exc:
            raise BagError(f"bag {str(self.path)!r} cannot be read past some point on "
                           f"{', '.join(map(repr, topics))} (truncated or damaged?): "
                           f"{_short(exc)}") from None

    def _topic_batches(self, topic: str, size: int = BATCH
                       ) -> Iterator[tuple[list[int], list[bytes]]]:
        """([log time ns], [CDR bytes]) of the messages on ``topic``, in the order of
        :meth:`_messages`, in batches of ``size``."""
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

    def _topic_messages(self, topic: str) -> Iterator[tuple[int, bytes]]:
        """(log time ns, CDR bytes) of the messages on ``topic`` (see :meth:`_messages`)."""
        for _, log_ns, raw in self._messages(topic):
            yield log_ns, raw if isinstance(raw, bytes) else bytes(raw)

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

    def base_messages(self, imu: bool = True) -> Iterator[OdometryMessage | ImuMessage]:
        """The odometry (and, with ``imu``, IMU) messages in recorded order, as the core's
        message records (a zero stamp is replaced by the log time). Raises BagError when the
        bag has no odometry topic, or no IMU topic while ``imu`` is asked for."""
        odometry, imu_topic = self.info.odometry, self.info.imu if imu else None
        where = f"bag {str(self.path)!r}"
        if odometry is None:
            raise BagError(f"{where} has no odometry topic {self.names.odometry!r} (nor exactly "
                           f"one {ODOMETRY} topic); expected one for base.source: odometry "
                           "(name it with --topics odometry=TOPIC)")
        if imu and imu_topic is None:
            raise BagError(f"{where} has no IMU topic {self.names.imu!r} (nor exactly one {IMU} "
                           "topic); expected one for base.imu: true (name it with --topics "
                           "imu=TOPIC, or set base.imu: false to take roll, pitch and rates "
                           "from the odometry)")
        topics = [odometry] + ([imu_topic] if imu_topic else [])
        topic_of = {c.id: t for t in topics for c in self._connections[t]}
        pending: list[tuple[str, int, bytes]] = []

        def flush() -> Iterator[OdometryMessage | ImuMessage]:
            # consecutive messages of one topic decoded as a batch, in recorded order
            i = 0
            while i < len(pending):
                j = i
                while j < len(pending) and pending[j][0] == pending[i][0]:
                    j += 1
                yield from base_records(pending[i][0] == odometry,
                                         [p[1] for p in pending[i:j]],
                                         [p[2] for p in pending[i:j]])
                i = j
            pending.clear()

        for conn, log_ns, raw in self._messages(*topics):
            pending.append((topic_of[conn.id], log_ns,
                            raw if isinstance(raw, bytes) else bytes(raw)))
            if len(pending) >= BATCH:
                yield from flush()
        yield from flush()

    def samples(self, stamp_tolerance: float = 0.0005, separate_efforts: bool | None = None,
                model_joints: Iterable[str] | None = None) -> Iterator[Sample]:
        """Joint states in recorded order as Samples (time s = header stamp; a zero stamp is
        replaced by the log time and flagged ``stamp_from_receive``).

        separate_efforts: take efforts from the joint_efforts topic (matched by stamp within
        ``stamp_tolerance`` s); None: only when the joint states carry none. model_joints: the
        joints that need an effort then (default: every joint of the state).
        """
        for block in self.sample_blocks(stamp_tolerance, separate_efforts, model_joints):
            for i in range(len(block)):
                yield block.sample(i)

    def sample_blocks(self, stamp_tolerance: float = 0.0005,
                      separate_efforts: bool | None = None,
                      model_joints: Iterable[str] | None = None) -> Iterator[SampleBlock]:
        """The joint states of :meth:`samples`, in recorded order, as blocks of consecutive
        messages with one layout (a block per batch read, where the messages allow; one
        message per block otherwise)."""
        if separate_efforts is None:
            separate_efforts = not self.efforts_in_states
        if separate_efforts:
            if self.info.joint_efforts is None:
                raise BagError(f"bag {str(self.path)!r} has no joint_efforts topic "
                               f"{self.names.joint_efforts!r}; expected one because "
                               "input.separate_efforts is true")
            yield from self._matched_blocks(stamp_tolerance, model_joints)
            return
        decoder = JointStateDecoder()
        for log_times, raws in self._topic_batches(self.info.joint_states):
            if decoder._same is None and raws:   # the first message teaches the layout
                yield self._one_block(log_times[0], decoder.fields(raws[0]))
                log_times, raws = log_times[1:], raws[1:]
            whole = decoder.block_many(raws)
            if whole is not None:
                secs, nsecs, _, names, block = whole
                sec, nsec = np.array(secs, np.int64), np.array(nsecs, np.int64)
                unstamped = (sec == 0) & (nsec == 0)
                # stamp_seconds of every stamp, as one array (the same arithmetic)
                t = stamp_seconds(sec.astype(float), nsec.astype(float))
                if unstamped.any():   # unstamped: the log (receive) time instead
                    t[unstamped] = np.asarray(log_times, float)[unstamped] * 1e-9
                yield SampleBlock(t, names, block[:, 0], block[:, 1], block[:, 2], unstamped)
                continue
            for log_ns, fields in zip(log_times, decoder.fields_many(raws)):
                yield self._one_block(log_ns, fields)

    @staticmethod
    def _time(log_ns: int, sec: int, nsec: int) -> tuple[float, bool]:
        """(time s, stamp_from_receive) of a message: its stamp, or the log (receive) time
        when the stamp is zero."""
        if sec == 0 and nsec == 0:
            return log_ns * 1e-9, True
        return stamp_seconds(sec, nsec), False

    def _one_block(self, log_ns: int, fields: tuple) -> SampleBlock:
        sec, nsec, _, names, position, velocity, effort = fields
        t, unstamped = self._time(log_ns, sec, nsec)
        return SampleBlock.of(Sample(t, names, position, velocity, effort, unstamped))

    def _matched_blocks(self, tolerance: float, model_joints: Iterable[str] | None
                        ) -> Iterator[SampleBlock]:
        """Joint states with the efforts of the joint_efforts topic, paired by
        :class:`~.effort_matching.EffortMatcher` as the node pairs them, both topics fed in
        recorded order. A state without a matching effort (or whose effort message lacks a
        needed joint) gets no efforts: the pipeline rejects it as ``missing_effort``."""
        states, efforts = self.info.joint_states, self.info.joint_efforts
        assert efforts is not None
        joints = None if model_joints is None else tuple(model_joints)
        matcher: EffortMatcher[tuple, tuple] = EffortMatcher(tolerance)
        decoders = {states: JointStateDecoder(), efforts: JointStateDecoder()}
        topic_of = {c.id: t for t in (states, efforts) for c in self._connections[t]}

        def blocks(pairs: list) -> Iterator[SampleBlock]:
            for pair in pairs:
                log_ns, (sec, nsec, _, names, position, velocity, _) = pair.state
                effort = _EMPTY
                if pair.effort is not None:
                    _, _, _, enames, _, _, evalues = pair.effort
                    values, _ = efforts_in_order(names, enames, evalues, joints)
                    if values is not None:
                        effort = np.array(values)
                t, unstamped = self._time(log_ns, sec, nsec)
                yield SampleBlock.of(Sample(t, names, position, velocity, effort, unstamped))

        for conn, log_ns, raw in self._messages(states, efforts):
            topic = topic_of[conn.id]
            fields = decoders[topic].fields(raw)
            t, _ = self._time(log_ns, fields[0], fields[1])
            if topic == states:
                yield from blocks(matcher.add_state(t, (log_ns, fields)))
            else:
                yield from blocks(matcher.add_effort(t, fields))
        yield from blocks(matcher.flush())

    def close(self) -> None:
        reader = getattr(self, "_reader", None)
        if reader is not None and reader.is_open:
            reader.close()

    def __enter__(self) -> RecordedBag:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()


def base_records(odometry: bool, log_ns: list[int], raws: list[bytes]
                  ) -> Iterator[OdometryMessage | ImuMessage]:
    """Odometry or IMU messages of one topic, decoded as a batch, as the core's records; a
    zero stamp is replaced by the log (receive) time ``log_ns``. The node's reader too."""
    batch = decode_odometry_many(raws) if odometry else decode_imu_many(raws)
    times = np.where(batch.unstamped, np.asarray(log_ns, float) * 1e-9, batch.time)
    for k in range(len(raws)):
        row = batch.values[k]
        if odometry:
            p, o, pc, lin, ang, tc = odometry_fields(row)
            yield OdometryMessage(float(times[k]), batch.frame_id[k], batch.child_frame_id[k],
                                  p, o, lin, ang, pc, tc)
        else:
            o, oc, w, wc, a, ac = imu_fields(row)
            yield ImuMessage(float(times[k]), batch.frame_id[k], o, w, a, oc, wc, ac)
