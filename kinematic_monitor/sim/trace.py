"""The true vehicle state recorded by the simulator (REP 103 frames, SI units).

`TrueTrace` is the hand-over between the vehicle dynamics (``dynamics.py``) and the
sensor/fault/bag writers: it holds the *true* motion at a fine, fixed time step; sensors
sample it and add their own noise and faults.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.sim.dynamics import SimVehicle

WHEEL_NAMES = ("FL", "FR", "RL", "RR")
"""Column order of `TrueTrace.wheel_omega`."""


@dataclass
class TrueTrace:
    """True vehicle state sampled every `dt` s from t=0 (simulated time), REP 103 frames."""

    dt: float  # [s] sample spacing (<= 0.002)
    t: np.ndarray  # [s] shape (N,)
    x: np.ndarray  # [m] CG position in map frame
    y: np.ndarray  # [m] CG position in map frame
    yaw: np.ndarray  # [rad] heading, unwrapped
    vx: np.ndarray  # [m/s] CG velocity in body frame, forward
    vy: np.ndarray  # [m/s] CG velocity in body frame, left
    yaw_rate: np.ndarray  # [rad/s]
    ax: np.ndarray  # [m/s^2] body-frame CG acceleration (ideal IMU at the CG, no gravity)
    ay: np.ndarray  # [m/s^2]
    steer_left: np.ndarray  # [rad] true road-wheel angle, front left (Ackermann geometry)
    steer_right: np.ndarray  # [rad] true road-wheel angle, front right
    steer: np.ndarray  # [rad] bicycle-equivalent road-wheel angle
    wheel_omega: np.ndarray  # [rad/s] shape (N, 4): FL, FR, RL, RR
    mu: np.ndarray  # [-] road friction coefficient under the vehicle
    vehicle: SimVehicle  # the parameters used (see dynamics.py)
    scenario: str

    def __len__(self) -> int:
        return int(self.t.shape[0])

    @property
    def duration(self) -> float:
        """Simulated time covered [s]."""
        return float(self.t[-1] - self.t[0]) if len(self) else 0.0

    @property
    def speed(self) -> np.ndarray:
        """CG speed over ground [m/s]."""
        return np.hypot(self.vx, self.vy)

    @property
    def sideslip(self) -> np.ndarray:
        """CG sideslip angle beta = atan2(vy, vx) [rad] (0 at standstill)."""
        moving = self.speed > 0.1
        return np.where(moving, np.arctan2(self.vy, np.maximum(np.abs(self.vx), 1e-9)), 0.0)

    def slip_ratio(self, min_speed: float = 1.0) -> np.ndarray:
        """Longitudinal slip ratio per wheel, shape (N, 4) [-].

        kappa = (Omega*R_e - V_x)/|V_x| (ISO 8855 / Pacejka sign: positive when driving);
        V_x is the wheel-centre speed along the wheel heading. The denominator is
        guarded at `min_speed` [m/s] so the value stays finite at standstill.
        """
        v_wheel = self.wheel_speed_over_ground()
        r = self.vehicle.wheel_radius
        denom = np.maximum(np.abs(v_wheel), min_speed)
        return (self.wheel_omega * r - v_wheel) / denom

    def wheel_speed_over_ground(self) -> np.ndarray:
        """Wheel-centre velocity along each wheel's heading [m/s], shape (N, 4)."""
        p = self.vehicle
        half = 0.5 * p.track_width
        lf = p.wheelbase - p.cg_to_rear_axle
        lr = p.cg_to_rear_axle
        out = np.empty((len(self), 4))
        # wheel-centre velocities in the body frame: v_cg + r x omega
        for j, (px, py, delta) in enumerate(
            (
                (lf, half, self.steer_left),
                (lf, -half, self.steer_right),
                (-lr, half, None),
                (-lr, -half, None),
            )
        ):
            u = self.vx - self.yaw_rate * py
            w = self.vy + self.yaw_rate * px
            if delta is None:
                out[:, j] = u
            else:
                out[:, j] = u * np.cos(delta) + w * np.sin(delta)
        return out

    def kinematic_reference(self) -> dict[str, np.ndarray]:
        """Kinematic bicycle prediction from the true steering and speed (Rajamani 2012).

        beta = atan(l_r tan(delta)/L), yaw_rate = v cos(beta) tan(delta)/L.
        Returns arrays ``beta`` [rad] and ``yaw_rate`` [rad/s].
        """
        p = self.vehicle
        tan_d = np.tan(self.steer)
        beta = np.arctan(p.cg_to_rear_axle * tan_d / p.wheelbase)
        v = self.speed * np.sign(self.vx)
        return {"beta": beta, "yaw_rate": v * np.cos(beta) * tan_d / p.wheelbase}

    def at(self, t: float) -> int:
        """Index of the sample nearest to time `t` [s] (clipped to the trace)."""
        i = int(round((t - float(self.t[0])) / self.dt)) if len(self) else 0
        return min(max(i, 0), max(len(self) - 1, 0))
