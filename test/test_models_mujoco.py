"""The object models beyond one direction (environment.model cartesian, revolute, prismatic)
against MuJoCo, an independent physics engine (PyPI `mujoco`; sim/mujoco_world/mechanisms.py).

Our fictional Marten arm holds, through MuJoCo's own equality constraint, (a) an object on three
orthogonal slide joints with their own springs and dampers, turned away from the world axes; (b)
a door on a hinge joint with a spring, a damper and a constant closing torque, its axis tilted
4 degrees from vertical; (c) a slider along a slanted axis. The estimator sees only joint
positions, velocities and efforts, corrupted at the levels of test_accuracy_mujoco.py (effort
noise 0.1 N·m, velocity noise 0.003 rad/s, 18-bit encoders, a per-joint bias up to 2 N·m).
The truth is MuJoCo's: the joints' springs, dampers and applied forces, the door's moment of
inertia from MuJoCo's mass matrix. Bounds: issue 19's.
"""
import math

import numpy as np
import pytest

from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.samples import Sample
from interaction_estimator.core.settings import Settings
from interaction_estimator.io.estimates import principal
from interaction_estimator.sim import marten
from interaction_estimator.sim.mujoco_world.arm import run_attached_object
from interaction_estimator.sim.mujoco_world.common import _smoothstep, corrupt
from interaction_estimator.sim.mujoco_world.mechanisms import (
    rotation_matrix,
    run_attached_fixture,
    run_hinged_door,
)
from interaction_estimator.sim.mujoco_world.schedule import MultiSine, Push, Window

ARM_BIAS = np.array([2.0, -1.5, 1.0, -2.0, 0.8, -0.6, 0.5])  # N·m, up to 2 N·m per joint


def estimates(run, settings, seed=3):
    noisy = corrupt(run, effort_noise=0.1, velocity_noise=0.003, encoder_bits=18,
                       bias=ARM_BIAS, seed=seed)
    pipe = Pipeline(Settings(settings), noisy.urdf)
    out = []
    for k, t in enumerate(noisy.time):
        e = pipe.process(Sample(float(t), noisy.joint_names, noisy.position[k],
                                noisy.velocity[k], noisy.effort[k]))
        assert e is not None, pipe.rejects.last_message
        out.append(e)
    return out


def axis_error_deg(a, b):
    """Angle between two axes, degrees (unsigned: an axis, not an arrow)."""
    c = abs(float(np.dot(a, b))) / (np.linalg.norm(a) * np.linalg.norm(b))
    return math.degrees(math.acos(min(c, 1.0)))


def matrix(e, prefix):
    values = dict(zip(e.parameter_names, e.parameters.tolist(), strict=True))
    out = np.empty((3, 3))
    for a in range(3):
        for b in range(a, 3):
            out[a, b] = out[b, a] = values[f"{prefix}_{'xyz'[a]}{'xyz'[b]}"]
    return out


@pytest.fixture(scope="module")
def fixture_run():
    rotation = rotation_matrix((1.0, 2.0, 0.5), math.radians(40.0))
    run = run_attached_fixture(marten.ARM_URDF, (0.8, 0.6, 1.0), (15.0, 30.0, 50.0),
                                  (250.0, 600.0, 1200.0), (2.0, -3.0, 1.5), rotation,
                                  duration=12.0)
    return run, estimates(run, {"environment.model": "cartesian"})


@pytest.mark.parametrize("prefix", ["stiffness", "damping"])
def test_cartesian_principal_values_and_axes(fixture_run, prefix):
    # Issue 19: principal stiffness and damping within 10 %, principal axes within 5 degrees,
    # against the three slide joints' own springs and dampers (MuJoCo), turned by 40 degrees.
    run, est = fixture_run
    found = principal(matrix(est[-1], prefix))
    truth = principal(np.array(run.truth[f"{prefix}_matrix"]))
    np.testing.assert_allclose(found["values"], truth["values"], rtol=0.10)
    for a, b in zip(found["axes"], truth["axes"], strict=True):
        assert axis_error_deg(a, b) <= 5.0


def test_cartesian_static_force_and_every_direction_excited(fixture_run):
    # The constant forces on the three slides, turned into the world frame (MuJoCo's
    # qfrc_applied): within 10 % of the largest component. The motion explores every direction:
    # every stiffness and damping entry is excited at the end.
    run, est = fixture_run
    e = est[-1]
    values = dict(zip(e.parameter_names, e.parameters.tolist(), strict=True))
    found = np.array([values[f"static_force_{c}"] for c in "xyz"])
    truth = np.array(run.truth["static_force"])
    assert np.abs(found - truth).max() <= 0.10 * np.abs(truth).max()
    excited = dict(zip(e.parameter_names, e.excited.tolist(), strict=True))
    assert all(excited[n] for n in excited if n.startswith(("stiffness", "damping")))


def test_cartesian_unexplored_direction_is_never_converged():
    # The fixture turned about the world z axis only (z stays one of its principal axes: a
    # motion in the x-y plane meets no force along z), the tool commanded only in the world's
    # x-y plane: the arm's own dynamics still move it ~4.5 mm along z (against ~6 cm along x),
    # so the zz entries are barely explored: they must never converge (issue 19). (With no
    # motion at all along z they are not even excited: test_object_models.py.)
    rotation = rotation_matrix((0.0, 0.0, 1.0), math.radians(40.0))  # z stays an axis
    run = run_attached_fixture(marten.ARM_URDF, (0.8, 0.6, 1.0), (15.0, 30.0, 50.0),
                                  (250.0, 600.0, 1200.0), (2.0, -3.0, 1.5), rotation,
                                  amplitudes=((0.025, 0.008), (0.022, 0.007), (0.0, 0.0)),
                                  duration=8.0)
    est = estimates(run, {"environment.model": "cartesian"})
    names = est[-1].parameter_names
    for name in ("mass_zz", "damping_zz", "stiffness_zz"):
        i = names.index(name)
        assert not any(e.parameter_converged[i] for e in est), name
    assert not any(e.converged for e in est)
    assert np.ptp(run.contact_position[run.in_contact, 2]) < 0.1 * np.ptp(
        run.contact_position[run.in_contact, 0])   # z barely explored, as said above


def _opening(open_angle, amplitudes, frequencies, hold=0.3, ramp=6.0):
    """Door angle (rad) against time since the grasp: a slow opening by ``open_angle`` plus
    swings a (1 - cos w t) >= 0 faded in (a door at its closed stop opens first)."""
    window = Window(hold, 0.8, 1e9, fade_out=False)
    a = np.asarray(amplitudes)
    w = 2 * np.pi * np.asarray(frequencies)

    def angle(tau):
        s, sd, sdd = _smoothstep((tau - hold) / ramp)
        e, ed, edd = window(tau)
        x = float(np.sum(a * (1 - np.cos(w * tau))))
        xd = float(np.sum(a * w * np.sin(w * tau)))
        xdd = float(np.sum(a * w**2 * np.cos(w * tau)))
        return (open_angle * s + e * x, open_angle * sd / ramp + ed * x + e * xd,
                open_angle * sdd / ramp**2 + edd * x + 2 * ed * xd + e * xdd)

    return angle


@pytest.fixture(scope="module")
def door_run():
    axis = rotation_matrix((1.0, 0.0, 0.0), math.radians(4.0)) @ np.array([0.0, 0.0, 1.0])
    run = run_hinged_door(marten.ARM_URDF, axis, (-1.0, 0.3, 0.0), 0.45, 3.0, 0.06,
                             damping=0.8, stiffness=3.0, closing_torque=1.5,
                             angle=_opening(0.6, (0.07, 0.02), (0.55, 1.4)), duration=12.0)
    return run, estimates(run, {"environment.model": "revolute"})


def test_revolute_door_after_30_degrees(door_run):
    # Issue 19: after 30 degrees of swing, hinge axis within 3 degrees, grasp radius within
    # 5 %, the handle-equivalent parameters (I / r^2, c / r^2, k / r^2, tau0 / r; I from
    # MuJoCo's mass matrix) within 10 %. The axis is tilted 4 degrees from vertical.
    run, est = door_run
    angle = np.degrees(np.array(run.truth["angle"]))
    after = int(np.flatnonzero(angle >= 30.0)[0])
    assert run.time[-1] - run.time[after] > 1.0          # the checks below are after the swing
    truth = np.array([run.truth[p] for p in ("mass", "damping", "stiffness", "static_force")])
    for e in est[after:]:
        assert axis_error_deg(e.axis, run.truth["axis"]) <= 3.0
        assert e.radius == pytest.approx(run.truth["radius"], rel=0.05)
    np.testing.assert_allclose(est[-1].parameters, truth, rtol=0.10)
    assert est[-1].geometry_converged and est[-1].converged
    # the opening is positive: the axis points the way of the true (opening-positive) axis
    assert float(np.dot(est[-1].axis, run.truth["axis"])) > 0.99


def test_revolute_axis_point_and_angle(door_run):
    # The point on the axis lies on the true hinge axis (its distance from that line within
    # 1 % of the radius) and the reported hinge angle follows MuJoCo's within 1 degree once the
    # geometry is fitted.
    run, est = door_run
    e = est[-1]
    axis = np.array(run.truth["axis"])
    offset = np.asarray(e.axis_point) - np.array(run.truth["axis_point"])
    assert np.linalg.norm(offset - (offset @ axis) * axis) <= 0.01 * run.truth["radius"]
    fitted = np.array([x.geometry_converged for x in est])
    angle = np.array(run.truth["angle"])
    found = np.array([x.angle for x in est])
    assert np.abs(found[fitted] - angle[fitted]).max() <= math.radians(1.0)


def test_prismatic_axis_after_5_cm_and_parameters():
    # Issue 19: a slider along a slanted axis (MuJoCo slide joint with its own spring, damper
    # and a constant resisting force): axis within 2 degrees once the path has travelled 5 cm,
    # and the parameters along it as along_direction's bounds (10 %; static force 5 %).
    direction = np.array([0.55, -0.7, 0.45])
    direction /= np.linalg.norm(direction)
    push = Push(0.012, hold=0.3, ramp=0.6, duration=9.0, fade_out=False)
    wiggle = MultiSine((0.02, 0.008), (0.6, 1.7), (0.0, 0.0), hold=0.3, ramp=1.0,
                          duration=9.0, fade_out=False)

    def path(tau):
        return push(tau)[0] + wiggle(tau)[0]

    run = run_attached_object(marten.ARM_URDF, 1.5, 12.0, 60.0, 4.0, direction,
                                 path_fn=path, duration=10.0, free_time=1.0)
    est = estimates(run, {"environment.model": "prismatic"})
    travel = np.array([e.travel for e in est])
    start = int(np.flatnonzero(travel >= 0.05)[0])
    for e in est[start:]:
        assert axis_error_deg(e.axis, direction) <= 2.0
    truth = np.array([run.truth[p] for p in ("mass", "damping", "stiffness", "static_force")])
    np.testing.assert_allclose(est[-1].parameters[:3], truth[:3], rtol=0.10)
    assert est[-1].parameters[3] == pytest.approx(truth[3], rel=0.05)
    assert float(np.dot(est[-1].axis, direction)) > 0.99   # the first motion is positive
