"""Gyro bias and drift: IMU yaw rate against the localisation's, and against 0 at standstill.

Drives from test/fixtures/calibration.py (an IMU reading the true yaw rate + bias + drift
(t - middle) + white noise) and the simulator's own ``ImuConfig.gyro_bias``. Figures:
REALISM.md, inertial sensors (zero-rate offset up to +-0.5-1 deg/s uncalibrated [M], from
memory there) and measured on a production car [Meas].
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fixtures.calibration import Imperfections, ImuSpec, config, make_drive, simulated_drive
from kinematic_monitor.core import calibration as cal
from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample


def test_bias_within_its_standard_error_and_no_drift_found() -> None:
    bias = math.radians(0.3)  # a start-up-calibrated MEMS gyro (REALISM.md [M], from memory)
    res = cal.calibrate(make_drive(1, 200.0, imu=ImuSpec(bias=bias)), config(), seed=1)
    e = res.estimates[cal.GYRO_BIAS]
    assert e.observable and not e.is_parameter and e.unit == "rad/s"
    assert abs(e.value - bias) < 4 * e.uncertainty
    assert e.uncertainty < 1e-4  # the resolution: a tenth of the heading check's 0.001 rad/s
    assert any(n.startswith("no gyro bias drift found") for n in res.notes)
    assert res.imu_seconds > 190.0
    imu = res.residuals[-1]
    assert imu.name == "yaw rate (IMU - localisation)"
    assert imu.mean_before == pytest.approx(bias, abs=4 * e.uncertainty)
    assert abs(imu.mean_after) < 1e-12 and imu.rms_after < imu.rms_before
    # the gyro bias is report-only: nothing of it is written
    assert cal.GYRO_BIAS not in res.parameter_updates()


def test_drift_is_found_and_estimated() -> None:
    # 3e-6 rad/s^2 = 0.01 deg/s per minute (an invented warm-up drift)
    spec = ImuSpec(bias=0.005, drift=3e-6)
    res = cal.calibrate(make_drive(2, 300.0, imu=spec), config(), seed=2)
    d, b = res.estimates[cal.GYRO_BIAS_DRIFT], res.estimates[cal.GYRO_BIAS]
    assert d.observable and abs(d.value - 3e-6) < 4 * d.uncertainty
    assert abs(b.value - 0.005) < 4 * b.uncertainty  # the bias at the drive's middle
    note = next(n for n in res.notes if n.startswith("the gyro bias drifts: +"))
    per_minute = float(note.split(": ")[1].split(" deg/s")[0])  # deg/s per minute
    assert per_minute == pytest.approx(math.degrees(d.value) * 60.0, abs=1e-4)


def test_scale_error_does_not_read_as_bias() -> None:
    # a gyro reading 1.5 % high (scale-factor error; MEMS parts have about a percent, from
    # memory) on a drive turning mostly left (mean yaw rate ~0.05 rad/s): unmodelled, the
    # bias would come out 0.015 * 0.05 = 7.5e-4 rad/s high, many standard errors
    spec = ImuSpec(bias=0.002, scale=0.015)
    drive = make_drive(6, 200.0, curv_mean=0.006, imu=spec)
    res = cal.calibrate(drive, config(), cal.SelectionRules(max_lateral_accel=3.0), seed=6)
    e = res.estimates[cal.GYRO_BIAS]
    assert abs(e.value - 0.002) < 4 * e.uncertainty and e.uncertainty < 2e-4
    assert any(n.startswith("the gyro reads yaw rate +1.5") for n in res.notes), res.notes


def test_bias_errors_cover_truth_over_seeds() -> None:
    # |error| < 1.96 SE in >= 17 of 20 seeds (binomial: P(X <= 16 | p = 0.95) = 1.6 %,
    # scipy.stats.binom.cdf(16, 20, 0.95))
    rng = np.random.default_rng(7)
    hits = 0
    for seed in range(20):
        bias = math.radians(rng.uniform(-0.5, 0.5))
        res = cal.calibrate(make_drive(200 + seed, 80.0, imu=ImuSpec(bias=bias)), config(),
                            cal.SelectionRules(min_usable=30.0), seed=seed, n_boot=100)
        e = res.estimates[cal.GYRO_BIAS]
        hits += abs(e.value - bias) < 1.96 * e.uncertainty
    assert hits >= 17


def _standstill(t0: float, seconds: float, bias: float, last: LocalizationSample,
                seed: int) -> list[object]:
    """The car stands (wheels 0, pose fixed, no twist yaw rate); the gyro reads its bias."""
    rng = np.random.default_rng(seed)
    out: list[object] = []
    for k in range(int(seconds * 100)):
        t = t0 + 0.01 * k
        out.append(ChassisSample(t, steer=0.0, wheel_front_left=0.0, wheel_front_right=0.0,
                                 wheel_rear_left=0.0, wheel_rear_right=0.0))
        out.append(ImuSample(t + 0.002, bias + rng.normal(0, 0.002), 0.0, 0.0))
        if k % 2 == 0:
            out.append(LocalizationSample(t + 0.001, last.x, last.y, last.yaw, 0.0, 0.0,
                                          math.nan))
    return out


def test_standstill_reads_the_bias_against_zero() -> None:
    # REALISM.md [Meas]: a production car's yaw-rate sensor at standstill reads -0.16 deg/s
    bias = -0.0028
    drive = make_drive(3, 120.0, imu=ImuSpec(bias=bias))
    last = [s for s in drive if isinstance(s, LocalizationSample)][-1]
    drive += _standstill(last.stamp + 0.5, 40.0, bias, last, 3)
    res = cal.calibrate(drive, config(), seed=3)
    e = res.estimates[cal.GYRO_BIAS]
    assert abs(e.value - bias) < 4 * e.uncertainty
    note = next(n for n in res.notes if n.startswith("gyro at standstill"))
    mean = float(note.split("mean ")[1].split(" rad/s")[0])
    assert abs(mean - bias) < 4 * 0.002 / math.sqrt(40 * 50)  # white noise over the stamps


def test_without_imu_the_gyro_is_not_observable() -> None:
    res = cal.calibrate(make_drive(4, 120.0), config(), seed=4)
    for name in (cal.GYRO_BIAS, cal.GYRO_BIAS_DRIFT, cal.IMU_YAW):
        e = res.estimates[name]
        assert (e.observable, e.value, e.reason) == (False, 0.0, "no IMU in the data")
    assert res.imu_seconds == 0.0


def test_too_little_imu_data_is_named() -> None:
    drive = [s for s in make_drive(5, 120.0, imu=ImuSpec(bias=0.01))
             if not isinstance(s, ImuSample) or s.stamp < 1010.0]
    e = cal.calibrate(drive, config(), seed=5).estimates[cal.GYRO_BIAS]
    assert not e.observable and e.reason.startswith("only 10 s of IMU data with localisation")


@pytest.mark.slow
def test_simulated_gyro_bias() -> None:
    # the simulator's own constant bias on angular_velocity.z (ImuConfig.gyro_bias, set by
    # Imperfections.gyro_bias), 0.006 rad/s = 0.34 deg/s; the same drive without it reads 0
    from kinematic_monitor.sim.scenarios import SCENARIOS, simulate

    trace = simulate(SCENARIOS["gentle_loop"](), duration=180.0, seed=8)
    rules = cal.SelectionRules(min_usable=60.0)
    for bias in (0.0, 0.006):
        samples, cfg, _ = simulated_drive(8, 180.0, imperfect=Imperfections(gyro_bias=bias),
                                          trace=trace)
        e = cal.calibrate(samples, cfg, rules, seed=8).estimates[cal.GYRO_BIAS]
        assert e.observable and abs(e.value - bias) < 4 * e.uncertainty, (bias, e)
