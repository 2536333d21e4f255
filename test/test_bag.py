"""bag.py against outside references: the rosbags (de)serializer, ROS 2's own serializer (rclpy,
Fast CDR typesupport), and a second storage format (sqlite3 beside MCAP)."""
from __future__ import annotations

import json
import os

import numpy as np
import pytest
from rosbags.rosbag2 import StoragePlugin, Writer
from rosbags.typesys import Stores, get_typestore

from interaction_estimator.io.bag import RecordedBag, TopicNames
from interaction_estimator.io.bag_writer import BagWriter
from interaction_estimator.io.cdr import (
    JOINT_STATE,
    STRING,
    WRENCH_STAMPED,
    JointStateDecoder,
    JointStateEncoder,
    decode_wrench_stamped,
    encode_string,
    encode_wrench_stamped,
)
from interaction_estimator.io.ground_truth import BagError, GroundTruth

TS = get_typestore(Stores.ROS2_JAZZY)
JS = TS.types[JOINT_STATE]
HEADER = TS.types["std_msgs/msg/Header"]
TIME = TS.types["builtin_interfaces/msg/Time"]


def _random_joint_state(rng: np.random.Generator, n_names: int, frame_len: int,
                        empty: tuple[bool, bool, bool]):
    names = ["j" * int(rng.integers(1, 9)) + str(i) for i in range(n_names)]
    arrays = [np.zeros(0) if e else rng.normal(size=n_names) for e in empty]
    return JS(header=HEADER(stamp=TIME(sec=int(rng.integers(0, 2**31 - 1)),
                                       nanosec=int(rng.integers(0, 10**9))),
                            frame_id="f" * frame_len),
              name=names, position=arrays[0], velocity=arrays[1], effort=arrays[2])


def _cases():
    rng = np.random.default_rng(7)
    for n in (0, 1, 3, 10):
        for frame_len in range(0, 9):
            for empty in ((False, False, False), (False, True, False), (True, True, True),
                          (False, False, True)):
                yield _random_joint_state(rng, n, frame_len, empty)


def _same(rec, msg) -> None:
    assert rec.sec == msg.header.stamp.sec and rec.nanosec == msg.header.stamp.nanosec
    assert rec.frame_id == msg.header.frame_id
    assert rec.names == tuple(msg.name)
    for mine, ref in ((rec.position, msg.position), (rec.velocity, msg.velocity),
                      (rec.effort, msg.effort)):
        np.testing.assert_array_equal(mine, np.asarray(ref, float))


def test_fast_decoder_equals_rosbags_deserializer():
    dec = JointStateDecoder()
    count = 0
    for msg in _cases():
        raw = bytes(TS.serialize_cdr(msg, JOINT_STATE))
        # reference: rosbags' generic CDR deserializer on the same bytes
        ref = TS.deserialize_cdr(raw, JOINT_STATE)
        _same(dec.decode(raw), ref)
        count += 1
    assert count == 4 * 9 * 4
    assert dec.fallbacks == 0  # every case took the fast path


def test_fast_decoder_reads_ros2_serialized_bytes():
    # reference: ROS 2's own serializer (Fast CDR typesupport through rclpy), which leaves
    # padding bytes undefined and appends slack: the decoder must ignore both
    from rclpy.serialization import serialize_message
    from sensor_msgs.msg import JointState
    dec = JointStateDecoder()
    for msg in _cases():
        ros = JointState()
        ros.header.stamp.sec, ros.header.stamp.nanosec = msg.header.stamp.sec, \
            msg.header.stamp.nanosec
        ros.header.frame_id = msg.header.frame_id
        ros.name = list(msg.name)
        ros.position, ros.velocity, ros.effort = (msg.position.tolist(), msg.velocity.tolist(),
                                                  msg.effort.tolist())
        _same(dec.decode(serialize_message(ros)), msg)
    assert dec.fallbacks == 0


def _stream(rng: np.random.Generator, count: int):
    """JointStates in runs of 7 that keep their frame_id, names and array lengths (new stamps
    and values), each run changing one of them: frame_id, a joint's name, the number of
    joints, a missing effort or velocity array."""
    layouts = [(3, 2, (False, False, False)), (3, 2, (False, False, True)),
               (4, 0, (False, False, False)), (10, 5, (False, False, False)),
               (1, 8, (False, False, False)), (10, 5, (False, True, False)),
               (10, 6, (False, False, False))]
    for k in range(count):
        run = k // 7
        n, frame_len, empty = layouts[run % len(layouts)]
        msg = _random_joint_state(rng, n, frame_len, empty)
        msg.name = [f"joint{i}" for i in range(n)]
        if run % 4 == 3:   # same lengths, another name
            msg.name[0] = "renamed"
        yield msg


def test_decoder_stream_with_layout_changes_equals_rosbags():
    # reference: rosbags' generic CDR deserializer on the same bytes, message by message, with
    # one decoder for the whole stream (it reads a message in one step when its layout repeats)
    dec = JointStateDecoder()
    for msg in _stream(np.random.default_rng(5), 300):
        raw = bytes(TS.serialize_cdr(msg, JOINT_STATE))
        ref = TS.deserialize_cdr(raw, JOINT_STATE)
        rec = dec.decode(raw)
        _same(rec, ref)
        for arr in (rec.position, rec.velocity, rec.effort):
            assert arr.dtype == np.float64 and (arr.size == 0 or arr.flags.aligned)
    assert dec.fallbacks == 0
    assert 100 < dec.quick < 300  # repeated layouts took the one-step read, changes did not


def test_decoder_stream_of_ros2_serialized_bytes():
    # reference: the messages given to ROS 2's own serializer (Fast CDR through rclpy), whose
    # padding bytes are left undefined: equal bytes give equal values, others a full decode
    from rclpy.serialization import serialize_message
    from sensor_msgs.msg import JointState
    dec = JointStateDecoder()
    for msg in _stream(np.random.default_rng(6), 200):
        ros = JointState()
        ros.header.stamp.sec, ros.header.stamp.nanosec = msg.header.stamp.sec, \
            msg.header.stamp.nanosec
        ros.header.frame_id = msg.header.frame_id
        ros.name = list(msg.name)
        ros.position, ros.velocity, ros.effort = (msg.position.tolist(), msg.velocity.tolist(),
                                                  msg.effort.tolist())
        _same(dec.decode(serialize_message(ros)), msg)
    assert dec.fallbacks == 0


def test_big_endian_bytes_fall_back_to_the_generic_deserializer():
    msg = next(iter(_cases()))
    msg = _random_joint_state(np.random.default_rng(3), 4, 3, (False, False, False))
    raw = bytes(TS.serialize_cdr(msg, JOINT_STATE, little_endian=False))
    dec = JointStateDecoder()
    _same(dec.decode(raw), msg)  # reference: the message that was serialized
    assert dec.fallbacks == 1


def test_fast_encoders_are_byte_identical_to_rosbags():
    enc = JointStateEncoder()
    for msg in _cases():
        mine = enc.encode(msg.header.stamp.sec, msg.header.stamp.nanosec, msg.header.frame_id,
                          msg.name, msg.position, msg.velocity, msg.effort)
        assert mine == bytes(TS.serialize_cdr(msg, JOINT_STATE))  # reference: rosbags
    for frame in ("", "odom", "abcdefg"):
        w = TS.types[WRENCH_STAMPED](
            header=HEADER(stamp=TIME(sec=5, nanosec=7), frame_id=frame),
            wrench=TS.types["geometry_msgs/msg/Wrench"](
                force=TS.types["geometry_msgs/msg/Vector3"](x=1.5, y=-2.0, z=3.25),
                torque=TS.types["geometry_msgs/msg/Vector3"](x=0.0, y=0.5, z=-0.125)))
        raw = encode_wrench_stamped(5, 7, frame, (1.5, -2.0, 3.25), (0.0, 0.5, -0.125))
        assert raw == bytes(TS.serialize_cdr(w, WRENCH_STAMPED))
        sec, nsec, f, values = decode_wrench_stamped(raw)
        assert (sec, nsec, f) == (5, 7, frame)
        np.testing.assert_array_equal(values, [1.5, -2.0, 3.25, 0.0, 0.5, -0.125])
    text = "<robot name='x'/>"
    assert encode_string(text) == bytes(TS.serialize_cdr(TS.types[STRING](data=text), STRING))


# --------------------------------------------------------------------------------------------
# bags on disk


def _write_bag(path, storage="mcap", n=50, names=("a", "b"), effort=True, states_topic=
               "/joint_states", states_type=JOINT_STATE, extra=(), truth=None):
    enc = JointStateEncoder()
    with BagWriter(path, storage) as w:
        for topic, msgtype, raw in extra:
            w.write(topic, msgtype, 0, raw)
        if truth is not None:
            w.write("/ground_truth/parameters", STRING, 0, encode_string(truth))
        for k in range(n):
            t = 1.0 + k * 1e-3
            sec, nsec = 1, k * 1_000_000
            if states_type == JOINT_STATE:
                raw = enc.encode(sec, nsec, "", names, np.full(len(names), 0.1 * k),
                                 np.full(len(names), 0.2), np.full(len(names), 0.3 * k)
                                 if effort else np.zeros(0))
            else:
                raw = encode_string(f"not a joint state {k}")
            w.write(states_topic, states_type, t, raw)


def test_mcap_and_sqlite3_bags_read_back_identically(tmp_path):
    truth = GroundTruth({"mass": 1.0, "damping": 2.0, "stiffness": 3.0, "static_force": 4.0},
                        {"scenario": "test"}).to_json()
    for storage in ("mcap", "sqlite3"):
        _write_bag(tmp_path / storage, storage, truth=truth)
    got = {}
    for storage in ("mcap", "sqlite3"):
        with RecordedBag(tmp_path / storage) as bag:
            assert bag.info.storage == storage
            got[storage] = [(s.time, s.names, s.position.tolist(), s.velocity.tolist(),
                             s.effort.tolist()) for s in bag.samples()]
            assert bag.truth().parameters["stiffness"] == 3.0
    # reference: the second storage format holds the same records
    assert got["mcap"] == got["sqlite3"]
    assert len(got["mcap"]) == 50
    assert got["mcap"][7][0] == 1 + 7_000_000 * 1e-9
    assert got["mcap"][7][4] == pytest.approx([2.1, 2.1])


def test_samples_match_rosbags_reader_and_deserializer(tmp_path):
    _write_bag(tmp_path / "b", n=30, names=("x", "yy", "zzz"))
    from rosbags.rosbag2 import Reader
    ref = []
    with Reader(tmp_path / "b") as r:  # reference: rosbags' own reader and deserializer
        for conn, _, raw in r.messages():
            if conn.topic == "/joint_states":
                m = TS.deserialize_cdr(raw, JOINT_STATE)
                ref.append((m.header.stamp.sec + m.header.stamp.nanosec * 1e-9,
                            tuple(m.name), m.effort.tolist()))
    with RecordedBag(tmp_path / "b") as bag:
        mine = [(s.time, s.names, s.effort.tolist()) for s in bag.samples()]
    assert mine == ref


def test_separate_efforts_are_matched_by_stamp(tmp_path):
    enc = JointStateEncoder()
    with BagWriter(tmp_path / "b") as w:
        for k in range(20):
            nsec = k * 1_000_000
            w.write("/joint_states", JOINT_STATE, 1 + k * 1e-3,
                    enc.encode(1, nsec, "", ("a", "b"), np.zeros(2), np.zeros(2), np.zeros(0)))
            if k != 5:  # one effort missing; efforts in the other name order
                w.write("/joint_efforts", JOINT_STATE, 1 + k * 1e-3,
                        enc.encode(1, nsec + 100_000, "", ("b", "a"), np.zeros(0), np.zeros(0),
                                   np.array([2.0 * k, 1.0 * k])))
    with RecordedBag(tmp_path / "b") as bag:
        assert not bag.efforts_in_states
        samples = list(bag.samples(stamp_tolerance=0.0005))
    assert samples[3].effort.tolist() == [3.0, 6.0]  # by name: a then b
    assert samples[5].effort.size == 0  # nothing within the tolerance: rejected downstream
    with RecordedBag(tmp_path / "b") as bag:
        assert all(s.effort.size == 0 for s in bag.samples(stamp_tolerance=0.00005))


def test_zero_stamps_take_the_log_time_and_say_so(tmp_path):
    # reference: the log (receive) times written into the bag, as the node uses receive time
    enc = JointStateEncoder()
    with BagWriter(tmp_path / "b") as w:
        for k in range(5):
            w.write("/joint_states", JOINT_STATE, 2_000_000_000 + k * 1_000_000,
                    enc.encode(0, 0, "", ("a",), [0.0], [0.0], [1.0]))
    with RecordedBag(tmp_path / "b") as bag:
        samples = list(bag.samples())
    # ns * 1e-9, the node's conversion of its clock's nanoseconds
    assert [s.time for s in samples] == [(2_000_000_000 + k * 1_000_000) * 1e-9
                                         for k in range(5)]
    assert all(s.stamp_from_receive for s in samples)


def test_namespaced_topics_and_overrides(tmp_path):
    _write_bag(tmp_path / "b", states_topic="/marten/joint_states")
    with RecordedBag(tmp_path / "b") as bag:
        assert bag.info.joint_states == "/marten/joint_states"
    _write_bag(tmp_path / "c", states_topic="/x/joint_states",
               extra=[("/y/joint_states", JOINT_STATE,
                       JointStateEncoder().encode(1, 0, "", ("a",), [0.0], [0.0], [0.0]))])
    with pytest.raises(BagError, match=r"several topics match joint_states"):
        RecordedBag(tmp_path / "c")
    names = TopicNames().with_overrides(["joint_states=/y/joint_states"])
    with RecordedBag(tmp_path / "c", names) as bag:
        assert bag.info.joint_states == "/y/joint_states"
    with pytest.raises(BagError, match=r"unknown role 'joints'.*expected one of joint_states"):
        TopicNames().with_overrides(["joints=/a"])
    with pytest.raises(BagError, match=r"is not ROLE=TOPIC"):
        TopicNames().with_overrides(["joint_states"])


# --------------------------------------------------------------------------------------------
# errors a user can cause


def test_missing_bag(tmp_path):
    with pytest.raises(BagError, match=r"does not exist; expected a rosbag2 directory"):
        RecordedBag(tmp_path / "nope")
    (tmp_path / "dir").mkdir()
    with pytest.raises(BagError, match=r"has no metadata.yaml"):
        RecordedBag(tmp_path / "dir")
    (tmp_path / "file.txt").write_text("x")
    with pytest.raises(BagError, match=r"suffix '.txt'; expected a rosbag2 directory"):
        RecordedBag(tmp_path / "file.txt")


@pytest.mark.parametrize("storage", ["mcap", "sqlite3"])
def test_truncated_bag(tmp_path, storage):
    _write_bag(tmp_path / "b", storage, n=2000)
    data = [p for p in (tmp_path / "b").iterdir() if p.suffix in (".mcap", ".db3")][0]
    os.truncate(data, data.stat().st_size // 2)
    with pytest.raises(BagError, match=r"cannot be (opened|read).*truncated or damaged"):
        with RecordedBag(tmp_path / "b") as bag:
            list(bag.samples())


def test_empty_bag(tmp_path):
    path = tmp_path / "empty"
    with Writer(path, version=9, storage_plugin=StoragePlugin.MCAP) as w:
        w.add_connection("/joint_states", JOINT_STATE, typestore=TS)
    with pytest.raises(BagError, match=r"holds no messages; expected joint states"):
        RecordedBag(path)


def test_no_joint_states(tmp_path):
    with BagWriter(tmp_path / "b") as w:
        w.write("/chatter", STRING, 0, encode_string("hello"))
    with pytest.raises(BagError, match=r"has no joint_states topic 'joint_states'.*/chatter"):
        RecordedBag(tmp_path / "b")


def test_wrong_topic_type(tmp_path):
    _write_bag(tmp_path / "b", states_type=STRING)
    with pytest.raises(BagError, match=r"'/joint_states' \(joint_states\) is of type "
                                       r"std_msgs/msg/String; expected sensor_msgs/msg/JointState"):
        RecordedBag(tmp_path / "b")


def test_no_efforts(tmp_path):
    _write_bag(tmp_path / "b", effort=False)
    with pytest.raises(BagError, match=r"carry no efforts.*expected efforts"):
        RecordedBag(tmp_path / "b")


def test_bad_ground_truth(tmp_path):
    _write_bag(tmp_path / "b", truth="{not json")
    with RecordedBag(tmp_path / "b") as bag, pytest.raises(BagError, match=r"not valid JSON"):
        bag.truth()
    _write_bag(tmp_path / "c", truth=json.dumps({"format": "other/1"}))
    with RecordedBag(tmp_path / "c") as bag, pytest.raises(BagError, match=r"format 'other/1'"):
        bag.truth()


def test_writer_refuses_existing_path_and_leaves_nothing_on_error(tmp_path):
    (tmp_path / "exists").mkdir()
    with pytest.raises(BagError, match=r"exists already"):
        BagWriter(tmp_path / "exists")
    with pytest.raises(RuntimeError):
        with BagWriter(tmp_path / "b") as w:
            w.write("/chatter", STRING, 0, encode_string("x"))
            raise RuntimeError("interrupted")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["exists"]


# --------------------------------------------------------------------------------------------
# batches of the rosbags reader, against that reader message by message


def _raw_bag(path, compression=None, order=None, n=9000):
    """A bag written by rosbags' own writer (1 MiB chunks): joint states of 10 joints at 1 kHz
    beside a second topic; ``order`` permutes the log times (out of order in a chunk, equal
    times, overlapping chunks); ``compression``: rosbags' CompressionMode (STORAGE: zstd
    chunks, MESSAGE: each message compressed by rosbag2)."""
    from rosbags.rosbag2 import CompressionFormat
    enc = JointStateEncoder()
    names = tuple(f"joint{i}" for i in range(10))
    rng = np.random.default_rng(1)
    times = 1_000_000_000 + np.arange(n) * 1_000_000
    if order is not None:
        times = order(times)
    w = Writer(path, version=9, storage_plugin=StoragePlugin.MCAP)
    if compression is not None:
        w.set_compression(compression, CompressionFormat.ZSTD)
    with w:
        js = w.add_connection("/joint_states", JOINT_STATE, typestore=TS)
        other = w.add_connection("/chatter", STRING, typestore=TS)
        for k, t in enumerate(times.tolist()):
            w.write(js, t, enc.encode(1 + k // 1000, (k % 1000) * 1_000_000, "", names,
                                      rng.normal(size=10), rng.normal(size=10),
                                      rng.normal(size=10)))
            if k % 3 == 0:
                w.write(other, t, encode_string(f"message {k}"))


def _swap_neighbours(times):
    """Log times out of order inside the first chunk (it holds about 2500 messages)."""
    out = times.copy()
    out[100:400:2], out[101:400:2] = times[101:400:2], times[100:400:2]
    out[500:520] = times[519:499:-1]
    out[700:710] = out[700]   # equal log times: file order kept
    return out


def _late_tail(times):
    out = times.copy()
    out[-50:] = times[10:60]  # the last chunk reaches back into the first one's time span
    return out


@pytest.mark.parametrize("case", ["plain", "zstd chunks", "out of order", "overlapping chunks",
                                  "message compression"])
def test_batched_reading_equals_rosbags_reader(tmp_path, case):
    from rosbags.rosbag2 import CompressionMode, Reader
    kind = {"plain": {}, "zstd chunks": {"compression": CompressionMode.STORAGE},
            "out of order": {"order": _swap_neighbours},
            "overlapping chunks": {"order": _late_tail},
            "message compression": {"compression": CompressionMode.MESSAGE}}[case]
    _raw_bag(tmp_path / "b", **kind)
    with Reader(tmp_path / "b") as r:  # reference: rosbags' reader, its order and its bytes
        conns = [c for c in r.connections if c.topic == "/joint_states"]
        ref = [(t, bytes(raw)) for _, t, raw in r.messages(connections=conns)]
    with RecordedBag(tmp_path / "b") as bag:
        batches = list(bag._topic_batches("/joint_states"))
        blocks = list(bag.sample_blocks())
        samples = list(bag.samples())
    assert len(batches) >= 4 and len(blocks) >= 4       # several batches, read as blocks
    mine = [(t, raw) for times, raws in batches for t, raw in zip(times, raws)]
    assert len(mine) == len(ref) == 9000
    assert mine == ref
    assert sum(len(b) for b in blocks) == 9000
    # the samples are those messages, in that order (reference: rosbags' deserializer)
    for k in (0, 1, 777, 2000, 4500, 8999):
        m = TS.deserialize_cdr(ref[k][1], JOINT_STATE)
        s = samples[k]
        assert s.time == m.header.stamp.sec + m.header.stamp.nanosec * 1e-9
        assert s.names == tuple(m.name)
        for mine_arr, ref_arr in ((s.position, m.position), (s.velocity, m.velocity),
                                  (s.effort, m.effort)):
            np.testing.assert_array_equal(mine_arr, ref_arr)


def test_damaged_chunk_is_refused_clearly(tmp_path):
    _raw_bag(tmp_path / "b", n=3000)
    data = next((tmp_path / "b").glob("*.mcap"))
    raw = bytearray(data.read_bytes())
    # a joint state's record in the first (uncompressed) chunk: MCAP Message record = opcode
    # 0x05, u64 content length (22 bytes of header + the CDR message); its length is set far
    # beyond the end of the chunk
    size = len(JointStateEncoder().encode(1, 0, "", tuple(f"joint{i}" for i in range(10)),
                                          np.zeros(10), np.zeros(10), np.zeros(10)))
    at = raw.find(b"\x05" + (size + 22).to_bytes(8, "little"), 100_000)
    assert 100_000 < at < 1_000_000
    raw[at + 1:at + 9] = (10 ** 9).to_bytes(8, "little")
    data.write_bytes(bytes(raw))
    with pytest.raises(BagError, match=r"cannot be read past some point on '/joint_states' "
                                       r"\(truncated or damaged\?\)"):
        with RecordedBag(tmp_path / "b") as bag:
            list(bag.samples())


@pytest.mark.parametrize("frames", [("world",), ("odom", "base_link_long_name"), ("",)])
def test_reference_wrenches_equal_rosbags_deserializer(tmp_path, frames):
    # reference: rosbags' reader and deserializer, message by message; the bag's frame_ids
    # change in runs (read as one array per run of equal layout) or every message
    rng = np.random.default_rng(8)
    n = 3000
    enc = JointStateEncoder()
    with BagWriter(tmp_path / "b") as w:
        for k in range(n):
            sec, nsec = 1 + k // 1000, (k % 1000) * 1_000_000 + int(rng.integers(0, 1000))
            frame = frames[(k // 700) % len(frames)] if k % 97 else frames[-1]
            w.write("/joint_states", JOINT_STATE, sec * 10**9 + nsec,
                    enc.encode(sec, nsec, "", ("a",), np.zeros(1), np.zeros(1), np.ones(1)))
            w.write("/ground_truth/wrench", WRENCH_STAMPED, sec * 10**9 + nsec,
                    encode_wrench_stamped(sec, nsec, frame, rng.normal(size=3) * 40,
                                          rng.normal(size=3)))
    from rosbags.rosbag2 import Reader
    with Reader(tmp_path / "b") as r:
        conns = [c for c in r.connections if c.topic == "/ground_truth/wrench"]
        msgs = [TS.deserialize_cdr(raw, WRENCH_STAMPED)
                for _, _, raw in r.messages(connections=conns)]
    with RecordedBag(tmp_path / "b") as bag:
        ref = bag.reference()
    assert ref.topic == "/ground_truth/wrench" and ref.frame_id == msgs[-1].header.frame_id
    assert ref.time.tolist() == [m.header.stamp.sec + m.header.stamp.nanosec * 1e-9
                                 for m in msgs]
    np.testing.assert_array_equal(ref.force, [[m.wrench.force.x, m.wrench.force.y,
                                               m.wrench.force.z] for m in msgs])
    np.testing.assert_array_equal(ref.torque, [[m.wrench.torque.x, m.wrench.torque.y,
                                                m.wrench.torque.z] for m in msgs])
