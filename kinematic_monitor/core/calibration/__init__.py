"""Vehicle calibration from ordinary drives (pure core): the one public face of the package.

:func:`calibrate` (in :mod:`.pipeline`) takes samples and a ``MonitorConfig`` and returns a
:class:`CalibrationResult` of :class:`Estimate` values with standard errors. Names that are
parameters (``vehicle.*``) can be written to a parameter file; the others are report-only.
"""

from kinematic_monitor.core.calibration.gyro import BIAS as GYRO_BIAS
from kinematic_monitor.core.calibration.gyro import DRIFT as GYRO_BIAS_DRIFT
from kinematic_monitor.core.calibration.imu_mounting import YAW as IMU_YAW
from kinematic_monitor.core.calibration.observability import Resolution
from kinematic_monitor.core.calibration.pipeline import calibrate
from kinematic_monitor.core.calibration.results import (
    CalibrationError,
    CalibrationResult,
    Estimate,
    Residuals,
)
from kinematic_monitor.core.calibration.rules import SelectionRules
from kinematic_monitor.core.calibration.steering import steering_wheel_input
from kinematic_monitor.core.calibration.understeer import per_g_degrees
from kinematic_monitor.core.calibration.wheels import PER_WHEEL

__all__ = ["GYRO_BIAS", "GYRO_BIAS_DRIFT", "IMU_YAW", "PER_WHEEL",
           "CalibrationError", "CalibrationResult", "Estimate", "Residuals", "Resolution",
           "SelectionRules", "calibrate", "per_g_degrees", "steering_wheel_input"]
