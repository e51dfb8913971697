"""Simulated sensors and fault injection, checked on a hand-built constant-radius circle."""

from __future__ import annotations

import math

import numpy as np
import pytest
import transforms3d

from fixtures.traces import circle_trace
from kinematic_monitor.sim import faults as flt
from kinematic_monitor.sim.sensors import (
    DEFAULT_EPOCH_NS,
    STANDARD_GRAVITY,
    STEER_JOINTS,
    WHEEL_JOINTS,
    ImuRecord,
    JointStateRecord,
    NavSatFixRecord,
    OdometryRecord,
    SensorConfig,
    add_noise,
    count_records,
    iter_records,
    local_to_geodetic,
    sample_truth,
)
from kinematic_monitor.sim.trace import TrueTrace


def quiet_config(**gnss: float) -> SensorConfig:
    """No noise, no jitter: values must equal the truth."""
    cfg = SensorConfig()
    cfg.joint_states.steer_std = cfg.joint_states.wheel_speed_std = 0.0
    cfg.joint_states.jitter = 0.0
    o = cfg.odometry
    o.position_std = o.yaw_std = o.velocity_std = o.yaw_rate_std = o.jitter = 0.0
    o.position_std = 0.0
    i = cfg.imu
    i.gyro_std = i.accel_std = i.orientation_std = i.jitter = 0.0
    g = cfg.gnss
    g.horizontal_std = g.vertical_std = g.jitter = 0.0
    for k, val in gnss.items():
        setattr(g, k, val)
    return cfg


def records(trace: TrueTrace, cfg: SensorConfig, faults: list[flt.Fault] = (), seed: int = 0):  # type: ignore[no-untyped-def,assignment]
    series = sample_truth(trace, cfg)
    truth = flt.apply_faults(series, list(faults))
    add_noise(series, cfg, seed)
    return series, truth, list(iter_records(series, cfg))


# ------------------------------------------------------------------ timing and counts


def test_counts_and_stamps_follow_rates() -> None:
    trace = circle_trace(duration=4.0)
    cfg = SensorConfig()
    _, _, recs = records(trace, cfg)
    by_key: dict[str, list[int]] = {}
    for r in recs:
        by_key.setdefault(r.key, []).append(r.stamp_ns)
    # samples at k/rate for 0 <= k/rate <= 4 s: rate*4 + 1 messages
    expected = {"joint_states": 401, "odometry": 201, "imu": 801, "gnss": 41}
    assert {k: len(v) for k, v in by_key.items()} == expected
    for key, rate in (("joint_states", 100), ("odometry", 50), ("imu", 200), ("gnss", 10)):
        stamps = np.array(by_key[key], dtype=np.int64)
        k = np.arange(stamps.shape[0], dtype=np.int64)
        # header stamp = epoch + simulated time, exactly in integer nanoseconds
        assert np.array_equal(stamps, DEFAULT_EPOCH_NS + k * (1_000_000_000 // rate))


def test_arrival_after_stamp_plus_latency_and_stream_ordered() -> None:
    trace = circle_trace(duration=3.0)
    cfg = SensorConfig()
    _, _, recs = records(trace, cfg, seed=3)
    arrivals = [r.arrival_ns for r in recs]
    assert arrivals == sorted(arrivals)
    keys = ("joint_states", "odometry", "imu", "gnss")
    latency = {k: int(getattr(cfg, k).latency * 1e9) for k in keys}
    assert all(r.arrival_ns >= r.stamp_ns + latency[r.key] for r in recs)
    # jitter makes some arrivals later than the fixed latency
    assert any(r.arrival_ns > r.stamp_ns + latency[r.key] for r in recs)


def test_dropout_rate_within_binomial_bounds() -> None:
    trace = circle_trace(duration=10.0)
    cfg = SensorConfig()
    cfg.imu.dropout = 0.2
    series = sample_truth(trace, cfg)
    add_noise(series, cfg, seed=11)
    n = len(series["imu"])
    kept = count_records(series)["imu"]
    # Binomial(n, 0.8): mean 0.8 n, sd sqrt(n 0.8 0.2); 5 sd bound (common practice, no source)
    sd = math.sqrt(n * 0.8 * 0.2)
    assert abs(kept - 0.8 * n) < 5 * sd
    assert count_records(series)["joint_states"] == len(series["joint_states"])


def test_same_seed_same_values_other_seed_differs() -> None:
    trace = circle_trace(duration=2.0)
    a = records(trace, SensorConfig(), seed=5)[2]
    b = records(trace, SensorConfig(), seed=5)[2]
    c = records(trace, SensorConfig(), seed=6)[2]
    assert a == b
    assert a != c


def test_gnss_off_does_not_change_other_topics_noise() -> None:
    trace = circle_trace(duration=2.0)
    on = [r for r in records(trace, SensorConfig(), seed=1)[2] if r.key != "gnss"]
    cfg = SensorConfig()
    cfg.gnss.rate_hz = 0.0
    off = records(trace, cfg, seed=1)[2]
    assert not any(isinstance(r, NavSatFixRecord) for r in off)
    assert on == off


# ------------------------------------------------------------------ message content


def test_joint_names_and_ackermann_consistency() -> None:
    delta = 0.1
    trace = circle_trace(v=8.0, delta=delta)
    _, _, recs = records(trace, quiet_config())
    js = [r for r in recs if isinstance(r, JointStateRecord)]
    assert js[0].name == STEER_JOINTS + WHEEL_JOINTS
    for r in js[::50]:
        d_l, d_r = r.position[0], r.position[1]
        # REP 103 left turn: the inner (left) road wheel steers more than the outer one
        assert d_l > delta > d_r > 0
        # Ackermann geometry (docs/interface.md section 1): cot d = (cot d_l + cot d_r)/2
        cot = 0.5 * (1.0 / math.tan(d_l) + 1.0 / math.tan(d_r))
        assert math.atan(1.0 / cot) == pytest.approx(delta, abs=1e-12)


def test_wheel_speeds_on_a_straight_are_v_over_radius() -> None:
    v = 15.0
    trace = circle_trace(v=v, delta=0.0)
    _, _, recs = records(trace, quiet_config())
    js = [r for r in recs if isinstance(r, JointStateRecord)]
    # rolling without slip: omega = v / R_e (R_e = 0.31 m) on every wheel
    for r in js[::37]:
        assert r.velocity[2:] == pytest.approx((v / 0.31,) * 4, rel=1e-12)
        assert r.position[0] == r.position[1] == 0.0


def test_rear_wheel_speeds_in_a_turn_follow_rigid_body_kinematics() -> None:
    trace = circle_trace(v=10.0, delta=0.1)
    _, _, recs = records(trace, quiet_config())
    r = next(r for r in recs if isinstance(r, JointStateRecord))
    vx, wz = float(trace.vx[0]), float(trace.yaw_rate[0])
    # v_wheel = v_cg + omega x r: rear wheels at y = +-w/2 move at vx -+ wz w/2
    assert r.velocity[4] == pytest.approx((vx - wz * 0.775) / 0.31, rel=1e-9)
    assert r.velocity[5] == pytest.approx((vx + wz * 0.775) / 0.31, rel=1e-9)


def test_odometry_pose_quaternion_twist_and_covariance() -> None:
    trace = circle_trace(v=10.0, delta=0.1, duration=6.0)
    _, _, recs = records(trace, quiet_config())
    odo = [r for r in recs if isinstance(r, OdometryRecord)]
    assert odo[0].frame_id == "map" and odo[0].child_frame_id == "base_link"
    for r in odo[::40]:
        t = (r.stamp_ns - DEFAULT_EPOCH_NS) * 1e-9
        i = trace.at(t)
        assert r.position[0] == pytest.approx(float(trace.x[i]), abs=1e-9)
        assert r.position[1] == pytest.approx(float(trace.y[i]), abs=1e-9)
        qx, qy, qz, qw = r.orientation
        # transforms3d uses (w, x, y, z); static 'sxyz' Euler angles -> yaw is the third
        _, _, yaw = transforms3d.euler.quat2euler((qw, qx, qy, qz), "sxyz")
        expected = math.remainder(float(trace.yaw[i]), 2 * math.pi)
        assert math.remainder(yaw - expected, 2 * math.pi) == pytest.approx(0.0, abs=1e-9)
        assert r.linear[:2] == pytest.approx((float(trace.vx[i]), float(trace.vy[i])))
        assert r.angular[2] == pytest.approx(float(trace.yaw_rate[i]))
        cov = np.array(r.pose_covariance).reshape(6, 6)
        assert np.allclose(cov, cov.T) and np.all(np.diag(cov) >= 0)


def test_imu_includes_gravity_and_body_accelerations() -> None:
    trace = circle_trace(v=10.0, delta=0.1)
    _, _, recs = records(trace, quiet_config())
    imu = [r for r in recs if isinstance(r, ImuRecord)]
    assert imu[0].frame_id == "base_link"
    # yaw_rate = v cos(beta) tan(delta)/L, beta = atan(l_r tan(delta)/L) (Rajamani 2012,
    # kinematic bicycle model; l_f = l_r = 1.35 m here)
    beta = math.atan(1.35 * math.tan(0.1) / 2.7)
    wz = 10.0 * math.cos(beta) * math.tan(0.1) / 2.7
    for r in imu[::100]:
        assert r.angular_velocity[2] == pytest.approx(wz, rel=1e-12)
        # an accelerometer at rest on level ground reads +g upwards (REP 145 convention)
        assert r.linear_acceleration[2] == STANDARD_GRAVITY
        # centripetal acceleration magnitude v * yaw_rate for a steady turn
        assert math.hypot(*r.linear_acceleration[:2]) == pytest.approx(10.0 * wz, rel=1e-12)
        q = r.orientation
        assert transforms3d.quaternions.qnorm((q[3], q[0], q[1], q[2])) == pytest.approx(1.0)


def test_navsatfix_small_offset_matches_series_for_degree_lengths() -> None:
    lat0 = 46.2180
    lat, lon = local_to_geodetic(np.array([1000.0]), np.array([1000.0]), lat0, 7.4425)
    phi = math.radians(lat0)
    # length of one degree on WGS84 (series; from memory, as tabulated for "length of a
    # degree" of latitude/longitude): 111132.954 - 559.822 cos 2phi + 1.175 cos 4phi and
    # 111412.84 cos phi - 93.5 cos 3phi + 0.118 cos 5phi metres
    m_per_deg_lat = 111132.954 - 559.822 * math.cos(2 * phi) + 1.175 * math.cos(4 * phi)
    m_per_deg_lon = (
        111412.84 * math.cos(phi) - 93.5 * math.cos(3 * phi) + 0.118 * math.cos(5 * phi)
    )
    # 1 km offsets: agree to 2 mm (equirectangular approximation at the origin)
    assert (lat[0] - lat0) * m_per_deg_lat == pytest.approx(1000.0, abs=2e-3)
    assert (lon[0] - 7.4425) * m_per_deg_lon == pytest.approx(1000.0, abs=2e-3)
    # and the coarse rule: 1 degree of latitude is about 111 km (common practice, no source)
    assert 1000.0 / (lat[0] - lat0) == pytest.approx(111_000, rel=0.01)


def test_navsatfix_records_use_origin_and_diagonal_covariance() -> None:
    trace = circle_trace(v=10.0, delta=0.0, duration=2.0)
    cfg = quiet_config()
    _, _, recs = records(trace, cfg)
    fixes = [r for r in recs if isinstance(r, NavSatFixRecord)]
    assert fixes[0].latitude == pytest.approx(cfg.gnss.origin_lat, abs=1e-12)
    assert fixes[0].longitude == pytest.approx(cfg.gnss.origin_lon, abs=1e-12)
    assert fixes[0].altitude == cfg.gnss.origin_alt
    # driving east (yaw 0, x forward = east in ENU map): latitude constant, longitude grows
    assert fixes[-1].latitude == pytest.approx(cfg.gnss.origin_lat, abs=1e-12)
    assert fixes[-1].longitude > fixes[0].longitude
    assert fixes[0].covariance_type == 2  # NavSatFix.COVARIANCE_TYPE_DIAGONAL_KNOWN


def test_noise_has_configured_spread() -> None:
    trace = circle_trace(v=10.0, delta=0.0, duration=20.0)
    cfg = SensorConfig()
    series = sample_truth(trace, cfg)
    clean = series["imu"].values["yaw_rate"].copy()
    add_noise(series, cfg, seed=2)
    err = series["imu"].values["yaw_rate"] - clean
    # sample sd of 4001 normal draws is within 10 % of sigma (chi distribution; common
    # practice, no source)
    assert np.std(err) == pytest.approx(cfg.imu.gyro_std, rel=0.1)


def test_config_validation_names_the_bad_setting() -> None:
    cfg = SensorConfig()
    cfg.odometry.position_std = -1.0
    with pytest.raises(ValueError, match=r"odometry\.position_std"):
        sample_truth(circle_trace(duration=1.0), cfg)
    cfg = SensorConfig()
    cfg.imu.rate_hz = float("nan")
    with pytest.raises(ValueError, match=r"imu\.rate_hz"):
        cfg.validate()
    cfg = SensorConfig()
    cfg.joint_states.dropout = 1.0
    with pytest.raises(ValueError, match=r"joint_states\.dropout"):
        cfg.validate()


# ------------------------------------------------------------------ faults


def _odo(recs: list) -> tuple[np.ndarray, np.ndarray]:  # type: ignore[type-arg]
    odo = [r for r in recs if isinstance(r, OdometryRecord)]
    t = np.array([(r.stamp_ns - DEFAULT_EPOCH_NS) * 1e-9 for r in odo])
    return t, np.array([[*r.position[:2], r.orientation[2], r.orientation[3]] for r in odo])


def test_localization_jump_appears_at_stated_time() -> None:
    trace = circle_trace(v=10.0, delta=0.05, duration=6.0)
    cfg = quiet_config()
    _, _, clean = records(trace, cfg)
    jump = flt.LocalizationJump(start=2.0, dx=1.5, dy=-0.5, duration=2.0)
    _, truth, faulty = records(trace, cfg, [jump])
    t, a = _odo(clean)
    _, b = _odo(faulty)
    d = b[:, :2] - a[:, :2]
    inside = (t >= 2.0) & (t < 4.0)
    assert np.allclose(d[inside], (1.5, -0.5))
    assert np.allclose(d[~inside], 0.0)
    assert truth == [flt.TruthInterval("localization_fault", 2.0, 4.0, truth[0].detail)]


def test_heading_drift_ramps_yaw_and_rotates_position_about_onset() -> None:
    trace = circle_trace(v=10.0, delta=0.0, duration=6.0)
    _, truth, recs = records(trace, quiet_config(), [flt.HeadingDrift(start=1.0, rate=0.02)])
    t, p = _odo(recs)
    yaw = 2 * np.arctan2(p[:, 2], p[:, 3])
    assert np.allclose(yaw, np.where(t >= 1.0, 0.02 * (t - 1.0), 0.0), atol=1e-12)
    # on a straight east at 10 m/s from x=10 at onset: y = (x_true - 10) sin(angle)
    late = t >= 1.0
    ang = 0.02 * (t[late] - 1.0)
    assert np.allclose(p[late, 1], 10.0 * (t[late] - 1.0) * np.sin(ang), atol=1e-9)
    assert truth[0].kind == "localization_fault" and truth[0].end == pytest.approx(6.0)


def test_relocalization_declares_itself_in_covariance() -> None:
    trace = circle_trace(v=10.0, delta=0.0, duration=6.0)
    cfg = quiet_config()
    reloc = flt.Relocalization(start=3.0, dx=2.0, dy=0.0, sigma=1.5, window=1.0)
    _, truth, recs = records(trace, cfg, [reloc])
    odo = [r for r in recs if isinstance(r, OdometryRecord)]
    t = np.array([(r.stamp_ns - DEFAULT_EPOCH_NS) * 1e-9 for r in odo])
    var_x = np.array([r.pose_covariance[0] for r in odo])
    before = (t >= 2.0) & (t < 3.0)
    assert np.allclose(var_x[before], 1.5**2)
    assert np.allclose(var_x[t >= 3.0], cfg.odometry.position_std**2)
    x = np.array([r.position[0] for r in odo])
    assert np.allclose(x - 10.0 * t, np.where(t >= 3.0, 2.0, 0.0), atol=1e-9)
    assert [iv.kind for iv in truth] == ["relocalization"]
    assert truth[0].start == 2.0 and truth[0].end == 4.0
    assert "relocalization" in str(truth[0].detail)


def test_steering_offset_and_wheel_radius_error() -> None:
    trace = circle_trace(v=10.0, delta=0.0, duration=3.0)
    faults = [flt.SteeringOffset(offset=0.01), flt.WheelRadiusError(error=-0.02, start=1.0)]
    _, truth, recs = records(trace, quiet_config(), faults)
    for r in recs:
        if isinstance(r, JointStateRecord):
            t = (r.stamp_ns - DEFAULT_EPOCH_NS) * 1e-9
            assert r.position[:2] == pytest.approx((0.01, 0.01))
            scale = 0.98 if t >= 1.0 else 1.0
            assert r.velocity[2:] == pytest.approx((scale * 10.0 / 0.31,) * 4, rel=1e-12)
    assert [(iv.kind, iv.start, iv.end) for iv in truth] == [
        ("calibration_bias", 0.0, 3.0),
        ("calibration_bias", 1.0, 3.0),
    ]


def test_topic_silent_removes_messages_and_reports_stale() -> None:
    trace = circle_trace(duration=4.0)
    _, truth, recs = records(trace, SensorConfig(), [flt.TopicSilent("imu", 1.0, 0.5)])
    t = np.array([(r.stamp_ns - DEFAULT_EPOCH_NS) * 1e-9 for r in recs if r.key == "imu"])
    assert not np.any((t >= 1.0) & (t < 1.5))
    assert t.shape[0] == 801 - 100
    assert [(iv.kind, iv.start, iv.end) for iv in truth] == [("input_stale", 1.0, 1.5)]


def test_parse_fault_round_trip_and_errors() -> None:
    f = flt.parse_fault("loc-jump:start=5,dx=1,dy=2,duration=3")
    assert f == flt.LocalizationJump(start=5.0, dx=1.0, dy=2.0, duration=3.0)
    assert flt.parse_fault(f.spec()) == f
    assert flt.parse_fault("silent:topic=gnss,start=1") == flt.TopicSilent("gnss", 1.0, 2.0)
    for name in flt.FAULT_TYPES:
        g = flt.parse_fault(name)
        assert flt.parse_fault(g.spec()) == g
    with pytest.raises(ValueError, match="unknown fault 'bogus'"):
        flt.parse_fault("bogus:start=1")
    with pytest.raises(ValueError, match="bad setting 'speed=3'"):
        flt.parse_fault("loc-jump:speed=3")
    with pytest.raises(ValueError, match="'abc' .* not a number"):
        flt.parse_fault("loc-jump:dx=abc")
    with pytest.raises(ValueError, match="topic='radar'"):
        flt.parse_fault("silent:topic=radar")
    with pytest.raises(ValueError, match="must be finite"):
        flt.parse_fault("steer-offset:offset=nan")
    with pytest.raises(ValueError, match="start=-1"):
        flt.parse_fault("loc-jump:start=-1")
