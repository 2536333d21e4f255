"""Identification of the robot's own dynamics (and of a mounted tool) from free motion.

Base inertial parameters (Gautier and Khalil 1990) through Pinocchio's joint-torque regressor,
jointly with friction and torque bias, physically consistent through the log-Cholesky
parametrisation (Rucker and Wensing 2022), regularized toward the URDF. Modules:
``inertia`` (one body's parameters, consistency), ``structure`` (the URDF's bodies and tools),
``regressor`` (regressor and base parameters), ``signals`` (filtering and the smoothing
differentiator), ``fit`` (the estimate), ``procedure`` (the whole), ``urdf_out`` (the URDF
written).
"""
from .fit import Options
from .procedure import (
                        IdentificationError,
                        LinkResult,
                        ModelIdentification,
                        identify_model,
                        physical_problems,
)
from .signals import MotionData, RawRun, exact, prepare, runs_from_samples
from .structure import Tool

__all__ = ["Options", "IdentificationError", "LinkResult", "ModelIdentification",
           "identify_model", "physical_problems", "MotionData", "RawRun", "exact", "prepare",
           "runs_from_samples", "Tool"]
