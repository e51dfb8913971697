"""Start the kinematic_monitor node with a parameter file.

    ros2 launch kinematic_monitor kinematic_monitor.launch.py params_file:=/path/to/vehicle.yaml

``params_file`` defaults to the installed config/kinematic_monitor.yaml, whose vehicle
geometry is a placeholder: give your own vehicle's file. ``use_sim_time:=true`` when
replaying a bag with ``--clock``.
"""

import os  # noqa: I001 (ruff takes `launch` for this repo's launch/ folder)

from ament_index_python.packages import get_package_share_directory
from launch import LaunchDescription
from launch.actions import DeclareLaunchArgument
from launch.substitutions import LaunchConfiguration
from launch_ros.actions import Node
from launch_ros.parameter_descriptions import ParameterValue


def generate_launch_description() -> LaunchDescription:
    default_params_file = os.path.join(
        get_package_share_directory("kinematic_monitor"), "config", "kinematic_monitor.yaml"
    )
    params_file = LaunchConfiguration("params_file")
    use_sim_time = LaunchConfiguration("use_sim_time")
    return LaunchDescription(
        [
            DeclareLaunchArgument(
                "params_file",
                default_value=default_params_file,
                description="ROS 2 parameter file for the kinematic_monitor node",
            ),
            DeclareLaunchArgument(
                "use_sim_time",
                default_value="false",
                choices=["true", "false"],
                description="use the /clock topic (bag replay) instead of the system clock",
            ),
            Node(
                package="kinematic_monitor",
                executable="kinematic_monitor",
                name="kinematic_monitor",
                parameters=[
                    params_file,
                    {"use_sim_time": ParameterValue(use_sim_time, value_type=bool)},
                ],
                output="screen",
            ),
        ]
    )
