"""The ROS 2 node ``interaction_estimator``: JointState in, wrench and object estimates out.

A thin adapter around :class:`~interaction_estimator.core.pipeline.Pipeline`:
message -> Sample -> Pipeline -> Estimate -> messages. Topics (relative names, so namespaces and
remapping apply):

- in ``joint_states`` (sensor_msgs/JointState: positions rad or m, velocities, efforts N·m or N),
  and with ``input.separate_efforts`` also ``joint_efforts`` (efforts only, matched by stamp);
- in ``robot_description`` (std_msgs/String, transient local) unless ``robot_description_file``
  names a URDF file;
- with ``base.source: odometry`` also in ``odometry`` (nav_msgs/Odometry) and, with
  ``base.imu``, ``imu`` (sensor_msgs/Imu): the base's state, interpolated at each joint state's
  stamp (a joint state waits for the messages after it: at most one odometry interval); the
  world frame of the outputs is then the odometry's frame_id;
- out ``~/wrench`` (geometry_msgs/WrenchStamped: force N and torque N·m the robot applies to the
  environment, world frame = URDF root unless ``output.frame_id``), ``~/environment``
  (std_msgs/Float64MultiArray: mass kg, damping N·s/m, stiffness N/m, static force N, then their
  standard deviations), ``~/status`` (diagnostic_msgs/DiagnosticStatus), ``/diagnostics`` and
  ``~/markers`` (visualization_msgs/MarkerArray for RViz, at the status rate while subscribed:
  :mod:`.markers`);
- services ``~/reset`` and ``~/calibrate_bias`` (std_srvs/Trigger).

Two kinds of node, one behaviour: :class:`EstimatorNode` is set up and running from its start;
:class:`~.lifecycle.ManagedEstimatorNode` (``--managed``) is a ROS 2 lifecycle node that a
lifecycle manager configures, activates, deactivates and cleans up (see its docstring); its
status then also reports ``unconfigured`` and ``inactive`` (the lifecycle state's label).

This module holds the plain node, the executor and the entry point (:func:`main`, the console
script ``estimator_node``, its ``--managed`` flag). The behaviour both nodes share is
:mod:`.estimator` (set-up, robot model, inputs, outputs, services) with :mod:`.parameter_handling`
(parameters at run time) and :mod:`.status` (status, diagnostics, markers); the topic and service
names are :mod:`.topics`.

States reported in the status besides the pipeline's (learning_bias, free_motion, in_contact,
converged, contact_lost): ``waiting_for_model`` (WARN: no URDF yet), ``model_error`` (ERROR: the
URDF cannot be used; the parser's message is the status message) and ``waiting_for_input`` (WARN
before the first usable joint state, STALE once input has stopped for ``health.stale_after`` s).

Nothing here blocks the executor: the URDF file is read once at start-up; each message costs one
pipeline step. Joint states are read from the bytes received, and the outputs are published as
bytes (:mod:`.messages`): rclpy's conversions of message objects cost more than the rest of
the node's own work per message. A message that cannot be used is counted by reason and
reported (status key-values and a throttled warning); an exception while handling one is
caught, counted and reported the same way. No non-finite number is ever published.

Run: ``estimator_node [--managed] --ros-args --params-file config/default.yaml -r __ns:=/arm``.
"""
from __future__ import annotations

import gc
import sys
from collections.abc import Sequence
from typing import Any

import rclpy
import rclpy.executors
import rclpy.utilities
from rclpy.node import Node

from ..core.compiled import CACHE_DIR
from ..core.settings import NODE_NAME, SettingsError
from ..core.warmup import warm_up
from . import parameters as node_params
from .estimator import _Estimator
from .lifecycle import ManagedEstimatorNode

SPIN_TIMEOUT_S = 0.1        # s, executor wait per spin_once


class EstimatorNode(_Estimator, Node):
    """The estimator as a ROS 2 node, set up and running from construction. Raises
    SettingsError if its parameters are invalid."""

    def __init__(self, parameter_files: Sequence[str] = (), **node_kwargs: Any):
        Node.__init__(self, NODE_NAME, **node_kwargs)
        # robot_description_file is relative to the file that sets it
        self._parameter_files = tuple(parameter_files)
        errors = self._declare_parameters()
        if errors:
            raise SettingsError("; ".join(errors.values()))
        settings = self._read_settings()
        self._normalize_declared()
        self._init_state(settings)
        self._create_status_outputs()
        self._create_outputs()
        self._create_inputs()
        self._create_model_input()
        self._create_services()
        self._create_watch()
        self.add_pre_set_parameters_callback(self._normalize_parameters)
        self.add_on_set_parameters_callback(self._on_set_parameters)

        if settings["robot_description_file"]:
            self._load_file(settings["robot_description_file"])
        self._publish_idle()


def make_executor():
    """rclpy's EventsExecutor where it exists, else the SingleThreadedExecutor."""
    try:
        from rclpy.experimental import EventsExecutor
        return EventsExecutor()
    except (ImportError, AttributeError, RuntimeError):
        from rclpy.executors import SingleThreadedExecutor
        return SingleThreadedExecutor()


USAGE = f"""usage: estimator_node [--managed] [--ros-args [-p NAME:=VALUE] [--params-file FILE]
                                 [-r FROM:=TO] ...]

ROS 2 node '{NODE_NAME}': estimates the force a manipulator applies at its contact frame and the
mass, damping, stiffness and static force of the object, from joint states alone.

  --managed    run as a managed (lifecycle) node: it waits, unconfigured, for the configure
               and activate transitions of a lifecycle manager or of the change_state
               service (--managed=false: the plain node, the default)

Parameters: see config/default.yaml (every one with unit, meaning and range).
"""


def managed_flag(args: list[str]) -> tuple[bool | None, list[str]]:
    """(--managed given as true/false, or None when absent; the other arguments). Accepts
    ``--managed``, ``--managed=true`` and ``--managed=false`` (what the launch file passes);
    returns (None, args) with the bad argument left in ``args`` for anything else."""
    managed, rest = False, []
    for a in args:
        if a == "--managed":
            managed = True
        elif a.startswith("--managed="):
            value = a.split("=", 1)[1].strip().lower()
            if value not in ("true", "false"):
                return None, [a]
            managed = value == "true"
        else:
            rest.append(a)
    return managed, rest


def main(argv: Sequence[str] | None = None) -> int:
    """Run the node until SIGINT or SIGTERM. ``argv``: the arguments after the program name
    (None: ``sys.argv[1:]``), ROS arguments after ``--ros-args``. Returns the exit status."""
    args = ["estimator_node", *(sys.argv[1:] if argv is None else argv)]
    for path in node_params.parameter_files(args):
        problem = node_params.unreadable_file(path)
        if problem:
            print(f"estimator_node: {problem}", file=sys.stderr)
            return 2
    try:
        rest = rclpy.utilities.remove_ros_args(args)[1:]
    except Exception as exc:  # rcl's parser refuses the arguments or a parameter file
        print(f"estimator_node: invalid ROS arguments: {exc}", file=sys.stderr)
        return 2
    managed, rest = managed_flag(rest)
    if managed is None:
        print(f"estimator_node: {rest[0]!r} is not allowed; expected --managed, "
              f"--managed=true or --managed=false\n\n{USAGE}", file=sys.stderr)
        return 2
    if rest:
        if rest[0] in ("-h", "--help"):
            print(USAGE)
            return 0
        print(f"estimator_node: unexpected arguments {rest}; expected --managed and ROS "
              f"arguments after --ros-args\n\n{USAGE}", file=sys.stderr)
        return 2
    rclpy.init(args=args)
    node = None
    try:
        try:
            files = node_params.parameter_files(args)
            node = ManagedEstimatorNode(files) if managed else EstimatorNode(files)
        except SettingsError as exc:
            print(f"estimator_node: invalid parameters: {exc}", file=sys.stderr)
            return 2
        except Exception:
            if not rclpy.ok():   # SIGINT or SIGTERM while the node was being built: a stop
                return 0
            raise
        for path in node_params.parameter_files(args):
            warning = node_params.unmatched_file_warning(path, node.get_fully_qualified_name())
            if warning:
                node.get_logger().warning(warning)
        # the compiled arithmetic loaded (or, on a machine's first run, compiled) before the
        # first joint state, not while handling it
        node.get_logger().info(f"compiled arithmetic ready in {warm_up():.1f} s "
                               f"(cache {CACHE_DIR})")
        # Everything made so far (rclpy, numpy, Pinocchio, Numba: some 160 000 objects) lives
        # as long as the process: kept out of the garbage collector's full passes, which
        # otherwise scan all of it (about 0.1 s here) every so often while messages wait
        gc.collect()
        gc.freeze()
        executor = make_executor()
        executor.add_node(node)
        while rclpy.ok():
            executor.spin_once(timeout_sec=SPIN_TIMEOUT_S)
    except KeyboardInterrupt:
        pass
    except rclpy.executors.ExternalShutdownException:
        pass
    finally:
        if node is not None:
            node.destroy_node()
        rclpy.try_shutdown()
    return 0


if __name__ == "__main__":
    sys.exit(main())
