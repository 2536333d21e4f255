"""Launch the interaction_estimator node on a robot.

    ros2 launch interaction_estimator interaction_estimator.launch.py \\
        params_file:=/path/to/my_robot.yaml namespace:=arm \\
        joint_states:=/arm/joint_states robot_description:=/robot_description

Arguments (all optional):
  params_file        ROS 2 parameter file (default: the package's config/default.yaml)
  namespace          namespace of the node and of its relative topics (default: none)
  urdf_file          URDF file path; empty: the URDF comes from the robot_description topic
  joint_states       topic of sensor_msgs/JointState to read (default: joint_states)
  joint_efforts      topic of separate efforts, used with input.separate_efforts (default:
                     joint_efforts)
  robot_description  topic of the URDF, std_msgs/String, transient local (default:
                     robot_description)
  odometry           topic of nav_msgs/Odometry of a moving base, used with base.source
                     odometry (default: odometry)
  imu                topic of sensor_msgs/Imu of a moving base, used with base.imu
                     (default: imu)
  log_level          debug, info, warn, error (default: info)
  managed            true: the node is a managed (lifecycle) node that waits, unconfigured,
                     for a lifecycle manager's configure and activate (default: false)
"""
PACKAGE = "interaction_estimator"
EXECUTABLE = "estimator_node"
NODE_NAME = "interaction_estimator"
DEFAULT_PARAMS = ("config", "default.yaml")  # inside the package's share directory


def generate_launch_description():
    from launch import LaunchDescription
    from launch.actions import DeclareLaunchArgument
    from launch.conditions import LaunchConfigurationEquals, LaunchConfigurationNotEquals
    from launch.substitutions import LaunchConfiguration, PathJoinSubstitution
    from launch_ros.actions import Node
    from launch_ros.substitutions import FindPackageShare

    # resolved when launched (not when the description is built): the share directory is
    # looked up in the ament index of the running ROS 2 installation
    default_params = PathJoinSubstitution([FindPackageShare(PACKAGE), *DEFAULT_PARAMS])
    arguments = [
        DeclareLaunchArgument("params_file", default_value=default_params,
                              description="ROS 2 parameter file of the node"),
        DeclareLaunchArgument("namespace", default_value="",
                              description="Namespace of the node and its relative topics"),
        DeclareLaunchArgument("urdf_file", default_value="",
                              description="URDF file; empty: the robot_description topic"),
        DeclareLaunchArgument("joint_states", default_value="joint_states",
                              description="JointState topic (positions, velocities, efforts)"),
        DeclareLaunchArgument("joint_efforts", default_value="joint_efforts",
                              description="Topic of separate efforts (input.separate_efforts)"),
        DeclareLaunchArgument("robot_description", default_value="robot_description",
                              description="URDF topic (std_msgs/String, transient local)"),
        DeclareLaunchArgument("odometry", default_value="odometry",
                              description="Odometry topic of a moving base (base.source "
                                          "odometry)"),
        DeclareLaunchArgument("imu", default_value="imu",
                              description="IMU topic of a moving base (base.imu)"),
        DeclareLaunchArgument("log_level", default_value="info",
                              description="Logging level: debug, info, warn or error"),
        DeclareLaunchArgument("managed", default_value="false",
                              description="true: a managed (lifecycle) node; false: starts "
                                          "running at once"),
    ]
    remappings = [
        ("joint_states", LaunchConfiguration("joint_states")),
        ("joint_efforts", LaunchConfiguration("joint_efforts")),
        ("robot_description", LaunchConfiguration("robot_description")),
        ("odometry", LaunchConfiguration("odometry")),
        ("imu", LaunchConfiguration("imu")),
    ]
    common = dict(
        package=PACKAGE,
        executable=EXECUTABLE,
        name=NODE_NAME,
        namespace=LaunchConfiguration("namespace"),
        remappings=remappings,
        # one argument "--managed=true" or "--managed=false" (the node accepts both)
        arguments=[["--managed=", LaunchConfiguration("managed")],
                   "--ros-args", "--log-level", LaunchConfiguration("log_level")],
        output="screen",
        emulate_tty=True,
    )
    # The URDF file overrides the parameter file only when it is given, so that a
    # robot_description_file set in the parameter file is not replaced by an empty default.
    from_topic_or_file = Node(parameters=[LaunchConfiguration("params_file")],
                              condition=LaunchConfigurationEquals("urdf_file", ""), **common)
    from_urdf_argument = Node(
        parameters=[LaunchConfiguration("params_file"),
                    {"robot_description_file": LaunchConfiguration("urdf_file")}],
        condition=LaunchConfigurationNotEquals("urdf_file", ""), **common)
    return LaunchDescription(arguments + [from_topic_or_file, from_urdf_argument])
