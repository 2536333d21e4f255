"""RobotModel against textbook closed forms, and its handling of bad input."""
import numpy as np
import pinocchio as pin
import pytest

from interaction_estimator.core.model import ModelError, RobotModel
from interaction_estimator.core.samples import Sample, SampleRejected
from interaction_estimator.core.settings import STANDARD_GRAVITY
from interaction_estimator.sim import marten

# Two-link planar elbow arm in the vertical x-z plane (joint axes along -y, so a positive angle
# raises the link), parameters chosen for the test.
M1, M2, L1, LC1, LC2 = 1.3, 0.9, 0.55, 0.27, 0.21
I1, I2 = 0.031, 0.017  # kg m^2 about the axis through each centre of mass, normal to the plane
# (the other two moments, 1e-3 and the same value again, make each link a physical body: the
# inertial check refuses moments that violate the triangle inequalities; they play no part in
# motion in the plane)


def planar_urdf():
    def link(name, m, lc, i):
        return (f'<link name="{name}"><inertial><origin xyz="{lc} 0 0"/><mass value="{m}"/>'
                f'<inertia ixx="1e-3" ixy="0" ixz="0" iyy="{i}" iyz="0" izz="{i}"/>'
                f'</inertial></link>')
    return (
        '<robot name="planar_elbow"><link name="ground"/>'
        '<joint name="j1" type="continuous"><parent link="ground"/><child link="l1"/>'
        '<axis xyz="0 -1 0"/></joint>' + link("l1", M1, LC1, I1) +
        f'<joint name="j2" type="revolute"><parent link="l1"/><child link="l2"/>'
        f'<origin xyz="{L1} 0 0"/><axis xyz="0 -1 0"/>'
        '<limit lower="-3" upper="3" effort="10" velocity="5"/></joint>' + link("l2", M2, LC2, I2) +
        '<joint name="tip_joint" type="fixed"><parent link="l2"/><child link="tip"/>'
        '<origin xyz="0.4 0 0"/></joint><link name="tip"/></robot>')


def spong_terms(q1, q2, dq1, dq2, g):
    """Spong, Hutchinson and Vidyasagar, Robot Modeling and Control (Wiley 2006), Sec. 7.4.2,
    the planar elbow manipulator: D(q), the Christoffel-symbol C(q, q') and g(q)."""
    d11 = M1 * LC1**2 + M2 * (L1**2 + LC2**2 + 2 * L1 * LC2 * np.cos(q2)) + I1 + I2
    d12 = M2 * (LC2**2 + L1 * LC2 * np.cos(q2)) + I2
    d22 = M2 * LC2**2 + I2
    h = -M2 * L1 * LC2 * np.sin(q2)
    D = np.array([[d11, d12], [d12, d22]])
    C = np.array([[h * dq2, h * dq2 + h * dq1], [-h * dq1, 0.0]])
    G = np.array([(M1 * LC1 + M2 * L1) * g * np.cos(q1) + M2 * LC2 * g * np.cos(q1 + q2),
                  M2 * LC2 * g * np.cos(q1 + q2)])
    return D, C, G


@pytest.mark.parametrize("q1,q2,dq1,dq2", [(0.3, -0.7, 1.1, -0.4), (-2.0, 1.4, -0.3, 2.2),
                                            (2.9, 0.05, 0.0, 0.0)])
def test_planar_elbow_matches_textbook(q1, q2, dq1, dq2):
    model = RobotModel(planar_urdf(), "tip")
    sample = Sample(0.0, ("j2", "j1"), np.array([q2, q1]), np.array([dq2, dq1]), np.zeros(2))
    q, v, _ = model.joint_map(sample.names).apply(sample)
    dyn = model.dynamics(q, v)
    D, C, G = spong_terms(q1, q2, dq1, dq2, STANDARD_GRAVITY)
    # closed forms of the textbook, to 1e-9
    np.testing.assert_allclose(dyn.mass_matrix, D, atol=1e-9)
    np.testing.assert_allclose(dyn.gravity, G, atol=1e-9)
    np.testing.assert_allclose(dyn.coriolis_transpose_velocity, C.T @ v, atol=1e-9)
    # tip position: forward kinematics of the same textbook arm (tip 0.4 m beyond joint 2)
    tip = np.array([L1 * np.cos(q1) + 0.4 * np.cos(q1 + q2), 0.0,
                    L1 * np.sin(q1) + 0.4 * np.sin(q1 + q2)])
    np.testing.assert_allclose(dyn.position, tip, atol=1e-12)


def test_standard_gravity_is_cgpm_value():
    # 3rd CGPM (1901): standard acceleration of gravity 9.80665 m/s^2
    model = RobotModel(planar_urdf(), "tip")
    np.testing.assert_allclose(model.model.gravity.linear, [0, 0, -9.80665], rtol=0, atol=0)


def test_continuous_joint_takes_cos_sin():
    # Pinocchio's continuous joint stores (cos, sin) of the angle (Pinocchio documentation,
    # JointModelRevoluteUnbounded); the mobile Marten's yaw is such a joint.
    model = RobotModel(marten.mobile_urdf(), marten.CONTACT_FRAME)
    names = tuple(reversed(model.joint_names))
    angles = np.linspace(-1.0, 1.3, len(names))
    s = Sample(0.0, names, angles, np.zeros(len(names)), np.zeros(len(names)))
    q, _, _ = model.joint_map(names).apply(s)
    yaw = dict(zip(names, angles))["marten_base_yaw"]
    idx = model.model.joints[model.model.getJointId("marten_base_yaw")].idx_q
    assert q[idx] == pytest.approx(np.cos(yaw)) and q[idx + 1] == pytest.approx(np.sin(yaw))
    assert model.nv == 10 and model.nq == 11
    # the same angles through Pinocchio's own integrator from the neutral configuration
    ordered = np.array([dict(zip(names, angles))[j] for j in model.joint_names])
    np.testing.assert_allclose(q, pin.integrate(model.model, pin.neutral(model.model), ordered),
                               atol=1e-12)


def test_model_order_and_integer_arrays_map_like_any_order():
    # names already in model order take a shortcut (no reordering): integer-valued arrays
    # (a publisher sending whole radians) must give the same float configuration, checked
    # against Pinocchio's own integrator from the neutral configuration (as above)
    model = RobotModel(marten.mobile_urdf(), marten.CONTACT_FRAME)
    names = model.joint_names
    angles = np.array([0, 0, 1, 0, 1, 0, 1, -1, 1, 0])
    q, v, e = model.joint_map(names).apply(Sample(0.0, names, angles, angles, angles))
    assert q.dtype == v.dtype == e.dtype == np.float64
    np.testing.assert_allclose(q, pin.integrate(model.model, pin.neutral(model.model),
                                                angles.astype(float)), atol=1e-12)
    np.testing.assert_array_equal(v, angles)


def test_extra_joints_ignored_missing_refused():
    model = RobotModel(marten.arm_urdf(), "tool_tip")
    names = model.joint_names + ("gripper_finger",)
    s = Sample(0.0, names, np.zeros(8), np.zeros(8), np.zeros(8))
    q, v, e = model.joint_map(names).apply(s)
    assert q.shape == (7,)
    with pytest.raises(SampleRejected, match="lacks model joints .*marten_wrist_roll"):
        model.joint_map(model.joint_names[:-1])
    with pytest.raises(SampleRejected, match="appears twice"):
        model.joint_map(model.joint_names + model.joint_names[:1])


def test_bad_urdf_and_frame_messages():
    with pytest.raises(ModelError, match="no <robot> element"):
        RobotModel("hello", "tip")
    with pytest.raises(ModelError, match="does not parse"):
        RobotModel("<robot name='x'><link name='a'/><joint name='j' type='revolute'>"
                   "<parent link='a'/><child link='missing'/></joint></robot>", "a")
    with pytest.raises(ModelError, match="contact frame 'gripper' is not in the URDF.*tool_tip"):
        RobotModel(marten.arm_urdf(), "gripper")
    with pytest.raises(ModelError, match="cannot be read"):
        RobotModel.from_file("/nonexistent/robot.urdf", "tip")
