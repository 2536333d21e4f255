"""Test harness: every ROS 2 context in the tests stays on this machine, on a domain of its own.

Set here, at import time, before any test module can import rclpy or start a subprocess, so no
test can forget: ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST and a per-run ROS_DOMAIN_ID.
"""
import os
import sys
from pathlib import Path

os.environ["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
os.environ["ROS_DOMAIN_ID"] = str(10 + os.getpid() % 80)
os.environ.setdefault("RMW_IMPLEMENTATION", "rmw_fastrtps_cpp")
os.environ.pop("ROS_LOCALHOST_ONLY", None)  # deprecated variable; the range above replaces it

# test-support modules (ros_harness, real_robots, ...) import as top-level modules
sys.path.insert(0, str(Path(__file__).resolve().parent))


def pytest_sessionstart(session):
    """Compile the estimator's compiled functions (or load them from the cache) once, before any
    test: a node or replay started by a test as a subprocess then loads them and never spends
    its time budget compiling (``make setup`` has usually done it already)."""
    from interaction_estimator.core.warmup import warm_up

    warm_up()
