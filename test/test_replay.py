"""replay, report and the command line against outside references: the simulator's ground truth,
a second storage format (sqlite3 beside MCAP), the rosbags deserializer, summary.json as read by
the json module, and the real node run over DDS (a child process on this machine only)."""
from __future__ import annotations

import json
import math
import shutil
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from interaction_estimator import cli
from interaction_estimator.io.bag import RecordedBag
from interaction_estimator.io.bag_writer import BagWriter
from interaction_estimator.io.cdr import JOINT_STATE, STRING, JointStateEncoder, encode_string
from interaction_estimator.io.estimates import read_csv
from interaction_estimator.offline.report import display
from interaction_estimator.sim.recording import write_simulated_bag
from interaction_estimator.sim.simulator import simulate

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def bags(tmp_path_factory):
    """Simulated bags, written once for the module."""
    d = tmp_path_factory.mktemp("bags")
    out = {}
    toolbox = simulate("toolbox", seed=0)              # 12 s, noisy, link-side efforts
    write_simulated_bag(d / "toolbox", toolbox)
    out["toolbox"] = (d / "toolbox", toolbox)
    door = simulate("door", duration=4.5, seed=0, noise=False)
    write_simulated_bag(d / "door_clean", door)
    out["door_clean"] = (d / "door_clean", door)
    drawer = simulate("drawer", duration=3.5, seed=2)
    write_simulated_bag(d / "drawer_mcap", drawer, "mcap")
    write_simulated_bag(d / "drawer_sqlite", drawer, "sqlite3")
    out["drawer"] = (d / "drawer_mcap", drawer)
    out["drawer_sqlite"] = (d / "drawer_sqlite", drawer)
    return out


def run_cli(args, capsys) -> tuple[int, str, str]:
    try:
        code = cli.main([str(a) for a in args])
    except SystemExit as exc:  # argparse usage errors
        code = exc.code
    cap = capsys.readouterr()
    return code, cap.out, cap.err


@pytest.fixture(scope="module")
def toolbox_replay(bags, tmp_path_factory):
    out = tmp_path_factory.mktemp("toolbox") / "out"
    assert cli.main(["replay", str(bags["toolbox"][0]), "--out", str(out)]) == 0
    return out


# --------------------------------------------------------------------------------------------
# truth


def test_replay_reproduces_the_simulated_truth(toolbox_replay, bags):
    summary = json.loads((toolbox_replay / "summary.json").read_text())
    p = summary["parameters"]
    truth = bags["toolbox"][1].truth  # reference: the simulator's ground truth
    # Measured on this scenario (seed 0), with the core as of this writing: static force
    # 34.18 N vs 34.32 N, mass 3.508 kg vs 3.5 kg, damping 0.001 N·s/m and stiffness 0.10 N/m
    # (truth 0), all four converged 5.8 s after contact, force RMSE in contact 0.86 N. Earlier
    # core versions gave a 19 % mass error and 5.9 N: the bounds leave room for tuning work.
    assert p["static_force"]["truth"] == truth["static_force"]
    assert abs(p["static_force"]["relative_error"]) < 0.05
    assert abs(p["mass"]["relative_error"]) < 0.15
    assert abs(p["damping"]["final"]) < 3.0
    assert abs(p["stiffness"]["final"]) < 3 * p["stiffness"]["std"] + 5.0
    assert p["static_force"]["converged"] and p["static_force"]["time_to_convergence_s"] < 8
    assert summary["force"]["rmse_contact_N"] < 3.0
    assert summary["run"]["samples_read"] == len(bags["toolbox"][1].time)
    assert summary["run"]["samples_rejected"] == 0


def test_force_rmse_equals_numpy_on_the_bag_reference(toolbox_replay, bags):
    # reference: the bag's ground_truth/wrench read with rosbags' own reader and deserializer,
    # and the RMSE computed here with numpy from estimates.csv
    from rosbags.rosbag2 import Reader
    from rosbags.typesys import Stores, get_typestore
    ts = get_typestore(Stores.ROS2_JAZZY)
    ref = {}
    with Reader(bags["toolbox"][0]) as r:
        for conn, _, raw in r.messages():
            if conn.topic == "/ground_truth/wrench":
                m = ts.deserialize_cdr(raw, conn.msgtype)
                t = m.header.stamp.sec + m.header.stamp.nanosec * 1e-9
                ref[t] = (m.wrench.force.x, m.wrench.force.y, m.wrench.force.z)
    cols = read_csv(toolbox_replay / "estimates.csv")
    rows = [i for i, s in enumerate(cols["state"]) if s != "learning_bias"]
    contact = [i for i in rows if cols["in_contact"][i] == 1]
    est = np.column_stack([cols["force_x"], cols["force_y"], cols["force_z"]])
    truth = np.array([ref[cols["time"][i]] for i in range(len(cols["time"]))])
    def rmse(idx):
        return math.sqrt(np.mean(np.sum((est[idx] - truth[idx]) ** 2, axis=1)))
    summary = json.loads((toolbox_replay / "summary.json").read_text())
    assert summary["force"]["rmse_N"] == pytest.approx(rmse(rows), rel=1e-12)
    assert summary["force"]["rmse_contact_N"] == pytest.approx(rmse(contact), rel=1e-12)
    assert summary["force"]["matched_samples"] == len(ref)


def test_noise_free_force_follows_the_simulated_force(bags, tmp_path, capsys):
    code, out, err = run_cli(["replay", bags["door_clean"][0], "--out", tmp_path / "o"], capsys)
    assert code == 0, err
    summary = json.loads((tmp_path / "o" / "summary.json").read_text())
    # reference: the simulator's exact contact force (no noise, no bias); measured 0.20 to
    # 0.43 N RMSE over 4.5 s with a 4 to 20 N force, across core versions (the observer's
    # 1/K_O lag at contact onset dominates)
    assert summary["force"]["rmse_N"] < 1.0
    assert "force RMSE" in out


# --------------------------------------------------------------------------------------------
# storage formats, output bag, several bags


@pytest.fixture(scope="module")
def drawer_replays(bags, tmp_path_factory):
    d = tmp_path_factory.mktemp("drawer")
    assert cli.main(["replay", str(bags["drawer"][0]), "--out", str(d / "mcap"),
                     "--output-bag"]) == 0
    assert cli.main(["replay", str(bags["drawer_sqlite"][0]), "--out", str(d / "sqlite")]) == 0
    return d


def test_mcap_and_sqlite3_give_identical_estimates(drawer_replays):
    # reference: the same simulated run stored in the second storage format
    a = (drawer_replays / "mcap" / "estimates.csv").read_bytes()
    b = (drawer_replays / "sqlite" / "estimates.csv").read_bytes()
    assert a == b and len(a.splitlines()) == 3502
    from interaction_estimator.io.estimates import comparable
    sa = json.loads((drawer_replays / "mcap" / "summary.json").read_text())
    sb = json.loads((drawer_replays / "sqlite" / "summary.json").read_text())
    assert comparable(sa) == comparable(sb)
    assert (sa["source"]["storage"], sb["source"]["storage"]) == ("mcap", "sqlite3")


def test_output_bag_holds_the_estimates(drawer_replays):
    # reference: rosbags' reader and deserializer on the bag written with ROS 2's serializer
    from rosbags.rosbag2 import Reader
    from rosbags.typesys import Stores, get_typestore
    ts = get_typestore(Stores.ROS2_JAZZY)
    cols = read_csv(drawer_replays / "mcap" / "estimates.csv")
    wrench, env, status = [], [], 0
    with Reader(drawer_replays / "mcap" / "estimates_bag") as r:
        for conn, _, raw in r.messages():
            m = ts.deserialize_cdr(raw, conn.msgtype)
            if conn.topic == "/interaction_estimator/wrench":
                wrench.append((m.header.stamp.sec + m.header.stamp.nanosec * 1e-9,
                               m.wrench.force.x, m.wrench.force.y, m.wrench.force.z))
                assert m.header.frame_id == "odom"
            elif conn.topic == "/interaction_estimator/environment":
                env.append(m.data)
            else:
                status += 1
    w = np.array(wrench)
    np.testing.assert_array_equal(w[:, 0], cols["time"])
    np.testing.assert_array_equal(w[:, 1:], np.column_stack(
        [cols["force_x"], cols["force_y"], cols["force_z"]]))
    np.testing.assert_array_equal(np.array(env), np.column_stack(
        [cols[c] for c in ("mass", "damping", "stiffness", "static_force", "mass_std",
                           "damping_std", "stiffness_std", "static_force_std")]))
    assert 170 <= status <= 180  # output.status_rate 50 Hz over 3.5 s of stamps


def test_several_bags_run_in_parallel_into_subdirectories(bags, drawer_replays, tmp_path,
                                                          capsys):
    code, out, err = run_cli(["replay", bags["drawer"][0], bags["drawer_sqlite"][0],
                              tmp_path / "missing_bag", "--out", tmp_path / "many", "--jobs",
                              "2"], capsys)
    assert code == 2  # one of the three failed, and says why; the other two are complete
    assert "missing_bag' does not exist" in err
    runs = json.loads((tmp_path / "many" / "runs.json").read_text())["runs"]
    assert [r["ok"] for r in runs] == [True, True, False]
    assert sorted(p.name for p in (tmp_path / "many").iterdir()) == [
        "drawer_mcap", "drawer_sqlite", "fleet.html", "runs.json"]
    # reference: the one-bag-at-a-time replays of the same bags
    for sub, single in (("drawer_mcap", "mcap"), ("drawer_sqlite", "sqlite")):
        assert (tmp_path / "many" / sub / "estimates.csv").read_bytes() == \
            (drawer_replays / single / "estimates.csv").read_bytes()


# --------------------------------------------------------------------------------------------
# report


class _Cells(HTMLParser):
    def __init__(self):
        super().__init__()
        self.cells, self._open = [], None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "data-key" in a:
            self._open = [a["data-key"], a["data-value"], ""]

    def handle_data(self, data):
        if self._open is not None:
            self._open[2] += data

    def handle_endtag(self, tag):
        if self._open is not None and tag == "td":
            self.cells.append(tuple(self._open))
            self._open = None


def test_report_numbers_equal_summary_json(toolbox_replay):
    # reference: summary.json as parsed by the json module, and the page by html.parser
    summary = json.loads((toolbox_replay / "summary.json").read_text())
    page = (toolbox_replay / "report.html").read_text()
    parser = _Cells()
    parser.feed(page)
    assert len(parser.cells) >= 4 * 8 + 5 + 9
    keys = set()
    for key, raw, text in parser.cells:
        value = summary
        for part in key.split("."):
            value = value[part]
        assert json.loads(raw) == value, key
        assert text == display(value), key
        if isinstance(value, float):
            assert float(text) == pytest.approx(value, rel=5e-4, abs=1e-12), key
        keys.add(key)
    for p in ("mass", "damping", "stiffness", "static_force"):
        for f in ("final", "std", "truth", "error", "time_to_convergence_s"):
            assert f"parameters.{p}.{f}" in keys
    assert {"force.rmse_N", "force.rmse_contact_N", "run.samples_read"} <= keys
    assert page.count("<svg") == 4
    import re  # self-contained: every link or source points inside the page
    # the plots are drawn from some of the samples, and their captions say so
    n = summary["run"]["samples_estimated"]
    assert n > 1500
    captions = re.findall(r"<figcaption>(.*?)</figcaption>", page, re.S)
    assert len(captions) == 4
    assert [f"thinned for drawing: of the {n:,} samples" in c for c in captions[:2]] == [True,
                                                                                          True]
    assert "thinned" not in captions[2]   # the health timeline draws every change
    refs = re.findall(r'(?:href|src)\s*=\s*"([^"]*)"', page)
    assert all(r.startswith("#") for r in refs), [r for r in refs if not r.startswith("#")]
    assert "<script" not in page and "<link " not in page
    assert not re.findall(r"url\((?!#)", page)  # CSS/SVG urls only to the page's own ids


# --------------------------------------------------------------------------------------------
# node over DDS


def test_node_and_replay_agree_on_the_same_bag(bags, tmp_path, capsys):
    from interaction_estimator.demo import NodeSession, bag_joint_state_messages
    from interaction_estimator.io.parameter_file import write_parameter_file
    bag_path, run = bags["drawer"]
    params = tmp_path / "params.yaml"
    write_parameter_file(params, {**run.settings, "input.reliability": "reliable"})
    code, _, err = run_cli(["replay", bag_path, "--out", tmp_path / "r", "--params", params,
                            "--ignore-bag-settings"], capsys)
    assert code == 0, err
    replay_cols = read_csv(tmp_path / "r" / "estimates.csv")
    messages, urdf = bag_joint_state_messages(bag_path)
    session = NodeSession(params, log_path=tmp_path / "node.log")
    try:
        session.start()
        session.publish_description(urdf)
        session.wait_ready(timeout=60)
        session.play(messages, speed=None, window=100)
        session.drain(quiet=2.0)
    finally:
        log = session.close()
    rec = session.recording
    # reference: the node's own messages, received over DDS and decoded by ROS 2
    assert len(rec.wrench) == len(messages) == len(replay_cols["time"]), log[-2000:]
    assert len(rec.environment) == len(rec.wrench)
    row = {t: i for i, t in enumerate(replay_cols["time"])}
    w = np.array(rec.wrench)
    idx = [row[s + n * 1e-9] for s, n in w[:, :2].astype(int)]  # match by stamp
    np.testing.assert_allclose(w[:, 2:5], np.column_stack(
        [replay_cols[c][idx] for c in ("force_x", "force_y", "force_z")]), rtol=1e-9, atol=1e-9)
    env_cols = ("mass", "damping", "stiffness", "static_force", "mass_std", "damping_std",
                "stiffness_std", "static_force_std")
    np.testing.assert_allclose(np.array(rec.environment), np.column_stack(
        [replay_cols[c][idx] for c in env_cols]), rtol=1e-9, atol=1e-9)
    assert rec.frame_ids == {"odom"}


# --------------------------------------------------------------------------------------------
# bad input: clear message, exit 2, nothing that looks like a result


def _leftovers(parent: Path) -> list[str]:
    return sorted(p.name for p in parent.iterdir() if p.name.startswith("."))


def _bad_bags(tmp: Path, good: Path) -> dict[str, Path]:
    enc = JointStateEncoder()
    out = {}
    out["missing"] = tmp / "does_not_exist"
    trunc = tmp / "truncated"
    shutil.copytree(good, trunc)
    data = next(p for p in trunc.iterdir() if p.suffix == ".mcap")
    data.write_bytes(data.read_bytes()[: data.stat().st_size // 2])
    out["truncated"] = trunc
    from rosbags.rosbag2 import StoragePlugin, Writer
    from rosbags.typesys import Stores, get_typestore
    with Writer(tmp / "empty", version=9, storage_plugin=StoragePlugin.MCAP) as w:
        w.add_connection("/joint_states", JOINT_STATE,
                         typestore=get_typestore(Stores.ROS2_JAZZY))
    out["empty"] = tmp / "empty"
    with BagWriter(tmp / "no_states") as w:
        w.write("/chatter", STRING, 0, encode_string("hello"))
    out["no_states"] = tmp / "no_states"
    with BagWriter(tmp / "no_efforts") as w:
        for k in range(30):
            w.write("/joint_states", JOINT_STATE, 1 + k * 1e-3,
                    enc.encode(1, k * 1_000_000, "", ("a",), [0.0], [0.0], []))
    out["no_efforts"] = tmp / "no_efforts"
    with BagWriter(tmp / "wrong_type") as w:
        w.write("/joint_states", STRING, 1, encode_string("q=0.1"))
    out["wrong_type"] = tmp / "wrong_type"
    return out


TWO_JOINT_URDF = """<?xml version="1.0"?>
<robot name="other">
  <link name="base"/>
  <joint name="j1" type="revolute"><parent link="base"/><child link="l1"/>
    <axis xyz="0 0 1"/><limit lower="-3" upper="3" effort="10" velocity="1"/></joint>
  <link name="l1"><inertial><mass value="1"/>
    <inertia ixx="0.01" ixy="0" ixz="0" iyy="0.01" iyz="0" izz="0.01"/></inertial></link>
  <joint name="j2" type="revolute"><parent link="l1"/><child link="tool_tip"/>
    <origin xyz="0 0 0.3"/><axis xyz="0 1 0"/>
    <limit lower="-3" upper="3" effort="10" velocity="1"/></joint>
  <link name="tool_tip"><inertial><mass value="0.5"/>
    <inertia ixx="0.01" ixy="0" ixz="0" iyy="0.01" iyz="0" izz="0.01"/></inertial></link>
</robot>
"""

BAD_CASES = [
    # (case, extra arguments, phrase the message must contain)
    ("missing", [], "does not exist; expected a rosbag2 directory"),
    ("truncated", [], "truncated or damaged"),
    ("empty", [], "holds no messages; expected joint states"),
    ("no_states", [], "has no joint_states topic 'joint_states'"),
    ("no_efforts", [], "carry no efforts"),
    ("wrong_type", [], "is of type std_msgs/msg/String; expected sensor_msgs/msg/JointState"),
    ("urdf_mismatch", ["--urdf", "{two_joint}"],
     "the URDF does not match the bag: its joints ['j1', 'j2'] are not in the joint states"),
    ("urdf_not_urdf", ["--urdf", "{not_urdf}"], "robot description is not URDF text"),
    ("unknown_key", ["--params", "{unknown_key}"], "unknown setting 'observer.gian'"),
    ("bad_value", ["--params", "{bad_value}"],
     "observer.max_gap: -1.0 s is out of range; expected [0.0001, 10]"),
    ("bad_topics", ["--topics", "joints=/x"], "unknown role 'joints'"),
]


@pytest.mark.parametrize("case,extra,phrase", BAD_CASES, ids=[c[0] for c in BAD_CASES])
def test_bad_input_is_refused_clearly(case, extra, phrase, bags, tmp_path, capsys):
    bad = _bad_bags(tmp_path, bags["drawer"][0]) if case in (
        "missing", "truncated", "empty", "no_states", "no_efforts", "wrong_type") else {}
    files = {"two_joint": tmp_path / "two.urdf", "not_urdf": tmp_path / "x.urdf",
             "unknown_key": tmp_path / "unknown.yaml", "bad_value": tmp_path / "bad.yaml"}
    files["two_joint"].write_text(TWO_JOINT_URDF)
    files["not_urdf"].write_text("this is not a robot")
    files["unknown_key"].write_text("interaction_estimator:\n  ros__parameters:\n"
                                    "    observer:\n      gian: [40.0]\n")
    files["bad_value"].write_text("/**:\n  ros__parameters:\n    observer:\n"
                                  "      max_gap: -1.0\n")
    bag = bad.get(case, bags["drawer"][0])
    args = [a.format(**{k: str(v) for k, v in files.items()}) for a in extra]
    out_parent = tmp_path / "results"
    out_parent.mkdir()
    code, out, err = run_cli(["replay", bag, "--out", out_parent / "o", *args], capsys)
    assert code == 2
    assert phrase in err, err
    assert err.startswith("interaction-estimator replay: error: ")
    assert list(out_parent.iterdir()) == []  # no result, no partial directory
    assert "wrote" not in out


def test_existing_result_is_kept_when_a_later_replay_fails(bags, tmp_path, capsys):
    out = tmp_path / "o"
    assert run_cli(["replay", bags["drawer"][0], "--out", out], capsys)[0] == 0
    before = (out / "summary.json").read_bytes()
    (tmp_path / "bad.yaml").write_text("/**:\n  ros__parameters:\n    gravity: 99.0\n")
    code, _, err = run_cli(["replay", bags["drawer"][0], "--out", out, "--params",
                            tmp_path / "bad.yaml"], capsys)
    assert code == 2 and "gravity: 99.0 m/s^2 is out of range" in err
    assert (out / "summary.json").read_bytes() == before
    assert _leftovers(tmp_path) == []
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("keep me")
    code, _, err = run_cli(["replay", bags["drawer"][0], "--out", tmp_path / "mine"], capsys)
    assert code == 2 and "holds other files" in err
    assert (tmp_path / "mine" / "notes.txt").read_text() == "keep me"


def test_simulate_command_states_a_3d_objects_truth(tmp_path, capsys):
    # the soft fixture's truth is matrices: the command prints their principal values, which
    # are numpy.linalg.eigvalsh's of the bag's own ground truth (reference: numpy)
    from interaction_estimator.sim.simulator import SCENARIOS
    spec = SCENARIOS["soft_fixture"]
    code, out, err = run_cli(["simulate", "soft_fixture", "--out", tmp_path / "s",
                              "--duration", f"{spec.min_duration:g}"], capsys)
    assert code == 0, err
    with RecordedBag(tmp_path / "s") as bag:
        stiffness = bag.truth().extra["stiffness_matrix"]
    values = ", ".join(f"{x:.4g}" for x in np.linalg.eigvalsh(np.asarray(stiffness)))
    assert f"stiffness {values} N/m (principal values)" in out


def test_simulate_command_and_its_errors(tmp_path, capsys):
    code, out, err = run_cli(["simulate", "drawer", "--out", tmp_path / "b", "--duration",
                              "3.5", "--seed", "4", "--storage", "sqlite3", "--effort-side",
                              "motor"], capsys)
    assert code == 0, err
    with RecordedBag(tmp_path / "b") as bag:  # reference: the simulator's own truth values
        assert bag.info.storage == "sqlite3"
        truth = bag.truth()
        assert truth.parameters == {"mass": 5.5, "damping": 7.0, "stiffness": 0.0,
                                    "static_force": 4.5}
        assert truth.extra["effort_side"] == "motor" and truth.extra["seed"] == 4
        assert bag.info.joint_state_count == 3501
        assert bag.reference().force.shape == (3501, 3)
    for args, phrase in (
            (["simulate", "kitchen", "--out", tmp_path / "c"], "invalid choice: 'kitchen'"),
            (["simulate", "door", "--out", tmp_path / "c", "--duration", "1"],
             "duration 1.0 s is not allowed for scenario 'door'; expected a number of seconds"),
            (["simulate", "door", "--out", tmp_path / "c", "--seed", "-3"],
             "-3 is negative; expected an integer >= 0"),
            (["simulate", "door", "--out", tmp_path / "b"], "exists already"),
            (["simulate", "door", "--out", tmp_path / "nodir" / "c"], "does not exist")):
        code, out, err = run_cli(args, capsys)
        assert code == 2, args
        assert phrase in err, err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["b"]


def test_console_script_exit_codes(tmp_path):
    # reference: the installed console script run as a user would, in its own process
    script = Path(sys.executable).with_name("interaction-estimator")
    cmd = [str(script)] if script.exists() else [sys.executable, "-m", "interaction_estimator.cli"]
    r = subprocess.run([*cmd, "replay", str(tmp_path / "none"), "--out", str(tmp_path / "o")],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 2 and "does not exist" in r.stderr
    r = subprocess.run([*cmd, "frobnicate"], capture_output=True, text=True, timeout=120)
    assert r.returncode == 2 and "invalid choice: 'frobnicate'" in r.stderr
    r = subprocess.run([*cmd, "--help"], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and all(c in r.stdout for c in ("run", "replay", "simulate"))
    # 'run' hands everything after it to the node (reference: the node's own refusal)
    bad = tmp_path / "bad.yaml"
    bad.write_text("/**:\n  ros__parameters:\n    observer:\n      gian: [1.0]\n")
    r = subprocess.run([*cmd, "run", "--ros-args", "--params-file", str(bad)],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 2 and "unknown setting 'observer.gian'" in r.stderr


def _digits(text: str) -> str:
    """The significant digits of a decimal float text (no sign, point, exponent or leading and
    trailing zeros)."""
    mantissa = text.lower().lstrip("-").split("e")[0].replace(".", "")
    return mantissa.strip("0") or "0"


def _random_columns(rng, n):
    from interaction_estimator.io.estimates import _INTEGER_COLUMNS, COLUMN_NAMES
    cols: dict[str, np.ndarray] = {}
    for i, name in enumerate(COLUMN_NAMES):
        if name == "state":
            cols[name] = np.array(["free_motion", "in_contact", ""] * (n // 3 + 1),
                                  dtype=object)[:n]
        elif name in _INTEGER_COLUMNS:
            cols[name] = rng.integers(0, 4, n).astype(float)
            cols[name][rng.integers(n, size=5)] = np.nan   # not reported: an empty field
        elif i % 3 == 1:   # random bit patterns: every exponent, subnormals, NaN payloads
            cols[name] = rng.integers(0, 2**64 - 1, n, dtype=np.uint64, endpoint=True).view(
                np.float64)
        elif i % 3 == 2:   # runs of a few values, 0.0 next to -0.0, the non-finite
            runs = rng.choice([0.0, -0.0, 1.5, np.nan, np.inf, -np.inf, 1 / 3, 1e16, 1e-7], 40)
            cols[name] = np.repeat(runs, n // 40 + 1)[:n]
        else:
            cols[name] = rng.normal(size=n) * 10.0 ** rng.integers(-9, 19, n)
    return cols


def test_csv_floats_read_back_bit_identical_in_their_shortest_text(tmp_path):
    """Reference: Python's float() of each field (correctly rounded decimal to binary64) must
    give back the value bit for bit (NaN as NaN, the sign of zero kept), and the field has as
    many significant digits as Python's repr, the shortest text that round-trips (Steele and
    White / Gay; Python's float repr since 3.1). Flags and levels: str(int(v)), an empty field
    for NaN; the state word as it is; the header is COLUMN_NAMES."""
    from interaction_estimator.io.estimates import _INTEGER_COLUMNS, COLUMN_NAMES, write_csv
    rng = np.random.default_rng(11)
    n = 5000
    cols = _random_columns(rng, n)
    write_csv(tmp_path / "e.csv", cols, chunk=1234)
    lines = (tmp_path / "e.csv").read_text().splitlines()
    assert lines[0] == ",".join(COLUMN_NAMES) and len(lines) == n + 1
    for k in range(n):
        fields = lines[k + 1].split(",")
        assert len(fields) == len(COLUMN_NAMES)
        for name, text in zip(COLUMN_NAMES, fields):
            v = cols[name][k]
            if name == "state":
                assert text == v
            elif name in _INTEGER_COLUMNS:
                assert text == ("" if v != v else str(int(v))), (name, k)
            else:
                back = float(text)
                if v != v:
                    assert back != back, (name, k, text)
                    continue
                assert back == v and math.copysign(1, back) == math.copysign(1, v), (name, k)
                if math.isfinite(v):
                    assert len(_digits(text)) == len(_digits(repr(float(v)))), (text, repr(v))


def test_estimates_table_writes_csv_and_parquet_alike(tmp_path):
    """Reference: the values put in (a table grown while appending, its own array, and its
    columns), read back from the CSV by read_estimates and from Parquet by pyarrow's reader;
    the column names and order are the CSV contract (COLUMN_NAMES)."""
    import pyarrow.parquet as pq

    from interaction_estimator.io.estimates import (
        _NUMERIC,
        COLUMN_NAMES,
        EstimateTable,
        read_estimates,
        write_estimates,
    )
    rng = np.random.default_rng(21)
    cols = _random_columns(rng, 1000)
    table = EstimateTable(16)
    for k in range(1000):
        table.append_values([cols[name][k] for name in _NUMERIC], cols["state"][k])
    for source in (table, table.columns()):
        write_estimates(tmp_path / "e.csv", source, "csv", chunk=100)
        write_estimates(tmp_path / "e.parquet", source, "parquet", chunk=300)
        assert pq.read_table(tmp_path / "e.parquet").column_names == list(COLUMN_NAMES)
        for path in (tmp_path / "e.csv", tmp_path / "e.parquet"):
            back = read_estimates(path)
            assert list(back) == list(COLUMN_NAMES)
            assert back["state"].tolist() == cols["state"].tolist()
            for name in _NUMERIC:
                a, b = back[name], cols[name]
                assert np.array_equal(a.view(np.uint64)[~np.isnan(a)],
                                      b.view(np.uint64)[~np.isnan(b)]), (path.name, name)
                assert np.array_equal(np.isnan(a), np.isnan(b)), (path.name, name)


def test_replay_writes_parquet_on_request(bags, drawer_replays, tmp_path, capsys):
    """``replay --format parquet``: estimates.parquet instead of estimates.csv, the same
    columns and numbers. Reference: the CSV replay of the same bag, read back as floats, and
    pyarrow's own Parquet reader."""
    import pyarrow.parquet as pq

    from interaction_estimator.io.estimates import COLUMN_NAMES, read_estimates
    code, out, _ = run_cli(["replay", bags["drawer"][0], "--out", tmp_path / "p",
                            "--format", "parquet"], capsys)
    assert code == 0 and "estimates.parquet" in out
    assert not (tmp_path / "p" / "estimates.csv").exists()
    table = pq.read_table(tmp_path / "p" / "estimates.parquet")
    assert table.column_names == list(COLUMN_NAMES)
    mine = read_estimates(tmp_path / "p" / "estimates.parquet")
    ref = read_csv(drawer_replays / "mcap" / "estimates.csv")
    for name in COLUMN_NAMES:
        if name == "state":
            assert mine[name].tolist() == ref[name].tolist()
        else:
            np.testing.assert_array_equal(mine[name], ref[name], err_msg=name)
    code, _, err = run_cli(["replay", bags["drawer"][0], "--out", tmp_path / "q",
                            "--format", "xlsx"], capsys)
    assert code == 2 and "invalid choice: 'xlsx'" in err


def test_csv_writer_names_a_value_it_cannot_write(tmp_path):
    """Reference: the column and value put in; an infinite level or a flag of 2.5 has no
    integer text (common practice, no source: say what was wrong and what was expected)."""
    from interaction_estimator.io.estimates import _NUMERIC, EstimateTable, write_csv
    for column, value in (("level", math.inf), ("converged", 2.5)):
        table = EstimateTable()
        row = [0.0] * len(_NUMERIC)
        table.append_values(row, "free_motion")
        row[_NUMERIC.index(column)] = value
        table.append_values(row, "free_motion")
        with pytest.raises(ValueError, match=rf"row 1: column '{column}' is {value}; expected "
                                             r"a whole number"):
            write_csv(tmp_path / "e.csv", table)
        assert not (tmp_path / "e.csv").exists()       # nothing half written
    with pytest.raises(ValueError, match=r"chunk is 0"):
        write_csv(tmp_path / "e.csv", table, chunk=0)


def test_plot_thinning_keeps_each_spans_first_sample_and_extremes():
    """Reference: per span of samples (bounds from numpy.linspace), its first sample and
    numpy's nanargmin and nanargmax of the first series (spans without a finite value keep
    their first sample only), plus the last sample."""
    from interaction_estimator.offline.report import _MAX_POINTS, _thin
    rng = np.random.default_rng(4)
    for n in (1501, 4000, 12345):
        t = np.arange(n) * 1e-3
        y = rng.normal(size=n)
        y[rng.random(n) < 0.2] = np.nan
        y[rng.random(n) < 0.02] = np.inf
        y[rng.random(n) < 0.02] = -np.inf
        y[:n // 5] = np.nan
        y[n // 2:n // 2 + 60] = np.where(rng.random(60) < 0.5, 0.0, -0.0)
        z = rng.normal(size=n)
        edges = np.linspace(0, n, _MAX_POINTS // 3 + 1).astype(int)
        keep = {n - 1}
        for a, b in zip(edges[:-1], edges[1:]):
            keep.add(int(a))
            if np.isfinite(y[a:b]).any():
                keep.update((int(a + np.nanargmin(y[a:b])), int(a + np.nanargmax(y[a:b]))))
        idx = np.array(sorted(keep))
        tt, yy, zz = _thin(t, y, z)
        np.testing.assert_array_equal(tt, t[idx])
        np.testing.assert_array_equal(yy, y[idx])
        np.testing.assert_array_equal(zz, z[idx])
    t = np.arange(_MAX_POINTS, dtype=float)
    assert all(a is b for a, b in zip(_thin(t, t), (t, t)))   # short series: every sample
