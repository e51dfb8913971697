"""Kinematic bicycle model of an Ackermann vehicle, referenced to the centre of gravity.

Conventions (REP 103): SI units, radians, body x forward, y left, z up, counter-clockwise
positive; a left turn has positive steering angle, yaw rate and sideslip. Positions and
yaw are in a fixed planar frame (``map`` or ``odom``, REP 105).

Equations (Rajamani, *Vehicle Dynamics and Control*, 2nd ed. 2012, kinematic model of
lateral vehicle motion), with ``L = l_f + l_r`` the wheelbase:

* sideslip at the CG       ``beta = atan(l_r * tan(delta) / L)``
* yaw rate                 ``psi_dot = v * cos(beta) * tan(delta) / L = v * sin(beta) / l_r``
* CG path curvature        ``kappa = cos(beta) * tan(delta) / L``
* lateral acceleration     ``a_y = v * psi_dot`` (steady state)
* CG velocity direction    ``psi + beta``

``v`` is always the CG speed [m/s] (negative when reversing). The rear-axle centre moves
along the heading with ``v_r = v * cos(beta)``; helpers convert between the references.

Steering: ``delta`` is the bicycle-equivalent road-wheel angle [rad]. A measured angle is
corrected with :func:`corrected_steer` (``delta_true = delta_measured + steering_offset``).

These functions do not check for NaN on the hot path; callers (the filter, the monitor)
validate inputs. :class:`VehicleParams` validates itself.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: standard acceleration of gravity [m/s²] (CGPM 1901 conventional value, ISO 80000-3)
GRAVITY = 9.80665
_HALF_PI = 0.5 * math.pi
# below this half-angle [rad] the sinc series is used (truncation error < 1e-21)
_SERIES_LIMIT = 1e-2


@dataclass(frozen=True)
class VehicleParams:
    """Vehicle geometry and calibration.

    wheelbase: front to rear axle L [m], > 0.
    cg_to_rear_axle: l_r [m], in (0, wheelbase).
    wheel_radius: nominal effective rolling radius [m], > 0.
    track_width: distance between left and right wheel centres [m], > 0.
    steering_offset: added to the measured road-wheel angle,
        ``delta_true = delta_measured + steering_offset`` [rad]; |offset| < max_road_wheel_angle.
    wheel_speed_scale: multiplies wheel_radius (effective radius = radius * scale) [-], > 0.
    max_road_wheel_angle: largest plausible bicycle road-wheel angle [rad], in (0, pi/2).
    understeer_gradient: steady-state understeer gradient K [rad/(m/s²)] (SAE J670 / ISO 8855
        sign, positive for understeer); the kinematic prediction uses delta - K * a_y.
    steering_ratio: steering-wheel angle per road-wheel angle [-], > 0 (1: the steering
        input reports road-wheel angles; the converters divide by it).
    """

    wheelbase: float
    cg_to_rear_axle: float
    wheel_radius: float
    track_width: float
    steering_offset: float = 0.0
    wheel_speed_scale: float = 1.0
    max_road_wheel_angle: float = 0.7
    understeer_gradient: float = 0.0
    steering_ratio: float = 1.0

    def __post_init__(self) -> None:
        def bad(name: str, allowed: str) -> ValueError:
            return ValueError(
                f"vehicle parameter {name}={getattr(self, name)!r} is invalid; allowed: {allowed}"
            )

        for name in (
            "wheelbase",
            "cg_to_rear_axle",
            "wheel_radius",
            "track_width",
            "steering_offset",
            "wheel_speed_scale",
            "max_road_wheel_angle",
            "understeer_gradient",
            "steering_ratio",
        ):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int | float):
                raise bad(name, "a finite number")
            if not math.isfinite(value):
                raise bad(name, "a finite number")
        if self.wheelbase <= 0.0:
            raise bad("wheelbase", "> 0 m")
        if not 0.0 < self.cg_to_rear_axle < self.wheelbase:
            raise bad("cg_to_rear_axle", f"in (0, wheelbase={self.wheelbase}) m")
        if self.wheel_radius <= 0.0:
            raise bad("wheel_radius", "> 0 m")
        if self.track_width <= 0.0:
            raise bad("track_width", "> 0 m")
        if self.wheel_speed_scale <= 0.0:
            raise bad("wheel_speed_scale", "> 0")
        if self.steering_ratio <= 0.0:
            raise bad("steering_ratio", "> 0")
        if not 0.0 < self.max_road_wheel_angle < _HALF_PI:
            raise bad("max_road_wheel_angle", "in (0, pi/2) rad")
        if abs(self.steering_offset) >= self.max_road_wheel_angle:
            raise bad(
                "steering_offset",
                f"|offset| < max_road_wheel_angle={self.max_road_wheel_angle} rad",
            )
        # the inner front wheel must stay below 90 deg at the largest bicycle angle
        if 0.5 * self.track_width * math.tan(self.max_road_wheel_angle) >= self.wheelbase:
            raise bad(
                "max_road_wheel_angle",
                "small enough that tan(angle) * track_width / 2 < wheelbase "
                "(inner wheel below 90 deg)",
            )

    @property
    def cg_to_front_axle(self) -> float:
        """l_f = wheelbase - cg_to_rear_axle [m]."""
        return self.wheelbase - self.cg_to_rear_axle

    @property
    def effective_wheel_radius(self) -> float:
        """wheel_radius * wheel_speed_scale [m]."""
        return self.wheel_radius * self.wheel_speed_scale


# --- CG-referenced bicycle equations -------------------------------------------------


def corrected_steer(delta_measured: float, p: VehicleParams) -> float:
    """True bicycle road-wheel angle [rad] = measured + ``p.steering_offset``."""
    return delta_measured + p.steering_offset


def sideslip(delta: float, p: VehicleParams) -> float:
    """Sideslip angle beta at the CG [rad] for road-wheel angle ``delta`` [rad]."""
    return math.atan(p.cg_to_rear_axle * math.tan(delta) / p.wheelbase)


def curvature(delta: float, p: VehicleParams) -> float:
    """Curvature of the CG path [1/m] (positive to the left): cos(beta) * tan(delta) / L."""
    return math.cos(sideslip(delta, p)) * math.tan(delta) / p.wheelbase


def yaw_rate(v: float, delta: float, p: VehicleParams) -> float:
    """Yaw rate [rad/s] for CG speed ``v`` [m/s] and road-wheel angle ``delta`` [rad]."""
    return v * curvature(delta, p)


def lateral_acceleration(v: float, delta: float, p: VehicleParams) -> float:
    """Steady-state lateral acceleration v * psi_dot [m/s^2] (body y, left positive)."""
    return v * v * curvature(delta, p)


#: the kinematic model is consistent while |a_y| <= 0.5·μ·g (Polack et al., IEEE IV 2017;
#: the factor from memory)
KINEMATIC_ENVELOPE = 0.5


def kinematic_envelope(friction: float) -> float:
    """Largest |a_y| [m/s²] for which the kinematic model is consistent: 0.5·μ·g."""
    return KINEMATIC_ENVELOPE * friction * GRAVITY


# --- exact discrete step ---------------------------------------------------------------


def _sinc_and_derivative(u: float) -> tuple[float, float]:
    """sin(u)/u and its derivative d/du, with a series near 0 (no division by ~0)."""
    if abs(u) < _SERIES_LIMIT:
        u2 = u * u
        g = 1.0 - u2 / 6.0 * (1.0 - u2 / 20.0 * (1.0 - u2 / 42.0))
        dg = -u / 3.0 * (1.0 - u2 / 10.0 * (1.0 - u2 / 28.0 * (1.0 - u2 / 54.0)))
        return g, dg
    s, c = math.sin(u), math.cos(u)
    return s / u, (u * c - s) / (u * u)


def step(
    x: float, y: float, yaw: float, v: float, delta: float, dt: float, p: VehicleParams
) -> tuple[float, float, float]:
    """Exact pose after ``dt`` [s] at constant CG speed ``v`` [m/s] and angle ``delta`` [rad].

    The CG moves on a circular arc of curvature :func:`curvature` with its velocity pointing
    at ``yaw + beta``. Written as chord = arc * sinc(dyaw/2), so it is exact and stable for
    any curvature including straight ahead, reverse (v < 0) and standstill (v = 0).
    Returns (x, y, yaw) with yaw wrapped to [-pi, pi).
    """
    tan_d = math.tan(delta)
    beta = math.atan(p.cg_to_rear_axle * tan_d / p.wheelbase)
    kappa = math.cos(beta) * tan_d / p.wheelbase
    s = v * dt
    dyaw = s * kappa
    g, _ = _sinc_and_derivative(0.5 * dyaw)
    mid = yaw + beta + 0.5 * dyaw
    new_yaw = (yaw + dyaw + math.pi) % (2.0 * math.pi) - math.pi
    return x + s * g * math.cos(mid), y + s * g * math.sin(mid), new_yaw


def step_with_partials(
    x: float, y: float, yaw: float, v: float, delta: float, dt: float, p: VehicleParams
) -> tuple[tuple[float, float, float], tuple[float, ...]]:
    """:func:`step` plus its partial derivatives, as plain floats (filter hot path).

    Returns ((x', y', yaw'), (dx_dyaw, dy_dyaw, dx_dv, dy_dv, dyaw_dv,
    dx_ddelta, dy_ddelta, dyaw_ddelta)). The derivatives d(x', y', yaw')/d(x, y, yaw)
    not listed are identity (1 on the diagonal, 0 elsewhere).
    """
    lr, wb = p.cg_to_rear_axle, p.wheelbase
    tan_d = math.tan(delta)
    ratio = lr * tan_d / wb
    beta = math.atan(ratio)
    cos_b = math.cos(beta)
    sin_b = math.sin(beta)
    kappa = sin_b / lr  # = cos(beta) tan(delta) / L
    dbeta = (lr / wb) * (1.0 + tan_d * tan_d) / (1.0 + ratio * ratio)
    dkappa = cos_b * dbeta / lr
    s = v * dt
    dyaw = s * kappa
    half = 0.5 * dyaw
    g, dg = _sinc_and_derivative(half)
    mid = yaw + beta + half
    cm, sm = math.cos(mid), math.sin(mid)
    dx = s * g * cm
    dy = s * g * sm
    new_yaw = (yaw + dyaw + math.pi) % (2.0 * math.pi) - math.pi
    # d/dv: s = v dt, half = v dt kappa / 2
    dhalf_dv = 0.5 * dt * kappa
    dx_dv = dt * g * cm + s * dg * dhalf_dv * cm - s * g * sm * dhalf_dv
    dy_dv = dt * g * sm + s * dg * dhalf_dv * sm + s * g * cm * dhalf_dv
    # d/ddelta: beta and kappa depend on delta
    dhalf_dd = 0.5 * s * dkappa
    dmid_dd = dbeta + dhalf_dd
    dx_dd = s * (dg * dhalf_dd * cm - g * sm * dmid_dd)
    dy_dd = s * (dg * dhalf_dd * sm + g * cm * dmid_dd)
    return (x + dx, y + dy, new_yaw), (
        -dy,
        dx,
        dx_dv,
        dy_dv,
        dt * kappa,
        dx_dd,
        dy_dd,
        s * dkappa,
    )


def step_jacobian(
    x: float, y: float, yaw: float, v: float, delta: float, dt: float, p: VehicleParams
) -> np.ndarray:
    """3x5 Jacobian d(x', y', yaw') / d(x, y, yaw, v, delta) of :func:`step`."""
    _, (dx_dyaw, dy_dyaw, dx_dv, dy_dv, dyaw_dv, dx_dd, dy_dd, dyaw_dd) = step_with_partials(
        x, y, yaw, v, delta, dt, p
    )
    return np.array(
        [
            [1.0, 0.0, dx_dyaw, dx_dv, dx_dd],
            [0.0, 1.0, dy_dyaw, dy_dv, dy_dd],
            [0.0, 0.0, 1.0, dyaw_dv, dyaw_dd],
        ]
    )


# --- Ackermann geometry ----------------------------------------------------------------


def _check_angle(name: str, value: float) -> None:
    if not math.isfinite(value) or abs(value) >= _HALF_PI:
        raise ValueError(f"{name}={value!r} rad is invalid; allowed: finite, |angle| < pi/2")


def ackermann_to_bicycle(delta_left: float, delta_right: float,
                         p: VehicleParams | None = None) -> float:
    """Bicycle-equivalent angle [rad] from left/right road-wheel angles [rad].

    Ackermann geometry: cot(delta) = (cot(delta_left) + cot(delta_right)) / 2, evaluated
    as tan(delta) = 2 tan(dl) tan(dr) / (tan(dl) + tan(dr)) so straight ahead needs no
    division by zero. When the two angles do not have the same strict sign (straight ahead
    or toe noise around it) the result is 0, which is the limit of the formula as either
    wheel goes straight (the mapping stays continuous).
    ``p`` may be given for a uniform signature; the relation does not depend on geometry.
    """
    _check_angle("delta_left", delta_left)
    _check_angle("delta_right", delta_right)
    tl, tr = math.tan(delta_left), math.tan(delta_right)
    if tl * tr <= 0.0:
        return 0.0
    return math.atan(2.0 * tl * tr / (tl + tr))


def bicycle_to_ackermann(delta: float, p: VehicleParams) -> tuple[float, float]:
    """(left, right) road-wheel angles [rad] for bicycle angle ``delta`` [rad].

    cot(dl) = cot(delta) - w/(2L), cot(dr) = cot(delta) + w/(2L); in a left turn the
    left (inner) wheel has the larger angle. Raises ``ValueError`` when the inner wheel
    would reach 90 deg.
    """
    _check_angle("delta", delta)
    t = math.tan(delta)
    k = 0.5 * p.track_width / p.wheelbase
    den_l, den_r = 1.0 - k * t, 1.0 + k * t
    if den_l <= 0.0 or den_r <= 0.0:
        raise ValueError(
            f"delta={delta!r} rad is invalid; allowed: |tan(delta)| < 2*wheelbase/track_width"
            f" = {1.0 / k:.4g} (inner wheel below 90 deg)"
        )
    return math.atan(t / den_l), math.atan(t / den_r)


# --- wheel speeds and reference points -------------------------------------------------


def rear_axle_speed(omega_rl: float, omega_rr: float, p: VehicleParams) -> float:
    """Speed of the rear-axle centre [m/s] = R_e (omega_rl + omega_rr) / 2, omega in rad/s."""
    return 0.5 * p.effective_wheel_radius * (omega_rl + omega_rr)


def rear_wheel_yaw_rate(omega_rl: float, omega_rr: float, p: VehicleParams) -> float:
    """Yaw rate [rad/s] from the rear-wheel speed difference: R_e (w_rr - w_rl) / track."""
    return p.effective_wheel_radius * (omega_rr - omega_rl) / p.track_width


def cg_speed_from_rear_axle(v_rear: float, delta: float, p: VehicleParams) -> float:
    """CG speed [m/s] from rear-axle centre speed: v = v_r / cos(beta)."""
    return v_rear / math.cos(sideslip(delta, p))


def rear_axle_speed_from_cg(v: float, delta: float, p: VehicleParams) -> float:
    """Rear-axle centre speed [m/s] from CG speed: v_r = v cos(beta)."""
    return v * math.cos(sideslip(delta, p))


def cg_speed_from_rear_wheels(
    omega_rl: float, omega_rr: float, delta: float, p: VehicleParams
) -> float:
    """CG speed [m/s] from rear wheel speeds [rad/s] and bicycle angle ``delta`` [rad]."""
    return cg_speed_from_rear_axle(rear_axle_speed(omega_rl, omega_rr, p), delta, p)


def cg_speed_from_front_wheels(
    omega_fl: float, omega_fr: float, delta_left: float, delta_right: float, p: VehicleParams
) -> float:
    """CG speed [m/s] from front wheel speeds [rad/s] and road-wheel angles [rad].

    ICR geometry (no slip): the instantaneous centre lies on the rear-axle line at
    R = L / tan(delta) left of the rear-axle centre. A front wheel at lateral offset
    +-w/2 is (R -+ w/2) / cos(delta_i) from the ICR, so its rolling speed is
    v_i = v_r (1 -+ w tan(delta) / (2L)) / cos(delta_i) (upper sign: left wheel).
    Each wheel gives a rear-axle speed; their mean is converted to the CG with
    :func:`cg_speed_from_rear_axle`. ``delta`` is :func:`ackermann_to_bicycle` of the pair.
    """
    delta = ackermann_to_bicycle(delta_left, delta_right, p)
    k = 0.5 * p.track_width * math.tan(delta) / p.wheelbase
    r_e = p.effective_wheel_radius
    v_r_left = r_e * omega_fl * math.cos(delta_left) / (1.0 - k)
    v_r_right = r_e * omega_fr * math.cos(delta_right) / (1.0 + k)
    return cg_speed_from_rear_axle(0.5 * (v_r_left + v_r_right), delta, p)


def rear_axle_position(x: float, y: float, yaw: float, p: VehicleParams) -> tuple[float, float]:
    """Rear-axle centre [m] from CG position [m] and yaw [rad]: CG - l_r (cos, sin)(yaw)."""
    lr = p.cg_to_rear_axle
    return x - lr * math.cos(yaw), y - lr * math.sin(yaw)


def cg_position(x_rear: float, y_rear: float, yaw: float, p: VehicleParams) -> tuple[float, float]:
    """CG position [m] from rear-axle centre position [m] and yaw [rad]."""
    lr = p.cg_to_rear_axle
    return x_rear + lr * math.cos(yaw), y_rear + lr * math.sin(yaw)
