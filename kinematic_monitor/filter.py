"""Extended Kalman filter on the kinematic bicycle model (pure numpy, no ROS).

State (index: meaning [unit]), all in a fixed planar frame (REP 103/105):

    0 x      CG position [m]
    1 y      CG position [m]
    2 yaw    heading [rad], wrapped to [-pi, pi)
    3 v      CG speed [m/s] over the last prediction interval (negative reversing)
    4 bias   residual steering offset [rad]: delta_true = delta_measured
             + params.steering_offset + bias

Inputs drive the prediction: the measured bicycle road-wheel angle ``delta`` and the CG
speed ``speed`` (from wheel speeds, see ``model.cg_speed_from_rear_wheels``), both held
constant between stamps. The pose moves by the exact arc of ``model.step``; the speed
state takes the input speed (``v' = speed``), so input noise enters the state through the
step Jacobian (``Q = G diag(speed_std^2, steer_std^2) G^T`` plus small random walks).

Measurements (each returns an :class:`Innovation` with residual, covariance, NIS, dof):

* ``update_pose(x, y, yaw, cov)``: localisation pose of a point ``reference_x`` metres
  ahead of the CG along body x (``-l_r`` for a rear-axle ``base_link``); yaw wrapped.
* ``update_body_velocity(vx, vy, cov)``: body-frame velocity of the same point,
  ``vx = v cos(beta)``, ``vy = v sin(beta) (1 + reference_x / l_r)``.
* ``update_yaw_rate(rate, var)``: IMU yaw rate, ``psi_dot = v cos(beta) tan(delta) / L``.

The last two use the measured steering angle directly, so its noise (``steer_std``) is
added to the measurement covariance: ``R + steer_std^2 (dh/ddelta)(dh/ddelta)^T``.

Covariance update in Joseph form, then symmetrised (the same algebra as filterpy's
``ExtendedKalmanFilter.update``; the tests check equality). Bad input raises
``ValueError`` naming it; calls before :meth:`BicycleEKF.initialise` raise ``RuntimeError``.

Typical use::

    ekf = BicycleEKF(params, FilterNoise())
    ekf.initialise(stamp, x, y, yaw)
    ekf.predict(stamp, delta, speed)          # per chassis sample
    innov = ekf.update_pose(x, y, yaw, cov)   # per localisation sample
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np

from kinematic_monitor.geometry import wrap_angle
from kinematic_monitor.model import VehicleParams, step_with_partials

N_STATE = 5
IX, IY, IYAW, IV, IBIAS = range(N_STATE)


@dataclass(frozen=True)
class FilterNoise:
    """Noise settings (1-sigma values; random walks as spectral densities).

    steer_std: measured road-wheel angle noise per sample [rad].
    speed_std: CG speed input noise per sample [m/s].
    pos_rw: position random walk [m^2/s] (unmodelled motion).
    yaw_rw: yaw random walk [rad^2/s].
    bias_rw: steering-bias random walk [rad^2/s].
    init_pos_std, init_yaw_std, init_speed_std, init_bias_std: initial 1-sigma values
        [m, rad, m/s, rad] used by ``initialise`` when no covariance is given.
    """

    steer_std: float = 0.003
    speed_std: float = 0.05
    pos_rw: float = 1e-4
    yaw_rw: float = 1e-6
    bias_rw: float = 1e-8
    init_pos_std: float = 1.0
    init_yaw_std: float = 0.1
    init_speed_std: float = 1.0
    init_bias_std: float = 0.02

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if not isinstance(value, int | float) or not math.isfinite(value) or value < 0.0:
                raise ValueError(
                    f"filter noise {f.name}={value!r} is invalid; allowed: finite, >= 0"
                )
        for name in ("init_pos_std", "init_yaw_std", "init_speed_std", "init_bias_std"):
            if getattr(self, name) <= 0.0:
                raise ValueError(
                    f"filter noise {name}={getattr(self, name)!r} is invalid; allowed: > 0"
                )


@dataclass(frozen=True)
class Innovation:
    """Result of one measurement update.

    residual: measurement minus prediction (angles wrapped) [measurement units].
    covariance: innovation covariance S = H P H^T + R.
    nis: normalised innovation squared, residual^T S^-1 residual [-].
    dof: measurement dimension (chi-square degrees of freedom of ``nis``).
    """

    residual: np.ndarray
    covariance: np.ndarray
    nis: float
    dof: int


def _as_cov(name: str, cov: object, n: int) -> np.ndarray:
    """Validate an n x n measurement covariance (finite, symmetric, non-negative diagonal)."""
    if isinstance(cov, np.ndarray) and cov.shape == (n, n) and cov.dtype == np.float64:
        r = cov
    else:
        try:
            r = np.array(cov, dtype=float).reshape(n, n)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"{name} must be a {n}x{n} covariance matrix: {exc}") from None
    rows = r.tolist()  # plain floats: cheaper than numpy reductions at this size
    flat = [value for row in rows for value in row]
    if not math.isfinite(math.fsum(flat)):
        raise ValueError(f"{name} contains non-finite values: {rows}")
    tol = 1e-9 * max(max(flat), -min(flat))
    for i in range(n):
        if rows[i][i] < 0.0 or any(abs(rows[i][j] - rows[j][i]) > tol for j in range(i)):
            raise ValueError(f"{name} is not a symmetric covariance matrix: {rows}")
    return r


def _inv_pd(S: np.ndarray) -> np.ndarray | None:
    """Inverse of a symmetric matrix, or None when it is not positive definite.

    Closed forms (cofactors, Sylvester's criterion) for n <= 3, Cholesky otherwise.
    """
    n = S.shape[0]
    if n == 1:
        a = float(S[0, 0])
        return np.array([[1.0 / a]]) if a > 0.0 else None
    if n == 2:
        a, b, d = float(S[0, 0]), float(S[0, 1]), float(S[1, 1])
        det = a * d - b * b
        if a <= 0.0 or det <= 0.0:
            return None
        return np.array([[d / det, -b / det], [-b / det, a / det]])
    if n == 3:
        (a, b, c), (_, e, f), (_, _, i) = S.tolist()
        c00, c01, c02 = e * i - f * f, c * f - b * i, b * f - c * e
        det = a * c00 + b * c01 + c * c02
        if a <= 0.0 or a * e - b * b <= 0.0 or det <= 0.0:
            return None
        c11, c12, c22 = a * i - c * c, b * c - a * f, a * e - b * b
        return np.array([[c00, c01, c02], [c01, c11, c12], [c02, c12, c22]]) / det
    try:
        np.linalg.cholesky(S)
    except np.linalg.LinAlgError:
        return None
    return np.asarray(np.linalg.inv(S))


def _check_finite(**values: float) -> None:
    for name, value in values.items():
        if not math.isfinite(value):
            raise ValueError(f"{name}={value!r} is not a finite number")


class BicycleEKF:
    """EKF with state [x, y, yaw, v, steering bias]; see the module docstring."""

    def __init__(
        self, params: VehicleParams, noise: FilterNoise | None = None, reference_x: float = 0.0
    ) -> None:
        """``reference_x``: position of the measured point ahead of the CG [m] (body x)."""
        _check_finite(reference_x=reference_x)
        self.params = params
        self.noise = noise if noise is not None else FilterNoise()
        self.reference_x = float(reference_x)
        self._x = np.zeros(N_STATE)
        self._P = np.eye(N_STATE)
        self._stamp = math.nan
        self._delta_meas = 0.0
        self._initialised = False
        self._eye = np.eye(N_STATE)
        self._h_pose = np.eye(3, N_STATE)

    # --- state access ------------------------------------------------------------------

    @property
    def initialised(self) -> bool:
        """True after :meth:`initialise` and until :meth:`reset`."""
        return self._initialised

    @property
    def stamp(self) -> float:
        """Time of the current estimate [s] (NaN before initialisation)."""
        return self._stamp

    @property
    def state(self) -> np.ndarray:
        """Copy of the state vector [x, y, yaw, v, bias]."""
        return self._x.copy()

    @property
    def covariance(self) -> np.ndarray:
        """Copy of the 5x5 state covariance."""
        return self._P.copy()

    @property
    def x(self) -> float:
        """CG x [m]."""
        return float(self._x[IX])

    @property
    def y(self) -> float:
        """CG y [m]."""
        return float(self._x[IY])

    @property
    def yaw(self) -> float:
        """Heading [rad] in [-pi, pi)."""
        return float(self._x[IYAW])

    @property
    def v(self) -> float:
        """CG speed [m/s]."""
        return float(self._x[IV])

    @property
    def steering_bias(self) -> float:
        """Estimated residual steering offset [rad] (added to the measured angle)."""
        return float(self._x[IBIAS])

    @property
    def last_steer(self) -> float:
        """Last measured road-wheel angle passed to :meth:`predict` [rad]."""
        return self._delta_meas

    def steer(self, delta_measured: float | None = None) -> float:
        """True road-wheel angle [rad] = measured + params offset + estimated bias."""
        d = self._delta_meas if delta_measured is None else delta_measured
        return d + self.params.steering_offset + float(self._x[IBIAS])

    # --- life cycle --------------------------------------------------------------------

    def reset(self) -> None:
        """Forget the estimate; the next call must be :meth:`initialise`."""
        self._initialised = False
        self._stamp = math.nan
        self._delta_meas = 0.0

    def initialise(
        self,
        stamp: float,
        x: float,
        y: float,
        yaw: float,
        v: float = 0.0,
        bias: float = 0.0,
        pose_cov: object | None = None,
    ) -> None:
        """Start from a measured pose of the reference point (see ``reference_x``).

        stamp [s]; x, y [m]; yaw [rad]; v [m/s]; bias [rad]; pose_cov: optional 3x3
        covariance of (x, y, yaw), else the ``init_*_std`` values of the noise settings.
        """
        _check_finite(stamp=stamp, x=x, y=y, yaw=yaw, v=v, bias=bias)
        c, s = math.cos(yaw), math.sin(yaw)
        d = self.reference_x
        self._x = np.array([x - d * c, y - d * s, wrap_angle(yaw), v, bias], dtype=float)
        n = self.noise
        P = np.diag(
            [
                n.init_pos_std**2,
                n.init_pos_std**2,
                n.init_yaw_std**2,
                n.init_speed_std**2,
                n.init_bias_std**2,
            ]
        )
        if pose_cov is not None:
            r = _as_cov("pose_cov", pose_cov, 3)
            # CG = reference - d (cos, sin)(yaw): map the pose covariance through it
            J = np.array([[1.0, 0.0, d * s], [0.0, 1.0, -d * c], [0.0, 0.0, 1.0]])
            P[:3, :3] = J @ r @ J.T
        self._P = P
        self._stamp = float(stamp)
        self._delta_meas = 0.0
        self._initialised = True

    def _require_initialised(self) -> None:
        if not self._initialised:
            raise RuntimeError("BicycleEKF used before initialise()")

    # --- prediction --------------------------------------------------------------------

    def transition(self, dt: float, delta: float, speed: float) -> tuple[np.ndarray, np.ndarray]:
        """State transition Jacobian F and process noise Q for one prediction.

        dt [s], delta: measured road-wheel angle [rad], speed: CG speed input [m/s].
        Evaluated at the current state (before the prediction). Does not change the filter.
        """
        F, Q, _ = self._transition(dt, delta, speed)
        return F, Q

    def _transition(
        self, dt: float, delta: float, speed: float
    ) -> tuple[np.ndarray, np.ndarray, tuple[float, float, float]]:
        xs = self._x
        d_true = delta + self.params.steering_offset + xs[IBIAS]
        pose, (dx_dyaw, dy_dyaw, dx_dv, dy_dv, dyaw_dv, dx_dd, dy_dd, dyaw_dd) = (
            step_with_partials(xs[IX], xs[IY], xs[IYAW], speed, d_true, dt, self.params)
        )
        F = self._eye.copy()
        F[IX, IYAW] = dx_dyaw
        F[IY, IYAW] = dy_dyaw
        F[IX, IBIAS] = dx_dd
        F[IY, IBIAS] = dy_dd
        F[IYAW, IBIAS] = dyaw_dd
        F[IV, IV] = 0.0  # v' = speed input
        n = self.noise
        vs, vd = n.speed_std**2, n.steer_std**2
        # input Jacobian G = d state' / d (speed, delta); Q = G diag(vs, vd) G^T
        G = np.array(((dx_dv, dx_dd), (dy_dv, dy_dd), (dyaw_dv, dyaw_dd), (1.0, 0.0), (0.0, 0.0)))
        Q = (G * (vs, vd)) @ G.T
        Q[IX, IX] += n.pos_rw * dt
        Q[IY, IY] += n.pos_rw * dt
        Q[IYAW, IYAW] += n.yaw_rw * dt
        Q[IBIAS, IBIAS] += n.bias_rw * dt
        return F, Q, pose

    def predict(self, stamp: float, delta: float, speed: float) -> None:
        """Propagate to ``stamp`` [s] with the inputs held since the previous stamp.

        delta: measured bicycle road-wheel angle [rad] (offset and bias are added here);
        speed: CG speed [m/s]. A stamp equal to the filter time only records the inputs;
        an earlier stamp raises ``ValueError`` (the caller resets on time jumps).
        """
        self._require_initialised()
        _check_finite(stamp=stamp, delta=delta, speed=speed)
        limit = self.params.max_road_wheel_angle
        if abs(delta) > limit:
            raise ValueError(f"delta={delta!r} rad exceeds max_road_wheel_angle={limit} rad")
        dt = stamp - self._stamp
        if dt < 0.0:
            raise ValueError(f"stamp={stamp!r} s is earlier than the filter time {self._stamp} s")
        if dt > 0.0:
            F, Q, pose = self._transition(dt, delta, speed)
            P = F @ self._P @ F.T
            P += Q
            P += P.T
            P *= 0.5
            self._P = P
            x = self._x
            x[IX], x[IY], x[IYAW] = pose
            x[IV] = speed
            self._stamp = float(stamp)
        self._delta_meas = float(delta)

    # --- updates -----------------------------------------------------------------------

    def _update(self, residual: np.ndarray, H: np.ndarray, R: np.ndarray, name: str) -> Innovation:
        P = self._P
        PHt = P @ H.T
        S = H @ PHt + R
        S_inv = _inv_pd(S)
        if S_inv is None:
            raise ValueError(
                f"{name}: innovation covariance is not positive definite (check its covariance)"
            )
        K = PHt @ S_inv
        self._x = self._x + K @ residual
        self._x[IYAW] = wrap_angle(float(self._x[IYAW]))
        I_KH = self._eye - K @ H
        KR = K @ R
        P = I_KH @ P @ I_KH.T
        P += KR @ K.T
        P += P.T
        P *= 0.5
        self._P = P
        nis = float(residual @ S_inv @ residual)
        return Innovation(residual=residual, covariance=S, nis=nis, dof=residual.shape[0])

    def update_pose(self, x: float, y: float, yaw: float, cov: object) -> Innovation:
        """Localisation pose update: position [m] and yaw [rad] of the reference point.

        cov: 3x3 covariance of (x, y, yaw) [m^2, m rad, rad^2].
        """
        self._require_initialised()
        _check_finite(x=x, y=y, yaw=yaw)
        R = _as_cov("pose covariance", cov, 3)
        xs = self._x
        d = self.reference_x
        yaw_s = float(xs[IYAW])
        c, s = math.cos(yaw_s), math.sin(yaw_s)
        H = self._h_pose.copy()
        H[0, IYAW] = -d * s
        H[1, IYAW] = d * c
        residual = np.array(
            [x - xs[IX] - d * c, y - xs[IY] - d * s, wrap_angle(yaw - yaw_s)], dtype=float
        )
        return self._update(residual, H, R, "pose update")

    def pose_model(self) -> tuple[np.ndarray, np.ndarray]:
        """Predicted pose h(state) of the reference point and its 3x5 Jacobian H."""
        xs = self._x
        d = self.reference_x
        c, s = math.cos(xs[IYAW]), math.sin(xs[IYAW])
        h = np.array([xs[IX] + d * c, xs[IY] + d * s, xs[IYAW]])
        H = np.zeros((3, N_STATE))
        H[0, IX] = H[1, IY] = H[2, IYAW] = 1.0
        H[0, IYAW] = -d * s
        H[1, IYAW] = d * c
        return h, H

    def velocity_model(self, delta: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Predicted body velocity (vx, vy) [m/s] of the reference point and its 2x5 H.

        delta: measured road-wheel angle [rad]; default the last one given to predict.
        """
        p = self.params
        v = float(self._x[IV])
        d_true = self.steer(delta)
        lr, wb = p.cg_to_rear_axle, p.wheelbase
        tan_d = math.tan(d_true)
        ratio = lr * tan_d / wb
        beta = math.atan(ratio)
        dbeta = (lr / wb) * (1.0 + tan_d * tan_d) / (1.0 + ratio * ratio)
        cb, sb = math.cos(beta), math.sin(beta)
        arm = 1.0 + self.reference_x / lr  # lateral speed grows with yaw rate * offset
        h = np.array([v * cb, v * sb * arm])
        H = np.zeros((2, N_STATE))
        H[0, IV] = cb
        H[0, IBIAS] = -v * sb * dbeta
        H[1, IV] = sb * arm
        H[1, IBIAS] = v * cb * dbeta * arm
        return h, H

    def update_body_velocity(
        self, vx: float, vy: float, cov: object, delta: float | None = None
    ) -> Innovation:
        """Body-frame velocity update (vx, vy) [m/s] with 2x2 covariance [m^2/s^2]."""
        self._require_initialised()
        _check_finite(vx=vx, vy=vy)
        R = _as_cov("velocity covariance", cov, 2)
        h, H = self.velocity_model(delta)
        # the measured steering angle enters h directly: add its noise (dh/ddelta = dh/dbias)
        g = H[:, IBIAS]
        R = R + (self.noise.steer_std**2) * np.outer(g, g)
        return self._update(np.array([vx - h[0], vy - h[1]]), H, R, "velocity update")

    def yaw_rate_model(self, delta: float | None = None) -> tuple[float, np.ndarray]:
        """Predicted yaw rate [rad/s] = v sin(beta) / l_r and its 1x5 Jacobian H."""
        p = self.params
        v = float(self._x[IV])
        d_true = self.steer(delta)
        lr, wb = p.cg_to_rear_axle, p.wheelbase
        tan_d = math.tan(d_true)
        ratio = lr * tan_d / wb
        beta = math.atan(ratio)
        dbeta = (lr / wb) * (1.0 + tan_d * tan_d) / (1.0 + ratio * ratio)
        kappa = math.sin(beta) / lr
        H = np.zeros((1, N_STATE))
        H[0, IV] = kappa
        H[0, IBIAS] = v * math.cos(beta) * dbeta / lr
        return v * kappa, H

    def update_yaw_rate(self, rate: float, var: float, delta: float | None = None) -> Innovation:
        """IMU yaw-rate update: rate [rad/s], variance var [rad^2/s^2].

        delta: measured road-wheel angle [rad] at the IMU stamp; default the last input.
        """
        self._require_initialised()
        _check_finite(rate=rate, var=var)
        if var <= 0.0:
            raise ValueError(f"yaw-rate variance var={var!r} must be > 0")
        if delta is not None:
            _check_finite(delta=delta)
        h, H = self.yaw_rate_model(delta)
        # the measured steering angle enters h directly: add its noise (dh/ddelta = dh/dbias)
        r = var + self.noise.steer_std**2 * float(H[0, IBIAS]) ** 2
        return self._update(np.array([rate - h]), H, np.array([[r]]), "yaw-rate update")
