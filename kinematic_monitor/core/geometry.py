"""Small planar geometry helpers (REP 103: radians, counter-clockwise positive, z up)."""

from __future__ import annotations

import math

TWO_PI = 2.0 * math.pi


def wrap_angle(angle: float) -> float:
    """Wrap an angle [rad] into [-pi, pi)."""
    return (angle + math.pi) % TWO_PI - math.pi


def angle_diff(a: float, b: float) -> float:
    """Smallest signed difference a - b [rad], in [-pi, pi)."""
    return wrap_angle(a - b)


def yaw_to_quaternion(yaw: float) -> tuple[float, float, float, float]:
    """Quaternion (x, y, z, w) of a rotation by ``yaw`` [rad] about +z."""
    half = 0.5 * yaw
    return (0.0, 0.0, math.sin(half), math.cos(half))


def quaternion_to_yaw(x: float, y: float, z: float, w: float) -> float:
    """Yaw [rad] (rotation about +z, ZYX convention) of a quaternion (x, y, z, w).

    The quaternion need not be normalised; a zero quaternion raises ``ValueError``.
    """
    norm2 = x * x + y * y + z * z + w * w
    if not math.isfinite(norm2) or norm2 < 1e-12:
        raise ValueError(f"quaternion ({x}, {y}, {z}, {w}) has no usable norm")
    # both arguments scale with the squared norm, so no normalisation is needed
    return math.atan2(2.0 * (w * z + x * y), w * w + x * x - y * y - z * z)


def rotate_to_body(dx: float, dy: float, yaw: float) -> tuple[float, float]:
    """Express a map-frame vector (dx, dy) in a body frame with heading ``yaw``.

    Returns (longitudinal, lateral) components [same unit as the input].
    """
    c, s = math.cos(yaw), math.sin(yaw)
    return (c * dx + s * dy, -s * dx + c * dy)


def pose_error(
    predicted: tuple[float, float, float], measured: tuple[float, float, float]
) -> tuple[float, float, float]:
    """Error of a measured pose against a predicted one, (x, y, yaw) each [m, m, rad].

    Returns (longitudinal [m], lateral [m], heading [rad]) of measured − predicted, in the
    predicted pose's body axes (x forward, y left).
    """
    lon, lat = rotate_to_body(measured[0] - predicted[0], measured[1] - predicted[1],
                              predicted[2])
    return lon, lat, angle_diff(measured[2], predicted[2])
