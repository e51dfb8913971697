"""ament_python set-up for kinematic_monitor (also installs with plain pip)."""
from glob import glob

from setuptools import find_packages, setup

package_name = "kinematic_monitor"

# ROS packages the node imports at run time, as registry wheel names without the prefix
ROS_PACKAGES = ["rclpy", "rmw-fastrtps-cpp", "std-msgs", "sensor-msgs", "nav-msgs",
                "geometry-msgs", "diagnostic-msgs"]
# newest release (Kilted today): the unprefixed wheels
ROS_WHEELS = ["ros-" + p for p in ROS_PACKAGES]
# Jazzy (the long-term-support release): its meta-wheels pin the unprefixed wheels to
# Jazzy's versions, so this extra and "ros" cannot share one environment
ROS_JAZZY_WHEELS = ["ros-jazzy-" + p for p in ROS_PACKAGES]

setup(
    name=package_name,
    version="0.1.0",
    packages=find_packages(exclude=["test", "test.*", "bench"]),
    data_files=[
        ("share/ament_index/resource_index/packages", ["resource/" + package_name]),
        ("share/" + package_name, ["package.xml"]),
        ("share/" + package_name + "/launch", glob("launch/*.launch.py")),
        ("share/" + package_name + "/config", glob("config/*.yaml")),
    ],
    python_requires=">=3.10",
    install_requires=["setuptools", "numpy", "filterpy", "transforms3d", "pyyaml"],
    extras_require={
        # rclpy and the standard message packages as PyPI wheels, for machines
        # without a ROS install. On a ROS install these come from the distribution.
        "ros": ROS_WHEELS,
        "ros-jazzy": ROS_JAZZY_WHEELS,
        # offline tools: bag reading/writing, report plots, progress bars
        "tools": ["rosbags>=0.10", "matplotlib", "tqdm"],
        # fleet sweep: parallel replay of many bags on Dask, GeoJSON low-grip map
        "fleet": ["dask", "distributed", "geojson"],
        "test": [
            "pytest",
            "pytest-cov",
            "hypothesis",
            "scipy",
            "commonroad-vehicle-models",
            "ruff",
            "mypy",
            "types-PyYAML",
            # the colcon build test (test/packaging) and its package.xml check
            "colcon-core",
            "colcon-ros",
            "colcon-python-setup-py",
            "catkin-pkg",
            # the annotated bag read back by the MCAP reference reader
            "mcap",
            "mcap-ros2-support",
        ],
    },
    zip_safe=True,
    maintainer="kinematic_monitor developers",
    maintainer_email="kinematic-monitor@example.invalid",
    description=(
        "Watches whether an Ackermann vehicle still moves as the kinematic bicycle model "
        "predicts, and says whether tyres, localisation or calibration are at fault."
    ),
    license="Apache-2.0",
    entry_points={
        "console_scripts": [
            "kinematic-monitor = kinematic_monitor.apps.cli:main",
            "kinematic_monitor = kinematic_monitor.ros.node:main",
        ],
    },
)
