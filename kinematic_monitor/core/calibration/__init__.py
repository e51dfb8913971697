"""Vehicle calibration from ordinary drives (pure core): see :mod:`.estimate`."""

from kinematic_monitor.core.calibration.estimate import (
    CalibrationError,
    CalibrationResult,
    Estimate,
    Residuals,
    SelectionRules,
    calibrate,
    per_g_degrees,
    steering_wheel_input,
)

__all__ = ["CalibrationError", "CalibrationResult", "Estimate", "Residuals", "SelectionRules",
           "calibrate", "per_g_degrees", "steering_wheel_input"]
