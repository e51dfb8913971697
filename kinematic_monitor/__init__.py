"""kinematic_monitor: checks a vehicle's motion against the kinematic bicycle model.

The core (model, filter, checks, triage, events, monitor) is plain Python/numpy with no
ROS import; ``node`` and ``bag`` are thin adapters. Units and frames follow REP 103:
SI units, radians, x forward, y left, z up, counter-clockwise positive.
"""

__version__ = "0.1.0"
