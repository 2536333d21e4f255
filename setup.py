"""Build script: works for `colcon build` (ament_python) and for `pip install`."""
from glob import glob

from setuptools import find_packages, setup

PACKAGE = "interaction_estimator"

setup(
    name=PACKAGE,
    version="0.1.0",
    packages=find_packages(exclude=["test", "test.*"]),
    package_data={PACKAGE: ["sim/robots/*.urdf", "config/*.yaml"]},
    data_files=[
        ("share/ament_index/resource_index/packages", [f"resource/{PACKAGE}"]),
        (f"share/{PACKAGE}", ["package.xml"]),
        (f"share/{PACKAGE}/launch", glob("launch/*.py")),
        (f"share/{PACKAGE}/config", glob("config/*.yaml")),
    ],
    install_requires=["numpy", "scipy", "numba", "PyYAML", "rosbags", "matplotlib", "pyarrow"],
    zip_safe=True,
    maintainer="interaction_estimator maintainers",
    maintainer_email="engineering@interaction-estimator.invalid",
    description=(
        "Sensorless interaction-force and object-parameter estimation for ROS 2 manipulators."
    ),
    license="Apache-2.0",
    tests_require=["pytest"],
    # optional: replays of many bags on a Dask cluster (replay --cluster); not needed by the node
    extras_require={"fleet": ["dask[distributed]>=2024.1"]},
    entry_points={
        "console_scripts": [
            "interaction-estimator = interaction_estimator.cli:entry",
            "estimator_node = interaction_estimator.ros.node:main",
        ],
    },
)
