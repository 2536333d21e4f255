"""The node's topic and service names (relative, so namespaces and remapping apply) and the
labels of the lifecycle states its status reports (those of lifecycle_msgs/State). Shared by
:mod:`.estimator`, :mod:`.status`, :mod:`.lifecycle` and the launch file's test."""
from __future__ import annotations

# Topic and service names, relative (namespaces and remapping apply).
JOINT_STATES_TOPIC = "joint_states"
JOINT_EFFORTS_TOPIC = "joint_efforts"
ROBOT_DESCRIPTION_TOPIC = "robot_description"
ODOMETRY_TOPIC = "odometry"   # base.source odometry: nav_msgs/Odometry
IMU_TOPIC = "imu"             # and sensor_msgs/Imu (base.imu)
WRENCH_TOPIC = "~/wrench"
ENVIRONMENT_TOPIC = "~/environment"
CARTESIAN_TOPIC = "~/environment_cartesian"
MECHANISM_TOPIC = "~/mechanism"
STATUS_TOPIC = "~/status"
MARKERS_TOPIC = "~/markers"
DIAGNOSTICS_TOPIC = "/diagnostics"
RESET_SERVICE = "~/reset"
CALIBRATE_SERVICE = "~/calibrate_bias"
# lifecycle states as the status reports them (the labels of lifecycle_msgs/State)
UNCONFIGURED, INACTIVE, ACTIVE, FINALIZED = "unconfigured", "inactive", "active", "finalized"
INPUT_TOPICS = (JOINT_STATES_TOPIC, JOINT_EFFORTS_TOPIC, ROBOT_DESCRIPTION_TOPIC,
                ODOMETRY_TOPIC, IMU_TOPIC)
OUTPUT_TOPICS = (WRENCH_TOPIC, ENVIRONMENT_TOPIC, STATUS_TOPIC, DIAGNOSTICS_TOPIC, MARKERS_TOPIC)
# with environment.model cartesian, ~/environment_cartesian in place of ~/environment; with
# revolute or prismatic, ~/mechanism beside it (at the status rate)
MODEL_TOPICS = (CARTESIAN_TOPIC, MECHANISM_TOPIC)
