"""Coverage of the calibration's stated standard errors on simulated drives.

For each seed: a gentle drive on our handling loop (the dynamic single-track simulator
with Magic-Formula tyres, so tyre slip and yaw lag are model error the kinematic equations
do not contain), the steering reading +1.0 deg high and the wheel radius in the file 2 %
small (faults ``steer-offset`` and ``wheel-radius``), sensor noise of the default sensor
configuration. The calibration must give the offset -1.0 deg and the scale 1/0.98.

Prints per seed the estimates, their stated standard errors (1 sigma, the larger of fit and
bootstrap) and |error|/SE; then the coverage at 95 % (|error| < 1.96 SE) over all seeds
and whether the acceptance accuracy (+-0.05 deg, +-0.2 %) held in every seed.

Usage: ``nice python bench/calibration_coverage.py [--seeds 20] [--duration 300]``
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from dataclasses import dataclass
from typing import Any

#: injected errors (the acceptance case): reported steering +1.0 deg, wheel radius -2 %
STEER_FAULT = math.radians(1.0)  # [rad] measured = true + this
RADIUS_ERROR = -0.02  # [-] measured wheel speed = (1 + this) * true
TRUE_OFFSET = -STEER_FAULT  # parameter convention: delta_true = delta_measured + offset
TRUE_SCALE = 1.0 / (1.0 + RADIUS_ERROR)  # effective radius = wheel_radius * scale

#: acceptance accuracy of the issue
OFFSET_TOL = math.radians(0.05)  # [rad]
SCALE_TOL = 0.002  # [-] relative
Z95 = 1.959963984540054  # scipy.stats.norm.ppf(0.975)


@dataclass
class SeedResult:
    """One seed's estimates [rad] / [-] and stated 1-sigma standard errors."""

    seed: int
    offset: float
    offset_se: float
    scale: float
    scale_se: float
    usable: float  # [s]

    @property
    def offset_z(self) -> float:
        return abs(self.offset - TRUE_OFFSET) / self.offset_se

    @property
    def scale_z(self) -> float:
        return abs(self.scale - TRUE_SCALE) / self.scale_se

    @property
    def accurate(self) -> bool:
        return (abs(self.offset - TRUE_OFFSET) <= OFFSET_TOL
                and abs(self.scale / TRUE_SCALE - 1.0) <= SCALE_TOL)


def simulated_samples(seed: int, duration: float) -> tuple[list[Any], dict[str, float]]:
    """Samples of one simulated gentle drive with both faults, and its parameter mapping."""
    from grading import samples_from_records
    from kinematic_monitor.sim import sensors
    from kinematic_monitor.sim.bagout import vehicle_params
    from kinematic_monitor.sim.faults import SteeringOffset, WheelRadiusError, apply_faults
    from kinematic_monitor.sim.scenarios import SCENARIOS, simulate

    trace = simulate(SCENARIOS["gentle_loop"](), duration=duration, seed=seed)
    cfg = sensors.SensorConfig()
    cfg.gnss.rate_hz = 0.0
    series = sensors.sample_truth(trace, cfg)
    apply_faults(series, [SteeringOffset(offset=STEER_FAULT),
                          WheelRadiusError(error=RADIUS_ERROR)])
    sensors.add_noise(series, cfg, seed + 1000)
    samples = samples_from_records(sensors.iter_records(series, cfg), cfg)
    return samples, dict(vehicle_params(trace.vehicle))


def run_seed(seed: int, duration: float, n_boot: int = 200) -> SeedResult:
    """Calibrate one simulated drive (see the module docstring)."""
    from kinematic_monitor.config.validation import validate
    from kinematic_monitor.core import calibration as cal

    samples, values = simulated_samples(seed, duration)
    res = cal.calibrate(samples, validate(values),
                        cal.SelectionRules(min_usable=min(60.0, duration / 4)), seed=seed,
                        n_boot=n_boot)
    eo, es = res.estimates["vehicle.steering_offset"], res.estimates["vehicle.wheel_speed_scale"]
    return SeedResult(seed, eo.fitted, eo.uncertainty, es.fitted, es.uncertainty,
                      res.usable_seconds)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=20)
    ap.add_argument("--first", type=int, default=0, help="first seed")
    ap.add_argument("--duration", type=float, default=300.0, help="drive length [s]")
    args = ap.parse_args(argv)
    print(f"gentle_loop, {args.duration:g} s per seed, steering +1.0 deg, wheel radius -2 %; "
          f"truth: offset {math.degrees(TRUE_OFFSET):+.3f} deg, scale {TRUE_SCALE:.5f}")
    print(f"{'seed':>4} {'usable':>7} {'offset[deg]':>12} {'SE[deg]':>8} {'|err|/SE':>8} "
          f"{'scale':>9} {'SE':>8} {'|err|/SE':>8} {'acc':>4}")
    rows: list[SeedResult] = []
    t0 = time.perf_counter()
    for seed in range(args.first, args.first + args.seeds):
        r = run_seed(seed, args.duration)
        rows.append(r)
        print(f"{r.seed:4d} {r.usable:7.0f} {math.degrees(r.offset):+12.4f} "
              f"{math.degrees(r.offset_se):8.4f} {r.offset_z:8.2f} {r.scale:9.5f} "
              f"{r.scale_se:8.5f} {r.scale_z:8.2f} {'ok' if r.accurate else 'FAIL':>4}",
              flush=True)
    n = len(rows)
    cov_o = sum(r.offset_z < Z95 for r in rows)
    cov_s = sum(r.scale_z < Z95 for r in rows)
    rms_o = math.sqrt(sum(((r.offset - TRUE_OFFSET) / r.offset_se) ** 2 for r in rows) / n)
    rms_s = math.sqrt(sum(((r.scale - TRUE_SCALE) / r.scale_se) ** 2 for r in rows) / n)
    print(f"coverage at 95 %: offset {cov_o}/{n} ({100 * cov_o / n:.0f} %), "
          f"scale {cov_s}/{n} ({100 * cov_s / n:.0f} %)")
    print(f"rms of error/SE (1.0 if the SE is honest): offset {rms_o:.2f}, scale {rms_s:.2f}")
    worst_o = max(abs(math.degrees(r.offset - TRUE_OFFSET)) for r in rows)
    worst_s = max(abs(r.scale / TRUE_SCALE - 1.0) for r in rows)
    print(f"accuracy in every seed: {'yes' if all(r.accurate for r in rows) else 'NO'} "
          f"(worst offset error {worst_o:.4f} deg of 0.05, worst scale error "
          f"{100 * worst_s:.3f} % of 0.2 %); {time.perf_counter() - t0:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
