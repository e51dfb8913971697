"""What a calibration returns: estimates with standard errors, residuals, the data used."""

from __future__ import annotations

import math
from dataclasses import dataclass, field


class CalibrationError(ValueError):
    """The data cannot give a calibration (too little usable driving, missing inputs)."""


@dataclass(frozen=True)
class Estimate:
    """One calibrated quantity. ``value`` is the input value when not observable.

    ``name`` is a parameter name (dotted, as in the parameter file, e.g.
    ``vehicle.steering_offset``) or a report-only name without a parameter (no ``vehicle.``
    prefix, e.g. ``imu_gyro_bias``); only parameters are ever written to a file.
    """

    name: str
    unit: str
    prior: float  # the input value (0 for a report-only correction the monitor does not apply)
    value: float
    se_fit: float = math.nan
    se_boot: float = math.nan
    observable: bool = True
    reason: str = ""  # why not observable, or notes
    fitted: float = math.nan  # the fitted value even when not observable (diagnostics)

    @property
    def uncertainty(self) -> float:
        """The larger of the two standard errors (NaN when not fitted)."""
        vals = [v for v in (self.se_fit, self.se_boot) if math.isfinite(v)]
        return max(vals) if vals else math.nan

    @property
    def is_parameter(self) -> bool:
        """True for a parameter of the schema (a ``vehicle.*`` name), False if report-only."""
        return self.name.startswith("vehicle.")


def kept(name: str, unit: str, prior: float, reason: str) -> Estimate:
    """An estimate that was not fitted: the input value stays, with the reason."""
    return Estimate(name, unit, prior, prior, observable=False, reason=reason)


@dataclass
class Residuals:
    """Mean and RMS of a residual over the selected samples, before and after calibration."""

    name: str
    unit: str
    mean_before: float
    rms_before: float
    mean_after: float
    rms_after: float


@dataclass
class CalibrationResult:
    """Estimates, the data used and residuals before/after (see :mod:`.pipeline`)."""

    estimates: dict[str, Estimate]
    usable_seconds: float
    k_usable_seconds: float
    total_seconds: float
    n_segments: int
    rejected_seconds: dict[str, float]
    residuals: list[Residuals]
    steering_input: str  # "road_wheel" or "steering_wheel"
    yaw_rate_source: str
    notes: list[str] = field(default_factory=list)
    imu_seconds: float = 0.0  # [s] of data used for the IMU estimates

    def parameter_updates(self) -> dict[str, float]:
        """Parameter-file values to write: observable estimates of schema parameters."""
        out: dict[str, float] = {}
        for e in self.estimates.values():
            if e.is_parameter and e.observable and math.isfinite(e.value):
                out[e.name] = float(e.value)
        return out

    def report_only(self) -> list[Estimate]:
        """The estimates that have no parameter (reported, never written)."""
        return [e for e in self.estimates.values() if not e.is_parameter]
