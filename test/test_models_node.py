"""The models beyond one direction through the node over DDS and the replay's output bag.

The node runs as a subprocess with real rclpy (the harness of the demo, ``NodeSession``); what it
publishes is received over DDS and decoded by ROS 2's own deserializer, and compared with the
replay of the same bag (DESIGN.md: for the same input and parameters node and replay produce
the same numbers). The layouts of ``~/environment_cartesian`` and ``~/mechanism`` are read back
from the replay's output bag through rosbags (PyPI), the message definitions of std_msgs.
Scenarios: the invented ``soft_fixture`` (cartesian) and ``cabinet_door`` (revolute), short.
"""
import math

import numpy as np
import pytest

from interaction_estimator.cli import main as cli_main
from interaction_estimator.core.object_models import CARTESIAN
from interaction_estimator.io.estimates import read_csv
from interaction_estimator.sim.recording import write_simulated_bag
from interaction_estimator.sim.simulator import simulate


@pytest.fixture(scope="module")
def scenario_bags(tmp_path_factory):
    root = tmp_path_factory.mktemp("model_bags")
    out = {}
    for name, duration in (("soft_fixture", 6.0), ("cabinet_door", 7.0)):
        run = simulate(name, duration=duration, seed=2)
        write_simulated_bag(root / name, run, "mcap")
        out[name] = (root / name, run)
    return out


def _node_session(bag, settings, model_name, tmp_path, status_rate=None):
    from interaction_estimator.demo import NodeSession, bag_joint_state_messages
    from interaction_estimator.io.parameter_file import write_parameter_file
    params = tmp_path / "params.yaml"
    extra = {} if status_rate is None else {"output.status_rate": status_rate}
    write_parameter_file(params, {**settings, "input.reliability": "reliable", **extra})
    messages, urdf = bag_joint_state_messages(bag)
    session = NodeSession(params, log_path=tmp_path / "node.log", model_name=model_name)
    try:
        session.start()
        session.publish_description(urdf)
        session.wait_ready(timeout=60)
        session.play(messages, speed=None, window=100)
        session.drain(quiet=2.0)
    finally:
        log = session.close()
    return params, messages, session.recording, log


def _replay(bag, params, out, capsys):
    code = cli_main(["replay", str(bag), "--out", str(out), "--params", str(params),
                     "--ignore-bag-settings", "--output-bag"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return read_csv(out / "estimates.csv")


def _layouts(bag_dir):
    """{topic: (labels, first data)} of the Float64MultiArray topics of an output bag."""
    from rosbags.rosbag2 import Reader
    from rosbags.typesys import Stores, get_typestore
    store = get_typestore(Stores.ROS2_JAZZY)
    out = {}
    with Reader(bag_dir) as reader:
        for conn, _, raw in reader.messages():
            if conn.msgtype == "std_msgs/msg/Float64MultiArray" and conn.topic not in out:
                msg = store.deserialize_cdr(raw, conn.msgtype)
                out[conn.topic] = ([(d.label, d.size, d.stride) for d in msg.layout.dim],
                                   np.array(msg.data))
    return out


def test_cartesian_node_publishes_its_21_parameters_as_the_replay(scenario_bags, tmp_path,
                                                                    capsys):
    bag, run = scenario_bags["soft_fixture"]
    params, messages, rec, log = _node_session(bag, run.settings, "cartesian", tmp_path)
    cols = _replay(bag, params, tmp_path / "r", capsys)
    assert len(rec.wrench) == len(messages) == len(cols["time"]), log[-2000:]
    env = np.array(rec.environment)
    assert env.shape == (len(messages), 42)   # ~/environment_cartesian: 21 values, 21 stds
    row = {t: i for i, t in enumerate(cols["time"])}
    w = np.array(rec.wrench)
    idx = [row[s + n * 1e-9] for s, n in w[:, :2].astype(int)]
    names = CARTESIAN.parameter_names
    np.testing.assert_allclose(env, np.column_stack(
        [cols[c][idx] for c in (*names, *(f"{n}_std" for n in names))]), rtol=1e-9, atol=1e-9)
    layouts = _layouts(tmp_path / "r" / "estimates_bag")
    assert "/interaction_estimator/environment" not in layouts
    dims, _ = layouts["/interaction_estimator/environment_cartesian"]
    assert [d[1:] for d in dims] == [(2, 42), (21, 21)]
    assert dims[1][0].startswith("column: mass_xx [kg], mass_xy [kg]")
    assert "stiffness_zz [N/m]" in dims[1][0] and "static_force_z [N]" in dims[1][0]
    # the report: principal values against the truth, and the ellipses
    page = (tmp_path / "r" / "report.html").read_text(encoding="utf-8")
    assert 'id="principal"' in page and 'id="fig-ellipses"' in page and "<svg" in page
    import json
    summary = json.loads((tmp_path / "r" / "summary.json").read_text(encoding="utf-8"))
    stiffness = summary["principal"]["stiffness"]
    np.testing.assert_allclose(stiffness["values"], stiffness["truth_values"], rtol=0.10)


def test_revolute_node_publishes_the_mechanism_and_the_hinge_in_its_status(scenario_bags,
                                                                           tmp_path, capsys):
    bag, run = scenario_bags["cabinet_door"]
    params, messages, rec, log = _node_session(bag, run.settings, "revolute", tmp_path,
                                               status_rate=0.0)
    cols = _replay(bag, params, tmp_path / "r", capsys)
    assert len(rec.wrench) == len(messages), log[-2000:]
    # ~/mechanism with every status of an estimate (status_rate 0: every sample; the idle
    # statuses before the first sample carry no estimate)
    estimates = [s for s in rec.status if "time[s]" in s[3]]
    assert len(rec.mechanism) == len(estimates) == len(messages)
    last = rec.mechanism[-1]
    values = rec.status[-1][3]
    from interaction_estimator.io.node_outputs import MECHANISM_FIELDS
    field = {name: last[k] for k, (name, _) in enumerate(MECHANISM_FIELDS)}
    assert field["radius"] == pytest.approx(float(values["radius[m]"]))
    assert field["radius"] == pytest.approx(cols["radius"][-1], rel=1e-9)
    assert field["radius"] == pytest.approx(run.truth["mechanism"]["radius"], rel=0.02)
    # the swept arc: radians on ~/mechanism and in the CSV, degrees in the status
    assert float(values["swept_arc[deg]"]) == pytest.approx(math.degrees(field["swept_arc"]))
    assert values["mechanism"] == "revolute" and values["geometry"] in ("fitted", "converged")
    assert "swept" in rec.status[-1][2] and "deg" in rec.status[-1][2]
    # a hinge's own parameters in the status: inertia = mass r^2
    inertia = float(values["inertia[kg·m²]"])
    assert inertia == pytest.approx(float(values["mass[kg]"]) * field["radius"] ** 2)
    layouts = _layouts(tmp_path / "r" / "estimates_bag")
    dims, data = layouts["/interaction_estimator/mechanism"]
    assert dims[0][1] == len(MECHANISM_FIELDS) and dims[0][0].startswith(
        "field: axis_x [1], axis_y [1], axis_z [1], axis_point_x [m]")
    assert "inertia [kg·m²]" in dims[0][0] and "swept_arc [rad]" in dims[0][0]
    # the report: the hinge's geometry and its own parameters beside the truth
    page = (tmp_path / "r" / "report.html").read_text(encoding="utf-8")
    assert 'id="geometry"' in page and 'id="rotary"' in page and 'id="fig-geometry"' in page
    assert 'data-key="mechanism.truth.inertia"' in page
