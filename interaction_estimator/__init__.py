"""interaction_estimator: sensorless interaction-force and object-parameter estimation."""

__version__ = "0.1.0"
