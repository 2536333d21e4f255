"""The commissioning motion: a periodic joint trajectory that excites the robot's identifiable
dynamics within its limits (finite Fourier series, Swevers et al. 1997), written as a CSV and a
trajectory_msgs/JointTrajectory YAML. Modules: ``limits`` (URDF, ROS 2 joint_limits, the
user's values and the margin), ``trajectory`` (the series and its optimization), ``files``
(CSV and YAML), ``command`` (the command line)."""
from .command import add_arguments, main, run
from .limits import JointLimits, LimitsError, resolve
from .trajectory import FourierTrajectory, fit_to_limits, optimize

__all__ = ["add_arguments", "main", "run", "JointLimits", "LimitsError", "resolve",
           "FourierTrajectory", "fit_to_limits", "optimize"]
