"""Tests of the kinematic bicycle model against published formulas and reference code."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from kinematic_monitor.core import model as m
from kinematic_monitor.core.model import VehicleParams

# invented test vehicle (our own numbers)
P = VehicleParams(wheelbase=2.7, cg_to_rear_axle=1.35, wheel_radius=0.31, track_width=1.55)


# --- CG equations -------------------------------------------------------------------------

# Check values [C] from /work/shared/CHECK_SOURCES.md, computed from Rajamani,
# "Vehicle Dynamics and Control", 2nd ed. 2012, kinematic model of lateral vehicle motion:
# beta = atan(l_r tan(delta)/L), psi_dot = v cos(beta) tan(delta)/L, a_y = v psi_dot,
# R_cg = 1 / (cos(beta) tan(delta)/L).
RAJAMANI_TABLE = [
    # v, delta, l_f, l_r, beta, psi_dot, a_y, R_cg
    (10.0, 0.0872665, 1.2, 1.6, 0.049952, 0.312070, 3.12070, 32.0441),
    (10.0, 0.1, 1.2, 1.6, 0.057271, 0.357751, 3.57751, 27.9524),
    (20.0, 0.0349066, 1.2, 1.6, 0.019952, 0.249384, 4.98769, 80.1975),
    (5.0, 0.5235988, 1.2, 1.6, 0.318670, 0.979076, 4.89538, 5.1069),
    (10.0, 0.2, 1.0, 1.0, 0.101010, 1.008384, 10.0838, 9.9169),
]


@pytest.mark.parametrize("v,delta,lf,lr,beta,rate,ay,radius", RAJAMANI_TABLE)
def test_cg_equations_match_rajamani_check_values(v, delta, lf, lr, beta, rate, ay, radius):
    p = VehicleParams(wheelbase=lf + lr, cg_to_rear_axle=lr, wheel_radius=0.3, track_width=1.5)
    # tolerances: the table is rounded to 6 significant digits (Rajamani 2012, values [C])
    assert m.sideslip(delta, p) == pytest.approx(beta, abs=1e-6)
    assert m.yaw_rate(v, delta, p) == pytest.approx(rate, abs=1e-6)
    assert m.lateral_acceleration(v, delta, p) == pytest.approx(ay, rel=1e-5)
    assert radius == pytest.approx(1.0 / m.curvature(delta, p), rel=1e-5)
    # identity psi_dot = v sin(beta) / l_r (Rajamani 2012, kinematic model)
    beta_model = m.sideslip(delta, p)
    assert m.yaw_rate(v, delta, p) == pytest.approx(v * math.sin(beta_model) / lr, rel=1e-12)


def test_left_turn_signs_follow_rep103():
    # REP 103: counter-clockwise positive, a left turn has positive delta, beta, psi_dot
    assert m.sideslip(0.1, P) > 0 and m.yaw_rate(5.0, 0.1, P) > 0
    assert m.sideslip(-0.1, P) < 0 and m.yaw_rate(5.0, -0.1, P) < 0
    # reversing with left steer turns clockwise (same geometry, negative speed)
    assert m.yaw_rate(-5.0, 0.1, P) < 0


# --- exact step vs the CG ODE and commonroad's rear-axle kinematic model -------------------


def _cg_ode(v: float, delta: float):
    # Rajamani 2012 kinematic model: x' = v cos(psi+beta), y' = v sin(psi+beta),
    # psi' = v cos(beta) tan(delta) / L
    beta = math.atan(P.cg_to_rear_axle * math.tan(delta) / P.wheelbase)

    def f(_t, s):
        return [
            v * math.cos(s[2] + beta),
            v * math.sin(s[2] + beta),
            v * math.cos(beta) * math.tan(delta) / P.wheelbase,
        ]

    return f


@pytest.mark.parametrize(
    "v,delta,dt",
    [
        (10.0, 0.1, 2.0),
        (10.0, 0.0, 1.0),
        (15.0, 1e-4, 1.0),  # half yaw change ~2.8e-4: series branch
        (15.0, 2.7e-3, 1.0),  # half yaw change ~1.0e-2: around the series switch
        (15.0, 3.0e-3, 1.0),
        (-3.0, -0.4, 1.5),  # reversing
        (0.0, 0.3, 1.0),  # standstill
        (8.0, 0.6, 3.0),  # more than a quarter turn
    ],
)
def test_step_equals_integrated_cg_ode(v, delta, dt):
    start = (3.0, -2.0, 2.9)
    sol = solve_ivp(_cg_ode(v, delta), (0.0, dt), start, rtol=1e-11, atol=1e-12)
    xe, ye, yawe = sol.y[:, -1]
    x, y, yaw = m.step(*start, v, delta, dt, P)
    # reference: scipy.integrate.solve_ivp of the Rajamani 2012 CG equations
    assert x == pytest.approx(xe, abs=1e-8)
    assert y == pytest.approx(ye, abs=1e-8)
    assert math.remainder(yaw - yawe, 2 * math.pi) == pytest.approx(0.0, abs=1e-9)
    assert -math.pi <= yaw < math.pi


def _ks_params() -> SimpleNamespace:
    # our own parameter object for vehiclemodels.vehicle_dynamics_ks (a, b: CG to front and
    # rear axle); limits wide so the input constraints never act
    return SimpleNamespace(
        a=P.cg_to_front_axle,
        b=P.cg_to_rear_axle,
        steering=SimpleNamespace(min=-1.0, max=1.0, v_min=-1.0, v_max=1.0),
        longitudinal=SimpleNamespace(v_min=-20.0, v_max=60.0, v_switch=100.0, a_max=10.0),
    )


def test_step_matches_commonroad_ks_over_20s_manoeuvre():
    from vehiclemodels.vehicle_dynamics_ks import vehicle_dynamics_ks

    ks_p = _ks_params()
    rng = np.random.default_rng(7)
    seg = 0.5  # s, piecewise-constant inputs
    n_seg = 40  # 20 s
    deltas = rng.uniform(-0.5, 0.5, n_seg)
    speeds = rng.uniform(2.0, 15.0, n_seg)
    speeds[10] = 0.0  # a stop
    speeds[25:28] = -2.5  # a short reverse
    deltas[30] = 0.0  # straight

    x, y, yaw = 1.0, 2.0, 0.3  # CG pose, ours
    sx, sy = m.rear_axle_position(x, y, yaw, P)
    psi = yaw
    max_err = 0.0
    for delta, v in zip(deltas, speeds, strict=True):
        # commonroad ks is rear-axle referenced: state [sx, sy, delta, v_rear, psi],
        # inputs [steering rate, acceleration] = 0 keep delta and v_rear constant
        v_rear = m.rear_axle_speed_from_cg(v, delta, P)
        sol = solve_ivp(
            lambda _t, s: vehicle_dynamics_ks(s, [0.0, 0.0], ks_p),
            (0.0, seg),
            [sx, sy, delta, v_rear, psi],
            rtol=1e-10,
            atol=1e-12,
        )
        sx, sy, _, _, psi = sol.y[:, -1]
        x, y, yaw = m.step(x, y, yaw, v, delta, seg, P)
        cx, cy = m.cg_position(sx, sy, psi, P)
        max_err = max(max_err, math.hypot(cx - x, cy - y))
        assert math.remainder(yaw - psi, 2 * math.pi) == pytest.approx(0.0, abs=1e-8)
    # commonroad-vehicle-models vehicle_dynamics_ks (Althoff & Wuersching, CommonRoad:
    # Vehicle Models) integrated with solve_ivp: CG positions agree to < 1 mm
    assert max_err < 1e-3


def test_reference_point_helpers_round_trip():
    # rear axle = CG - l_r (cos, sin)(yaw) (rigid body, Rajamani 2012 geometry)
    xr, yr = m.rear_axle_position(1.0, 2.0, 0.5, P)
    assert math.hypot(xr - 1.0, yr - 2.0) == pytest.approx(P.cg_to_rear_axle)
    assert m.cg_position(xr, yr, 0.5, P) == pytest.approx((1.0, 2.0))
    assert m.cg_speed_from_rear_axle(m.rear_axle_speed_from_cg(7.0, 0.3, P), 0.3, P) == (
        pytest.approx(7.0)
    )


# --- Jacobians -----------------------------------------------------------------------------


@pytest.mark.parametrize(
    "state",
    [
        (1.0, 2.0, 0.4, 10.0, 0.1, 0.02),
        (1.0, 2.0, -3.1, 10.0, 0.0, 0.02),
        (0.0, 0.0, 1.0, 20.0, 1e-5, 0.01),
        (0.0, 0.0, 1.0, 12.0, 0.3, 1.5),  # large yaw change: direct sinc branch
        (0.0, 0.0, 2.0, -2.0, -0.5, 0.1),
        (0.0, 0.0, 2.0, 0.0, 0.2, 0.1),
    ],
)
def test_step_jacobian_matches_central_differences(state):
    x, y, yaw, v, delta, dt = state
    J = m.step_jacobian(x, y, yaw, v, delta, dt, P)
    assert J.shape == (3, 5)
    h = 1e-6
    args = [x, y, yaw, v, delta]
    for k in range(5):
        hi, lo = list(args), list(args)
        hi[k] += h
        lo[k] -= h
        fh = np.array(m.step(*hi, dt, P))
        fl = np.array(m.step(*lo, dt, P))
        diff = fh - fl
        diff[2] = math.remainder(diff[2], 2 * math.pi)
        # central finite differences, error O(h^2) (common practice, no source)
        np.testing.assert_allclose(J[:, k], diff / (2 * h), rtol=1e-6, atol=1e-7)


def test_sinc_series_and_direct_forms_agree_at_the_switch():
    below = m._sinc_and_derivative(m._SERIES_LIMIT * (1 - 1e-12))
    above = m._sinc_and_derivative(m._SERIES_LIMIT * (1 + 1e-12))
    # sin(u)/u and (u cos u - sin u)/u^2 are continuous (Taylor series of sin, cos)
    assert below[0] == pytest.approx(above[0], abs=1e-14)
    assert below[1] == pytest.approx(above[1], rel=1e-9)


# --- Ackermann -----------------------------------------------------------------------------


def test_bicycle_to_ackermann_hand_worked_icr():
    # ICR geometry of Ackermann steering (Gillespie 1992, low-speed turning, chapter from
    # memory; hand-worked, values [C]):
    # rear-axle radius R = L / tan(0.1) = 26.90994 m; inner tan(dl) = L / (R - w/2),
    # outer tan(dr) = L / (R + w/2) -> dl = 0.1029448, dr = 0.0972185 rad
    left, right = m.bicycle_to_ackermann(0.1, P)
    assert left == pytest.approx(0.1029448, abs=1e-7)
    assert right == pytest.approx(0.0972185, abs=1e-7)
    assert m.ackermann_to_bicycle(left, right, P) == pytest.approx(0.1, abs=1e-12)
    # mirror: right turn, right wheel inner
    left, right = m.bicycle_to_ackermann(-0.1, P)
    assert right == pytest.approx(-0.1029448, abs=1e-7)
    assert left == pytest.approx(-0.0972185, abs=1e-7)


@given(st.floats(min_value=-0.7, max_value=0.7))
def test_ackermann_round_trip(delta):
    # cot(delta) = (cot dl + cot dr)/2 inverts cot dl,r = cot delta -+ w/(2L)
    # (Ackermann relation as in docs/interface.md section 1)
    left, right = m.bicycle_to_ackermann(delta, P)
    assert m.ackermann_to_bicycle(left, right, P) == pytest.approx(delta, abs=1e-12)
    if delta > 1e-9:
        assert left > delta > right > 0.0  # inner (left) wheel steers more


def test_ackermann_straight_and_inconsistent_pairs():
    assert m.ackermann_to_bicycle(0.0, 0.0, P) == 0.0
    # opposite signs (toe noise): 0, the limit as either wheel goes straight
    assert m.ackermann_to_bicycle(0.002, -0.001, P) == 0.0
    assert m.ackermann_to_bicycle(1e-12, 0.2, P) == pytest.approx(0.0, abs=1e-11)
    with pytest.raises(ValueError, match="delta_left"):
        m.ackermann_to_bicycle(float("nan"), 0.1, P)
    with pytest.raises(ValueError, match="delta_right"):
        m.ackermann_to_bicycle(0.1, 1.6, P)
    with pytest.raises(ValueError, match="inner wheel"):
        m.bicycle_to_ackermann(1.4, P)


# --- wheel speeds --------------------------------------------------------------------------


def test_rear_wheel_conversions_hand_worked():
    p = VehicleParams(2.7, 1.35, 0.31, 1.55, wheel_speed_scale=1.02)
    # hand-worked [C]: R_e = 0.31 * 1.02 = 0.3162 m; v_r = R_e (30 + 32)/2 = 9.8022 m/s;
    # yaw rate = R_e (32 - 30) / 1.55 = 0.408 rad/s; beta(0.1) = atan(0.5 tan 0.1)
    # = 0.0501253 rad; v_cg = v_r / cos(beta) = 9.814527 m/s (Rajamani 2012 geometry)
    assert m.rear_axle_speed(30.0, 32.0, p) == pytest.approx(9.8022, abs=1e-12)
    assert m.rear_wheel_yaw_rate(30.0, 32.0, p) == pytest.approx(0.408, abs=1e-12)
    assert m.cg_speed_from_rear_wheels(30.0, 32.0, 0.1, p) == pytest.approx(9.814527, abs=1e-6)


@pytest.mark.parametrize("delta,v_rear", [(0.25, 8.0), (-0.4, 3.0), (0.0, 12.0), (0.1, -2.0)])
def test_front_wheel_speed_matches_rigid_body_velocity(delta, v_rear):
    # rigid-body kinematics (independent of the ICR formula used in the code):
    # v_point = v_r e_x + omega x r, omega = v_r tan(delta)/L, front wheels at (L, +-w/2)
    p = P
    omega = v_rear * math.tan(delta) / p.wheelbase
    left, right = m.bicycle_to_ackermann(delta, p)
    speeds = []
    for lat, angle in ((0.5 * p.track_width, left), (-0.5 * p.track_width, right)):
        vx, vy = v_rear - omega * lat, omega * p.wheelbase
        speeds.append(math.copysign(math.hypot(vx, vy), v_rear))
        # no lateral slip: the wheel velocity points along the wheel (Ackermann condition)
        if abs(v_rear) > 0:
            assert math.atan(vy / vx) == pytest.approx(angle, abs=1e-12)
    r_e = p.effective_wheel_radius
    v_cg = m.cg_speed_from_front_wheels(speeds[0] / r_e, speeds[1] / r_e, left, right, p)
    assert v_cg == pytest.approx(m.cg_speed_from_rear_axle(v_rear, delta, p), rel=1e-12)


def test_reverse_and_standstill_give_no_nan():
    for v in (0.0, -0.0, -4.0, 1e-300):
        for delta in (0.0, -0.0, 0.5, -0.7, 1e-12):
            assert all(math.isfinite(c) for c in m.step(0.0, 0.0, 3.14, v, delta, 0.01, P))
            assert np.all(np.isfinite(m.step_jacobian(0.0, 0.0, 3.14, v, delta, 0.01, P)))
            assert math.isfinite(m.yaw_rate(v, delta, P))
            assert math.isfinite(m.lateral_acceleration(v, delta, P))
            assert math.isfinite(m.cg_speed_from_rear_wheels(v, v, delta, P))
    assert m.step(1.0, 2.0, 0.5, 0.0, 0.3, 1.0, P) == (1.0, 2.0, 0.5)
    assert m.cg_speed_from_front_wheels(0.0, 0.0, 0.0, 0.0, P) == 0.0


# --- parameter validation ------------------------------------------------------------------


@pytest.mark.parametrize(
    "field,kwargs",
    [
        ("wheelbase", dict(wheelbase=0.0)),
        ("wheelbase", dict(wheelbase=float("nan"))),
        ("cg_to_rear_axle", dict(cg_to_rear_axle=2.7)),
        ("cg_to_rear_axle", dict(cg_to_rear_axle=0.0)),
        ("wheel_radius", dict(wheel_radius=-0.3)),
        ("track_width", dict(track_width=0.0)),
        ("track_width", dict(track_width="1.5")),
        ("wheel_speed_scale", dict(wheel_speed_scale=0.0)),
        ("wheel_speed_scale", dict(wheel_speed_scale=float("inf"))),
        ("max_road_wheel_angle", dict(max_road_wheel_angle=1.6)),
        ("max_road_wheel_angle", dict(max_road_wheel_angle=1.5, track_width=20.0)),
        ("steering_offset", dict(steering_offset=0.8)),
        ("steering_offset", dict(steering_offset=True)),
    ],
)
def test_invalid_params_name_the_field(field, kwargs):
    base = dict(wheelbase=2.7, cg_to_rear_axle=1.35, wheel_radius=0.31, track_width=1.55)
    base.update(kwargs)
    with pytest.raises(ValueError, match=field) as err:
        VehicleParams(**base)
    assert "allowed" in str(err.value)


def test_params_properties():
    p = VehicleParams(2.8, 1.6, 0.3, 1.5, steering_offset=0.01, wheel_speed_scale=0.98)
    assert p.cg_to_front_axle == pytest.approx(1.2)
    assert p.effective_wheel_radius == pytest.approx(0.294)
    assert m.corrected_steer(0.1, p) == pytest.approx(0.11)
