"""The estimator as a ROS 2 managed (lifecycle) node (``estimator_node --managed``):
:class:`ManagedEstimatorNode`, the same behaviour as the plain node (:mod:`.estimator`) set up
and torn down by its lifecycle transitions."""
from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from rclpy.lifecycle import LifecycleNode, LifecycleState, TransitionCallbackReturn

from ..core.settings import NODE_NAME, Settings, SettingsError
from ..io.effort_matching import EffortMatcher
from .estimator import EFFORT_BUFFER, _Estimator
from .topics import ACTIVE, FINALIZED, INACTIVE, UNCONFIGURED


class ManagedEstimatorNode(_Estimator, LifecycleNode):
    """The estimator as a ROS 2 managed (lifecycle) node: a lifecycle manager, or the
    ``change_state`` service, takes it through its states (ROS 2 design article "Managed
    nodes"):

    - constructed (unconfigured): parameters declared; ~/status and /diagnostics say
      ``unconfigured``; nothing else exists;
    - configure: the parameters are read and validated and the URDF is read (the
      ``robot_description_file``, else the ``robot_description`` topic is subscribed and the
      model is built when it arrives); the outputs, services and the watch are created. A
      refused parameter or an unusable URDF file fails the transition (its result is FAILURE:
      the node stays unconfigured), and the reason is logged and is the status message;
    - activate: joint states are subscribed and the outputs publish;
    - deactivate: joint states unsubscribed, outputs silent, markers cleared (the estimates
      are kept; the observer restarts at the gap when activated again);
    - cleanup: everything configure made is destroyed and the model freed;
    - shutdown (from any state): the same, and the node is finalized.
    """

    managed = True

    def __init__(self, parameter_files: Sequence[str] = (), **node_kwargs: Any):
        LifecycleNode.__init__(self, NODE_NAME, **node_kwargs)
        # robot_description_file is relative to the file that sets it
        self._parameter_files = tuple(parameter_files)
        errors = self._declare_parameters()
        try:
            settings = self._read_settings()
            self._normalize_declared()
        except SettingsError as exc:   # reported by configure, which refuses to go on
            settings, errors = Settings(), {**errors, "<settings>": str(exc)}
        self._init_state(settings)
        self._declare_errors = errors
        self._lifecycle = UNCONFIGURED
        self._configure_error = ""
        self._create_status_outputs()
        self._create_watch()
        self.add_pre_set_parameters_callback(self._normalize_parameters)
        self.add_on_set_parameters_callback(self._on_set_parameters)
        self._publish_idle()

    # --- transitions (each returns SUCCESS, FAILURE or ERROR) ---------------------------
    def on_configure(self, state: LifecycleState) -> TransitionCallbackReturn:
        problems = [v for k, v in self._declare_errors.items() if k != "<settings>"]
        try:
            settings = self._read_settings()
        except SettingsError as exc:
            problems.append(str(exc))
        if problems:
            return self._configure_failed("invalid parameters: " + "; ".join(problems))
        self.settings = settings
        self._declare_errors.pop("<settings>", None)
        self._matcher = EffortMatcher(settings["input.stamp_tolerance"], EFFORT_BUFFER)
        self._marker_builder = None
        path = settings["robot_description_file"]
        if path:
            self._load_file(path)
            if self.pipeline is None:
                error = self._model_error
                self._model_error = ""
                return self._configure_failed(error)
        self._create_outputs()
        self._create_model_input()
        self._create_services()
        self._configure_error = ""
        self._lifecycle = INACTIVE
        result = super().on_configure(state)
        self.get_logger().info(f"configured (model from {self._model_source})")
        self._publish_idle()
        return result

    def _configure_failed(self, why: str) -> TransitionCallbackReturn:
        self._configure_error = f"configure failed: {why}"
        self.get_logger().error(self._configure_error)
        self._retire_pipeline()
        self._publish_idle()
        return TransitionCallbackReturn.FAILURE

    def on_activate(self, state: LifecycleState) -> TransitionCallbackReturn:
        result = super().on_activate(state)   # enables the lifecycle publishers
        self._create_inputs()
        self._last_processed = None
        self._lifecycle = ACTIVE
        self.get_logger().info(f"active: reading {self._states_sub.topic_name}")
        self._publish_idle()
        return result

    def on_deactivate(self, state: LifecycleState) -> TransitionCallbackReturn:
        self._destroy_inputs()
        self._clear_markers()
        self._lifecycle = INACTIVE
        result = super().on_deactivate(state)   # silences the lifecycle publishers
        self.get_logger().info("inactive: joint states no longer read, outputs silent")
        self._publish_idle()
        return result

    def on_cleanup(self, state: LifecycleState) -> TransitionCallbackReturn:
        self._tear_down()
        self.get_logger().info("cleaned up: model freed")
        self._publish_idle()
        return TransitionCallbackReturn.SUCCESS

    def on_shutdown(self, state: LifecycleState) -> TransitionCallbackReturn:
        self._tear_down()
        self._lifecycle = FINALIZED
        self._publish_idle()
        return TransitionCallbackReturn.SUCCESS

    def on_error(self, state: LifecycleState) -> TransitionCallbackReturn:
        self._tear_down()
        return TransitionCallbackReturn.SUCCESS   # back to unconfigured

    def _tear_down(self) -> None:
        """Destroy what configure and activate made; free the model."""
        self._destroy_inputs()
        self._clear_markers()   # from active (shutdown): its publisher is still enabled
        for pub in (self._wrench_pub, self._environment_pub, self._markers_pub,
                    self._mechanism_pub):
            if pub is not None:
                self.destroy_lifecycle_publisher(pub)
        self._wrench_pub = self._environment_pub = self._markers_pub = None
        self._mechanism_pub = None
        self._markers_wanted = False
        if self._description_sub is not None:
            self.destroy_subscription(self._description_sub)
            self._description_sub = None
        for srv in self._node_services:
            self.destroy_service(srv)
        self._node_services = []
        self._retire_pipeline()
        self._model_text, self._model_error = None, ""
        self._last_processed = None
        self._lifecycle = UNCONFIGURED
