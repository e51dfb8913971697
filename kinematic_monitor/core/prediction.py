"""The monitor's pose filter: the bicycle EKF (``core/ekf.py``) fed with the samples.

The filter predicts from each complete chassis sample (measured road-wheel angle, CG speed)
and updates with each localisation pose of the CG; it is (re)started from a localisation pose
when it has none, after a jump, or after a filter error. Its estimate is the ``~/prediction``
output; its normalised innovations feed the filter-consistency check. Units SI, angles in
radians; the pose is in the localisation frame (REP 105).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from kinematic_monitor.core import model
from kinematic_monitor.core.ekf import BicycleEKF, FilterNoise
from kinematic_monitor.core.geometry import wrap_angle
from kinematic_monitor.core.motion import MotionState
from kinematic_monitor.core.samples import LocalizationSample


@dataclass
class Prediction:
    """Filter estimate for ``~/prediction``: CG pose [m, rad] in the localisation frame,
    CG speed [m/s], yaw rate [rad/s], (x, y, yaw) covariance row-major."""

    stamp: float
    x: float
    y: float
    yaw: float
    v: float
    yaw_rate: float
    pose_cov: tuple[float, ...]
    frame_id: str


class PoseFilter:
    """See the module docstring; filter errors are counted in ``counters['filter_errors']``."""

    def __init__(self, state: MotionState, counters: dict[str, int], steer_std: float,
                 wheel_speed_std: float, frame_id: str) -> None:
        self.state = state
        self.counters = counters
        self.frame_id = frame_id
        self.noise = FilterNoise(steer_std=steer_std,
                                 speed_std=wheel_speed_std * state.p.effective_wheel_radius)
        self.ekf: BicycleEKF | None = None

    def predict(self, stamp: float, delta_meas: float, speed: float) -> None:
        """Propagate to a chassis sample's stamp [s] with its inputs [rad, m/s]."""
        if self.ekf is None:
            return
        try:
            self.ekf.predict(stamp, delta_meas, speed)
        except (ValueError, RuntimeError):
            self.counters["filter_errors"] += 1
            self.ekf = None

    def update(self, s: LocalizationSample, jumped: bool, sp: float, sy: float
               ) -> tuple[float | None, bool]:
        """Update with a localisation pose (std ``sp`` [m], ``sy`` [rad]): (its NIS or None,
        whether the filter was started afresh from this pose instead)."""
        st = self.state
        if self.ekf is None or jumped or not st.have_chassis():
            return None, self._start(s, sp, sy)
        try:
            self.ekf.predict(s.stamp, st.delta_meas, st.speed)
            return self.ekf.update_pose_diag(s.x, s.y, s.yaw, sp**2, sy**2), False
        except (ValueError, RuntimeError):
            self.counters["filter_errors"] += 1
            self.ekf = None
            return None, False

    def _start(self, s: LocalizationSample, sp: float, sy: float) -> bool:
        st = self.state
        cov = [[sp**2, 0.0, 0.0], [0.0, sp**2, 0.0], [0.0, 0.0, sy**2]]
        try:
            ekf = BicycleEKF(st.p, self.noise, reference_x=st.ref_x)
            v0 = st.speed if math.isfinite(st.speed) else 0.0
            ekf.initialise(s.stamp, s.x, s.y, s.yaw, v=v0, pose_cov=cov)
            if math.isfinite(st.delta_meas):
                ekf.predict(s.stamp, st.delta_meas, v0)
            self.ekf = ekf
            return True
        except (ValueError, RuntimeError):
            self.counters["filter_errors"] += 1
            self.ekf = None
            return False

    def prediction(self) -> Prediction | None:
        """The estimate (CG pose, speed, yaw rate, pose covariance), None before a start."""
        ekf = self.ekf
        if ekf is None:
            return None
        try:
            rate = model.yaw_rate(ekf.v, ekf.steer(), self.state.p)
            return Prediction(ekf.stamp, ekf.x, ekf.y, wrap_angle(ekf.yaw), ekf.v, rate,
                              ekf.pose_covariance(), self.frame_id)
        except (ValueError, RuntimeError):
            return None

    def estimate(self) -> tuple[float, float, float, float] | None:
        """(x [m], y [m], yaw [rad], v [m/s]) of :meth:`prediction` (the same floats)."""
        pred = self.prediction()
        return None if pred is None else (pred.x, pred.y, pred.yaw, pred.v)
