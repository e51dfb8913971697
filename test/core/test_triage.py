"""Triage: rules on hand-made evidence, and whole sequences built with the kinematic formulas.

Understeer/oversteer follow the ISO 8855 / SAE J670 meaning: understeer = the vehicle turns
less than the steering asks (|ψ̇| < |ψ̇_kin|, same sign). Sequences come from
``test_monitor.drive`` (Rajamani 2012 kinematic bicycle with the configured noise).
"""

from __future__ import annotations

import math

from fixtures.drives import Faults, config, drive, run, sine_steer
from kinematic_monitor.config.validation import validate
from kinematic_monitor.core import model
from kinematic_monitor.core.levels import ERROR
from kinematic_monitor.core.model import GRAVITY
from kinematic_monitor.core.monitor import Monitor
from kinematic_monitor.core.triage import Evidence, classify

P = model.VehicleParams(2.70, 1.35, 0.31, 1.55)


def _ev(meas: float, kin: float, v: float = 12.0, delta: float = 0.06, **kw: object) -> Evidence:
    ev = Evidence(channel="yaw_rate", yaw_rate_kin=kin, yaw_rate_imu=meas,
                  yaw_rate_loc=kw.pop("loc", meas), yaw_rate_sigma=0.01,  # type: ignore[arg-type]
                  lateral_accel=v * meas, speed=v, steer=delta, wheelbase=P.wheelbase)
    for k, val in kw.items():
        setattr(ev, k, val)
    return ev


def test_understeer_when_measured_below_kinematic_same_sign() -> None:
    kin = model.yaw_rate(12.0, 0.06, P)
    v = classify(_ev(0.62 * kin, kin))
    assert v.kind == "lateral_slip" and v.subkind == "understeer"
    assert "38 % below kinematic" in v.summary
    # 12 m/s × 0.165 rad/s ≈ 2.0 m/s² ≈ 0.20 g < 0.5·μ·g with μ = 1: "on low grip"
    assert "on low grip" in v.summary and "0.20 g" in v.summary


def test_oversteer_when_measured_above_kinematic() -> None:
    kin = model.yaw_rate(12.0, 0.06, P)
    v = classify(_ev(1.5 * kin, kin))
    assert v.kind == "lateral_slip" and v.subkind == "oversteer"
    left = classify(_ev(-1.5 * kin, -kin, delta=-0.06))  # right turn: mirror image
    assert left.subkind == "oversteer"


def test_localisation_disagreeing_with_imu_and_kinematics_is_localisation_fault() -> None:
    kin = model.yaw_rate(12.0, 0.06, P)
    v = classify(_ev(kin, kin, loc=kin + 0.2))
    assert v.kind == "localization_fault"


def test_low_lateral_acceleration_offset_is_calibration_bias() -> None:
    # driving straight (δ = 0) while turning at 0.02 rad/s: a steering zero error
    v = classify(_ev(0.02, 0.0, delta=0.0))
    assert v.kind == "calibration_bias" and "calibrate" in v.summary
    assert 12.0 * 0.02 < 0.15 * GRAVITY


def test_fixed_channel_rules() -> None:
    assert classify(Evidence("input", detail="imu silent")).kind == "input_stale"
    spin = classify(Evidence("slip_ratio", slip_front=0.01, slip_rear=0.35))
    assert spin.kind == "longitudinal_slip" and "rear" in spin.summary and spin.subkind == (
        "wheel spin")
    lock = classify(Evidence("slip_ratio", slip_front=-0.9, slip_rear=-0.2))
    assert lock.subkind == "wheel lock" and "front" in lock.summary
    assert classify(Evidence("wheel_scale", slip_front=0.03, slip_rear=0.03)).kind == (
        "calibration_bias")
    jump = classify(Evidence("localization", loc_jump=2.5))
    assert jump.kind == "localization_fault" and not jump.note
    note = classify(Evidence("localization", loc_jump=2.5, loc_declared_reset=True))
    assert note.note


# ---------------------------------------------------------------------------- sequences
def _events(samples: list[object], **cfg: object) -> list:  # type: ignore[type-arg]
    m = run(samples, config(**cfg))
    m.flush(samples[-1].stamp)  # type: ignore[attr-defined]
    return m.events


def test_sequence_yaw_deficit_with_imu_and_loc_agreeing_is_understeer() -> None:
    f = Faults(yaw_factor=lambda t: 0.6 if 6.0 <= t < 9.0 else 1.0)
    evs = _events(drive(14.0, lambda t: 12.0, lambda t: 0.06, f, seed=11))
    kinds = {e.kind for e in evs}
    assert kinds == {"lateral_slip"}, [e.to_dict() for e in evs]
    e = evs[0]
    assert "understeer" in e.summary and e.level == ERROR
    assert 1006.0 <= e.start <= 1006.3 and e.detected_at <= 1006.8
    assert 1008.8 <= e.end <= 1010.0


def test_sequence_localisation_jump_with_imu_agreeing_is_localisation_fault() -> None:
    f = Faults(loc_jump=(6.0, 1.5, -1.0))
    evs = _events(drive(10.0, lambda t: 12.0, lambda t: 0.03, f, seed=12))
    assert evs and {e.kind for e in evs} == {"localization_fault"}, [e.to_dict() for e in evs]
    assert abs(evs[0].detected_at - 1006.0) < 0.05 and evs[0].level == ERROR
    assert abs(evs[0].peak["jump_m"] - math.hypot(1.5, 1.0)) < 0.3


def test_sequence_declared_relocalisation_is_a_note_not_an_error() -> None:
    # 5 m: far outside even the pre-jump covariance (0.5 m std), so it is noticed
    f = Faults(loc_jump=(6.0, 4.0, -3.0), loc_jump_declared=True)
    samples = drive(10.0, lambda t: 12.0, lambda t: 0.03, f, seed=13)
    m = run(samples, config())
    m.flush(samples[-1].stamp)  # type: ignore[attr-defined]
    assert m.events == [], [e.to_dict() for e in m.events]  # a note, no event at all
    assert m.counters["relocalizations"] == 1


def test_sequence_constant_steering_offset_is_calibration_bias() -> None:
    # steering reads 0.02 rad (1.1°) less than the wheels turn; gentle driving
    f = Faults(steer_offset=0.02)
    evs = _events(drive(15.0, lambda t: 10.0, lambda t: 0.01 * math.sin(t / 2), f, seed=14))
    assert evs and {e.kind for e in evs} == {"calibration_bias"}, [e.to_dict() for e in evs]
    assert "calibrate" in evs[0].summary


def test_sequence_wheel_spin_is_longitudinal_slip() -> None:
    f = Faults(rear_spin=(5.0, 7.0, 0.3))
    evs = _events(drive(10.0, lambda t: 10.0, lambda t: 0.0, f, seed=15))
    assert evs and {e.kind for e in evs} == {"longitudinal_slip"}, [e.to_dict() for e in evs]
    e = evs[0]
    assert e.level == ERROR and "spin" in e.summary and "rear" in e.summary
    assert 1005.0 <= e.start <= 1005.2 and e.detected_at <= 1005.5
    assert abs(e.peak["slip_ratio_rear"] - 0.3) < 0.05


def test_sequence_wheel_radius_error_is_calibration_bias() -> None:
    # wheels report 4 % more than the ground speed on both axles (rolling radius too large)
    f = Faults(wheel_scale=1.04)
    evs = _events(drive(8.0, lambda t: 12.0, sine_steer(0.03, 8.0), f, seed=21))
    assert evs and {e.kind for e in evs} == {"calibration_bias"}, [e.to_dict() for e in evs]
    # the summary quotes the block estimate at detection: 4 % within its noise
    pct = float(evs[0].summary.split(" %")[0].split()[-1])
    assert "wheel radius" in evs[0].summary and abs(pct - 4.0) <= 0.3, evs[0].summary


def test_sequence_localisation_heading_drift_is_localisation_fault() -> None:
    # localisation heading drifts at 0.05 rad/s from t = 5 s; IMU and kinematics agree
    f = Faults(loc_heading_drift=(5.0, 0.05))
    evs = _events(drive(15.0, lambda t: 12.0, sine_steer(0.03, 8.0), f, seed=21))
    assert evs and {e.kind for e in evs} == {"localization_fault"}, [e.to_dict() for e in evs]
    assert 1005.0 <= evs[0].start and evs[0].detected_at <= 1011.0


def test_sequence_relocalisation_declared_on_reset_topic_is_a_note() -> None:
    # same jump as a fault, but announced by the localisation (reset-topic message)
    f = Faults(loc_jump=(6.0, 1.5, -1.0))
    samples = drive(10.0, lambda t: 12.0, lambda t: 0.03, f, seed=12)
    m = Monitor(validate(config()))
    for s in samples:
        if s.stamp >= 1006.0 and m.counters["relocalizations"] == 0:  # type: ignore[attr-defined]
            m.declare_relocalization(1005.99)
        m.process(s)
    m.flush(samples[-1].stamp)  # type: ignore[attr-defined]
    assert m.events == [] and m.counters["relocalizations"] == 1
    assert any("relocalisation" in text for _, text in m.notes)


def test_large_common_slip_is_longitudinal_and_heading_channel_is_localisation() -> None:
    # both axles 40 % below ground speed: locked wheels, not a wheel-radius error (> 5 %)
    lock = classify(Evidence("wheel_scale", slip_front=-0.4, slip_rear=-0.4))
    assert lock.kind == "longitudinal_slip" and lock.subkind == "wheel lock"
    assert classify(Evidence("wheel_scale", slip_front=0.04, slip_rear=0.04)).kind == (
        "calibration_bias")
    head = classify(Evidence("heading"))
    assert head.kind == "localization_fault" and head.subkind == "heading"
