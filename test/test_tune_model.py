"""tune's identification options: bad input refused with the value named and nothing written.

Reference for the data: the package's own simulator (Marten, motor-side efforts with friction,
noise and bias); the identification's accuracy itself is checked against MuJoCo in
test_identification.py and test_identification_end_to_end.py.
"""
from __future__ import annotations

import pytest

from interaction_estimator.offline import tune as T
from interaction_estimator.sim.recording import write_simulated_bag
from interaction_estimator.sim.simulator import simulate


@pytest.fixture(scope="module")
def bags(tmp_path_factory):
    d = tmp_path_factory.mktemp("tune_model")
    write_simulated_bag(d / "commissioning", simulate("commissioning", duration=6.0, seed=3))
    write_simulated_bag(d / "drawer", simulate("drawer", duration=4.0, seed=3))
    return d


@pytest.mark.parametrize("extra, expected", [
    (["--tool-mass", "1.5"], "--tool-mass without --tool-frame"),
    (["--tool-frame", "gripper_plate"], "tool link 'gripper_plate' is not a link of the URDF"),
    (["--tool-frame", "tool_tip", "--tool-name", "marten_link7"],
     "tool name 'marten_link7' is already a link of the URDF"),
    (["--tool-frame", "odom"], "is fixed to the robot's root"),
    (["--smoothing", "0"], "outside (0, 2] s"),
    (["--inertia-spread", "-1"], "outside (0, 10]"),
])
def test_bad_identification_options(bags, tmp_path, capsys, extra, expected):
    out = tmp_path / "tuned.yaml"
    try:
        code = T.main([str(bags / "drawer"), "--free-motion", str(bags / "commissioning"),
                       "--out", str(out)] + extra)
    except SystemExit as exc:       # argparse refuses a bad number itself
        code = exc.code
    err = capsys.readouterr().err
    assert code == 2
    assert expected in err, err
    assert not out.exists() and not out.with_suffix(".urdf").exists()


def test_a_task_bag_alone_lends_its_free_motion(bags, tmp_path, capsys):
    # no bag named free motion: the task's own free stretch (about 2 s before contact) serves,
    # and the account says so
    out = tmp_path / "tuned.yaml"
    code = T.main([str(bags / "drawer"), "--tool-frame", "tool_tip", "--out", str(out)])
    cap = capsys.readouterr()
    assert code == 0, cap.err
    assert "drawer (its free-motion stretches" in cap.out
    assert out.with_suffix(".urdf").exists()
