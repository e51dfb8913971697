"""Extended Kalman filter on the kinematic bicycle model (pure Python floats, no ROS).

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

Measurement (it returns an :class:`Innovation` with residual, covariance, NIS, dof):

* ``update_pose(x, y, yaw, cov)``: localisation pose of a point ``reference_x`` metres
  ahead of the CG along body x (``-l_r`` for a rear-axle ``base_link``); yaw wrapped.

Covariance update in Joseph form ``(I - K H) P (I - K H)^T + K R K^T`` (the same algebra
as filterpy's ``ExtendedKalmanFilter.update``; the tests check equality). Bad input raises
``ValueError`` naming it; calls before :meth:`BicycleEKF.initialise` raise ``RuntimeError``.

Hot path: the state is a tuple of 5 floats and the covariance a tuple of its 15 unique
entries (row-major upper triangle, names ``pij`` with i <= j below). Every product is
written out with the structural zeros of the Jacobians left out: F differs from the
identity in 6 entries, pose H selects (x, y, yaw) plus the two lever-arm terms of
``reference_x``. ``S^-1`` is a closed
form with Sylvester's criterion (leading minors > 0) as the positive-definite check.
numpy arrays are built only where the public API returns them.

Typical use::

    ekf = BicycleEKF(params, FilterNoise())
    ekf.initialise(stamp, x, y, yaw)
    ekf.predict(stamp, delta, speed)          # per chassis sample
    innov = ekf.update_pose(x, y, yaw, cov)   # per localisation sample
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Any

import numpy as np

from kinematic_monitor.core.geometry import wrap_angle
from kinematic_monitor.core.model import VehicleParams, step_with_partials

N_STATE = 5
IX, IY, IYAW, IV, IBIAS = range(N_STATE)

_PI = math.pi
_TWO_PI = 2.0 * math.pi
_INF = math.inf
_isfinite = math.isfinite
_cos = math.cos
_sin = math.sin
_F64 = np.dtype(np.float64)
# position of each 5x5 entry in the 15-tuple (row-major upper triangle)
_SYM5 = np.array(
    [[0, 1, 2, 3, 4], [1, 5, 6, 7, 8], [2, 6, 9, 10, 11], [3, 7, 10, 12, 13], [4, 8, 11, 13, 14]]
)
_SYM3 = np.array([[0, 1, 2], [1, 3, 4], [2, 4, 5]])
_SYM2 = np.array([[0, 1], [1, 2]])
# [Joseph] P' = A P A^T + K R K^T with A = I - K H, evaluated as P' = B + D K^T with
# B = A P and D = K R - B H^T: the same expression multiplied out by one factor of A^T
# (exact for any gain K). The rounding error of B enters P' as (error) A^T, as in the
# product form, so the form keeps its accuracy when R is tiny compared with P.


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


_new_object = object.__new__


def _innovation(residual: np.ndarray, covariance: np.ndarray, nis: float, dof: int) -> Innovation:
    """Build an :class:`Innovation` without the frozen-dataclass ``__init__`` (hot path).

    Sets the same four fields ``__init__`` sets; the result compares equal to
    ``Innovation(residual, covariance, nis, dof)``.
    """
    inn = _new_object(Innovation)
    d = inn.__dict__
    d["residual"] = residual
    d["covariance"] = covariance
    d["nis"] = nis
    d["dof"] = dof
    return inn


def _symmetric_psd_entries(a: float, b: float, c: float, d: float, e: float, f: float,
                           g: float, h: float, i: float) -> bool:
    """True for an exactly symmetric [[a, b, c], [d, e, f], [g, h, i]] with finite entries
    and a non-negative diagonal (the fast-path test of :func:`_cov3`)."""
    return (b == d and c == g and f == h and 0.0 <= a < _INF and 0.0 <= e < _INF
            and 0.0 <= i < _INF and -_INF < b < _INF and -_INF < c < _INF and -_INF < f < _INF)


def _cov3(name: str, cov: object) -> tuple[float, float, float, float, float, float]:
    """Unique entries (r00, r01, r02, r11, r12, r22) of a validated 3x3 covariance.

    Fast paths: a float64 array or nested lists/tuples of plain floats that are exactly
    symmetric with finite entries and a non-negative diagonal; anything else goes through
    :func:`_cov_flat`.
    """
    t = type(cov)
    if t is list or t is tuple:
        # nested lists of plain floats (the monitor's diagonal covariance): no array needed;
        # float(np.float64(v)) == v, so this gives the same entries as the array path
        rows: Any = cov
        if len(rows) == 3 and all(type(r) in (list, tuple) and len(r) == 3 for r in rows):
            (a, b, c), (d, e, f), (g, h, i) = rows
            if all(type(v) is float for v in (a, b, c, d, e, f, g, h, i)) and (
                    _symmetric_psd_entries(a, b, c, d, e, f, g, h, i)):
                return a, b, c, e, f, i
    elif t is np.ndarray:
        arr: Any = cov
        if arr.dtype is _F64 and arr.shape == (3, 3):
            a, b, c, d, e, f, g, h, i = arr.ravel().tolist()
            if _symmetric_psd_entries(a, b, c, d, e, f, g, h, i):
                return a, b, c, e, f, i
    a, b, c, _, e, f, _, _, i = _cov_flat(name, cov, 3)
    return a, b, c, e, f, i


def _cov_flat(name: str, cov: object, n: int) -> list[float]:
    """Validate an n x n measurement covariance (finite, symmetric, non-negative diagonal).

    Returns its n*n entries row by row as plain floats.
    """
    try:
        flat: list[float] = np.array(cov, dtype=float).reshape(n, n).ravel().tolist()
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} must be a {n}x{n} covariance matrix: {exc}") from None
    if not all(map(_isfinite, flat)):
        raise ValueError(f"{name} contains non-finite values: {_rows(flat, n)}")
    tol = 1e-9 * max(map(abs, flat))
    if n == 3:
        a, b, c, d, e, f, g, h, i = flat
        ok = (
            a >= 0.0
            and e >= 0.0
            and i >= 0.0
            and abs(b - d) <= tol
            and abs(c - g) <= tol
            and abs(f - h) <= tol
        )
    else:
        a, b, c, d = flat
        ok = a >= 0.0 and d >= 0.0 and abs(b - c) <= tol
    if not ok:
        raise ValueError(f"{name} is not a symmetric covariance matrix: {_rows(flat, n)}")
    return flat


def _rows(flat: list[float], n: int) -> list[list[float]]:
    return [flat[i * n : (i + 1) * n] for i in range(n)]


def _inv_sym3(
    a: float, b: float, c: float, e: float, f: float, i: float
) -> tuple[float, float, float, float, float, float] | None:
    """Inverse of the symmetric [[a, b, c], [b, e, f], [c, f, i]] as its 6 unique entries
    (row-major upper triangle), or None unless positive definite (Sylvester's criterion:
    all leading principal minors > 0). Cofactor closed form."""
    c00 = e * i - f * f
    c01 = c * f - b * i
    c02 = b * f - c * e
    minor2 = a * e - b * b
    det = a * c00 + b * c01 + c * c02
    if not (a > 0.0 and minor2 > 0.0 and 0.0 < det < _INF):
        return None
    r = 1.0 / det
    return c00 * r, c01 * r, c02 * r, (a * i - c * c) * r, (b * c - a * f) * r, minor2 * r


def _check_finite(**values: float) -> None:
    for name, value in values.items():
        if not math.isfinite(value):
            raise ValueError(f"{name}={value!r} is not a finite number")


def _not_initialised() -> RuntimeError:
    return RuntimeError("BicycleEKF used before initialise()")


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
        # state (x, y, yaw, v, bias) and covariance upper triangle (15 entries)
        # the state: CG x, y [m], heading [rad] in [-pi, pi), CG speed [m/s], residual
        # steering offset [rad] (added to the measured angle); read them, do not set them
        self.x = self.y = self.yaw = self.v = self.steering_bias = 0.0
        self._p: tuple[float, ...] = tuple(np.eye(N_STATE)[np.triu_indices(N_STATE)].tolist())
        self._stamp = math.nan
        self._delta_meas = 0.0
        self._initialised = False

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
        return np.array(self._state())

    @property
    def covariance(self) -> np.ndarray:
        """Copy of the 5x5 state covariance."""
        cov: np.ndarray = np.array(self._p)[_SYM5]
        return cov

    def pose_covariance(self) -> tuple[float, ...]:
        """The (x, y, yaw) block of the covariance, row-major 3x3 [m^2, m rad, rad^2]
        (the same floats as ``covariance[:3, :3]``, without building an array)."""
        p00, p01, p02, _, _, p11, p12, _, _, p22 = self._p[:10]
        return (p00, p01, p02, p01, p11, p12, p02, p12, p22)

    def _state(self) -> tuple[float, float, float, float, float]:
        return self.x, self.y, self.yaw, self.v, self.steering_bias

    @property
    def last_steer(self) -> float:
        """Last measured road-wheel angle passed to :meth:`predict` [rad]."""
        return self._delta_meas

    def steer(self, delta_measured: float | None = None) -> float:
        """True road-wheel angle [rad] = measured + params offset + estimated bias."""
        d = self._delta_meas if delta_measured is None else delta_measured
        return d + self.params.steering_offset + self.steering_bias

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
        self.x, self.y, self.yaw, self.v, self.steering_bias = (
            float(x - d * c),
            float(y - d * s),
            wrap_angle(float(yaw)),
            float(v),
            float(bias),
        )
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
            r = np.array(_cov_flat("pose_cov", pose_cov, 3)).reshape(3, 3)
            # CG = reference - d (cos, sin)(yaw): map the pose covariance through it
            J = np.array([[1.0, 0.0, d * s], [0.0, 1.0, -d * c], [0.0, 0.0, 1.0]])
            P[:3, :3] = J @ r @ J.T
        P = 0.5 * (P + P.T)
        self._p = tuple(P[np.triu_indices(N_STATE)].tolist())
        self._stamp = float(stamp)
        self._delta_meas = 0.0
        self._initialised = True

    # --- prediction --------------------------------------------------------------------

    def transition(self, dt: float, delta: float, speed: float) -> tuple[np.ndarray, np.ndarray]:
        """State transition Jacobian F and process noise Q for one prediction.

        dt [s], delta: measured road-wheel angle [rad], speed: CG speed input [m/s].
        Evaluated at the current state (before the prediction). Does not change the filter.
        """
        x, y, yaw, bias = self.x, self.y, self.yaw, self.steering_bias
        d_true = delta + self.params.steering_offset + bias
        _, (dx_dyaw, dy_dyaw, dx_dv, dy_dv, dyaw_dv, dx_dd, dy_dd, dyaw_dd) = step_with_partials(
            x, y, yaw, speed, d_true, dt, self.params
        )
        F = np.eye(N_STATE)
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
        return F, Q

    def predict(self, stamp: float, delta: float, speed: float) -> None:
        """Propagate to ``stamp`` [s] with the inputs held since the previous stamp.

        delta: measured bicycle road-wheel angle [rad] (offset and bias are added here);
        speed: CG speed [m/s]. A stamp equal to the filter time only records the inputs;
        an earlier stamp raises ``ValueError`` (the caller resets on time jumps).
        """
        if not self._initialised:
            raise _not_initialised()
        if not (_isfinite(stamp) and _isfinite(delta) and _isfinite(speed)):
            _check_finite(stamp=stamp, delta=delta, speed=speed)
        params = self.params
        limit = params.max_road_wheel_angle
        if abs(delta) > limit:
            raise ValueError(f"delta={delta!r} rad exceeds max_road_wheel_angle={limit} rad")
        dt = stamp - self._stamp
        if dt < 0.0:
            raise ValueError(f"stamp={stamp!r} s is earlier than the filter time {self._stamp} s")
        delta = float(delta)
        if dt > 0.0:
            speed = float(speed)
            x, y, yaw, bias = self.x, self.y, self.yaw, self.steering_bias
            (x, y, yaw), (fa, fb, xv, yv, wv, fc, fd, fe) = step_with_partials(
                x, y, yaw, speed, delta + params.steering_offset + bias, dt, params
            )
            n = self.noise
            vs = n.speed_std * n.speed_std
            vd = n.steer_std * n.steer_std
            qp = n.pos_rw * dt
            qw = n.yaw_rw * dt
            qb = n.bias_rw * dt
            self._p = _propagate(self._p, fa, fb, fc, fd, fe, xv, yv, wv, vs, vd, qp, qw, qb)
            self.x, self.y, self.yaw, self.v = x, y, yaw, speed
            self._stamp = float(stamp)
        self._delta_meas = delta

    # --- updates -----------------------------------------------------------------------

    def update_pose(self, x: float, y: float, yaw: float, cov: object) -> Innovation:
        """Localisation pose update: position [m] and yaw [rad] of the reference point.

        cov: 3x3 covariance of (x, y, yaw) [m^2, m rad, rad^2].
        """
        if not self._initialised:
            raise _not_initialised()
        if not (_isfinite(x) and _isfinite(y) and _isfinite(yaw)):
            _check_finite(x=x, y=y, yaw=yaw)
        r00, r01, r02, r11, r12, r22 = _cov3("pose covariance", cov)
        e0, e1, e2, s00, s01, s02, s11, s12, s22, nis = self._pose_update(
            x, y, yaw, r00, r01, r02, r11, r12, r22)
        return _innovation(
            np.array((e0, e1, e2)), np.array((s00, s01, s02, s11, s12, s22))[_SYM3], nis, 3
        )

    def update_pose_diag(self, x: float, y: float, yaw: float, var_xy: float,
                         var_yaw: float) -> float:
        """:meth:`update_pose` with cov = diag(var_xy, var_xy, var_yaw) [m^2, m^2, rad^2];
        returns the NIS only (3 degrees of freedom), the same float as ``update_pose``."""
        if not self._initialised:
            raise _not_initialised()
        if not (_isfinite(x) and _isfinite(y) and _isfinite(yaw)):
            _check_finite(x=x, y=y, yaw=yaw)
        if not (0.0 <= var_xy < _INF and 0.0 <= var_yaw < _INF):  # the full check raises
            _cov3("pose covariance", [[var_xy, 0.0, 0.0], [0.0, var_xy, 0.0],
                                      [0.0, 0.0, var_yaw]])
        return self._pose_update(x, y, yaw, var_xy, 0.0, 0.0, var_xy, 0.0, var_yaw)[9]

    def _pose_update(self, x: float, y: float, yaw: float, r00: float, r01: float,
                     r02: float, r11: float, r12: float, r22: float) -> tuple[float, ...]:
        """The pose update of validated inputs: (e0, e1, e2, s00, s01, s02, s11, s12, s22,
        nis) (innovation, unique entries of its covariance, NIS)."""
        sx, sy, syaw, sv, sb = self._state()
        d = self.reference_x
        c, s = _cos(syaw), _sin(syaw)
        # H = [[1, 0, ha, 0, 0], [0, 1, hb, 0, 0], [0, 0, 1, 0, 0]]
        ha, hb = -d * s, d * c
        e0 = float(x) - sx - d * c
        e1 = float(y) - sy - d * s
        e2 = (float(yaw) - syaw + _PI) % _TWO_PI - _PI
        m, (s00, s01, s02, s11, s12, s22) = _pose_innovation_covariance(
            self._p, ha, hb, r00, r01, r02, r11, r12, r22)
        inv = _inv_sym3(s00, s01, s02, s11, s12, s22)
        if inv is None:
            raise ValueError(
                "pose update: innovation covariance is not positive definite "
                "(check its covariance)"
            )
        si00, si01, si02, si11, si12, si22 = inv
        # K = P H^T S^-1 (kij), A = I - K H (aij; the rest of A is 0 or -kij),
        # B = A P (bij), D = K R - B H^T (dij), P' = B + D K^T (nij) [Joseph]
        p = self._p
        k = _pose_gain(m, (p[2], p[6], p[9], p[10], p[11]), inv)
        self._p = _joseph_pose(self._p, k, ha, hb, (r00, r01, r02, r11, r12, r22))
        k00, k01, k02, k10, k11, k12, k20, k21, k22, k30, k31, k32, k40, k41, k42 = k
        self.x, self.y, self.yaw, self.v, self.steering_bias = (
            sx + k00 * e0 + k01 * e1 + k02 * e2,
            sy + k10 * e0 + k11 * e1 + k12 * e2,
            (syaw + k20 * e0 + k21 * e1 + k22 * e2 + _PI) % _TWO_PI - _PI,
            sv + k30 * e0 + k31 * e1 + k32 * e2,
            sb + k40 * e0 + k41 * e1 + k42 * e2,
        )
        nis = (
            si00 * e0 * e0
            + si11 * e1 * e1
            + si22 * e2 * e2
            + 2.0 * (si01 * e0 * e1 + si02 * e0 * e2 + si12 * e1 * e2)
        )
        return e0, e1, e2, s00, s01, s02, s11, s12, s22, nis


def _pose_innovation_covariance(p: tuple[float, ...], ha: float, hb: float, r00: float,
                                r01: float, r02: float, r11: float, r12: float, r22: float
                                ) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """(P H^T as m00, m01, m10, ..., m41; the unique entries of S = H P H^T + R) of the pose
    update, H = [[1, 0, ha, 0, 0], [0, 1, hb, 0, 0], [0, 0, 1, 0, 0]]."""
    p00, p01, p02, p03, p04, p11, p12, p13, p14, p22, p23, p24, p33, p34, p44 = p
    m00 = p00 + p02 * ha
    m01 = p01 + p02 * hb
    m10 = p01 + p12 * ha
    m11 = p11 + p12 * hb
    m20 = p02 + p22 * ha
    m21 = p12 + p22 * hb
    m30 = p03 + p23 * ha
    m31 = p13 + p23 * hb
    m40 = p04 + p24 * ha
    m41 = p14 + p24 * hb
    return (m00, m01, m10, m11, m20, m21, m30, m31, m40, m41), (
        m00 + ha * m20 + r00, m01 + ha * m21 + r01, p02 + ha * p22 + r02,
        m11 + hb * m21 + r11, p12 + hb * p22 + r12, p22 + r22)


def _pose_gain(m: tuple[float, ...], p: tuple[float, ...], si: tuple[float, ...]
               ) -> tuple[float, ...]:
    """Gain K = P H^T S^-1 of the pose update (15 entries kij, row-major 5x3)."""
    m00, m01, m10, m11, m20, m21, m30, m31, m40, m41 = m
    p02, p12, p22, p23, p24 = p
    si00, si01, si02, si11, si12, si22 = si
    k00 = m00 * si00 + m01 * si01 + p02 * si02
    k01 = m00 * si01 + m01 * si11 + p02 * si12
    k02 = m00 * si02 + m01 * si12 + p02 * si22
    k10 = m10 * si00 + m11 * si01 + p12 * si02
    k11 = m10 * si01 + m11 * si11 + p12 * si12
    k12 = m10 * si02 + m11 * si12 + p12 * si22
    k20 = m20 * si00 + m21 * si01 + p22 * si02
    k21 = m20 * si01 + m21 * si11 + p22 * si12
    k22 = m20 * si02 + m21 * si12 + p22 * si22
    k30 = m30 * si00 + m31 * si01 + p23 * si02
    k31 = m30 * si01 + m31 * si11 + p23 * si12
    k32 = m30 * si02 + m31 * si12 + p23 * si22
    k40 = m40 * si00 + m41 * si01 + p24 * si02
    k41 = m40 * si01 + m41 * si11 + p24 * si12
    k42 = m40 * si02 + m41 * si12 + p24 * si22
    return (k00, k01, k02, k10, k11, k12, k20, k21, k22, k30, k31, k32, k40, k41, k42)


def _joseph_pose_b(p: tuple[float, ...], k: tuple[float, ...], ha: float, hb: float
                   ) -> tuple[float, ...]:
    """B = A P with A = I - K H of the pose update (entries bij)."""
    p00, p01, p02, p03, p04, p11, p12, p13, p14, p22, p23, p24, p33, p34, p44 = p
    k00, k01, k02, k10, k11, k12, k20, k21, k22, k30, k31, k32, k40, k41, k42 = k
    a00 = 1.0 - k00
    a02 = k00 * ha + k01 * hb + k02
    a11 = 1.0 - k11
    a12 = k10 * ha + k11 * hb + k12
    a22 = 1.0 - k20 * ha - k21 * hb - k22
    a32 = k30 * ha + k31 * hb + k32
    a42 = k40 * ha + k41 * hb + k42
    b00 = a00 * p00 - k01 * p01 - a02 * p02
    b01 = a00 * p01 - k01 * p11 - a02 * p12
    b02 = a00 * p02 - k01 * p12 - a02 * p22
    b03 = a00 * p03 - k01 * p13 - a02 * p23
    b04 = a00 * p04 - k01 * p14 - a02 * p24
    b10 = a11 * p01 - k10 * p00 - a12 * p02
    b11 = a11 * p11 - k10 * p01 - a12 * p12
    b12 = a11 * p12 - k10 * p02 - a12 * p22
    b13 = a11 * p13 - k10 * p03 - a12 * p23
    b14 = a11 * p14 - k10 * p04 - a12 * p24
    b20 = a22 * p02 - k20 * p00 - k21 * p01
    b21 = a22 * p12 - k20 * p01 - k21 * p11
    b22 = a22 * p22 - k20 * p02 - k21 * p12
    b23 = a22 * p23 - k20 * p03 - k21 * p13
    b24 = a22 * p24 - k20 * p04 - k21 * p14
    b30 = p03 - k30 * p00 - k31 * p01 - a32 * p02
    b31 = p13 - k30 * p01 - k31 * p11 - a32 * p12
    b32 = p23 - k30 * p02 - k31 * p12 - a32 * p22
    b33 = p33 - k30 * p03 - k31 * p13 - a32 * p23
    b34 = p34 - k30 * p04 - k31 * p14 - a32 * p24
    b40 = p04 - k40 * p00 - k41 * p01 - a42 * p02
    b41 = p14 - k40 * p01 - k41 * p11 - a42 * p12
    b42 = p24 - k40 * p02 - k41 * p12 - a42 * p22
    b44 = p44 - k40 * p04 - k41 * p14 - a42 * p24
    return (b00, b01, b02, b03, b04, b10, b11, b12, b13, b14, b20, b21, b22, b23, b24,
            b30, b31, b32, b33, b34, b40, b41, b42, b44)


def _joseph_pose(p: tuple[float, ...], k: tuple[float, ...], ha: float, hb: float,
                 r: tuple[float, ...]) -> tuple[float, ...]:
    """P' = B + D K^T with D = K R - B H^T [Joseph]: the updated covariance (15 entries).

    Row i of D is (K_i R[:, 0] - B_i0 - B_i2 ha, K_i R[:, 1] - B_i1 - B_i2 hb,
    K_i R[:, 2] - B_i2); P'_ij = B_ij + D_i . K_j for j >= i (the same sums, in the same
    order, as written out entry by entry).
    """
    b = _joseph_pose_b(p, k, ha, hb)
    # the rows of B (row 4 lacks B_43, never used: only j >= i is formed)
    rows = (b[0:5], b[5:10], b[10:15], b[15:20], (b[20], b[21], b[22], math.nan, b[23]))
    r00, r01, r02, r11, r12, r22 = r
    d: list[tuple[float, float, float]] = []
    for i in range(5):
        ka, kb, kc = k[3 * i], k[3 * i + 1], k[3 * i + 2]
        bi0, bi1, bi2 = rows[i][0], rows[i][1], rows[i][2]
        d.append((ka * r00 + kb * r01 + kc * r02 - bi0 - bi2 * ha,
                  ka * r01 + kb * r11 + kc * r12 - bi1 - bi2 * hb,
                  ka * r02 + kb * r12 + kc * r22 - bi2))
    out: list[float] = []
    for i in range(5):
        da, db, dc = d[i]
        row = rows[i]
        for j in range(i, 5):
            out.append(row[j] + da * k[3 * j] + db * k[3 * j + 1] + dc * k[3 * j + 2])
    return tuple(out)


def _propagate(p: tuple[float, ...], fa: float, fb: float, fc: float, fd: float, fe: float,
               xv: float, yv: float, wv: float, vs: float, vd: float, qp: float, qw: float,
               qb: float) -> tuple[float, ...]:
    """P' = F P F^T + G diag(vs, vd) G^T + random walks (15 unique entries) of one prediction;
    the Jacobian entries are those of :meth:`BicycleEKF.predict`."""
    p00, p01, p02, p03, p04, p11, p12, p13, p14, p22, p23, p24, p33, p34, p44 = p
    # F = I except F[0,2]=fa, F[1,2]=fb, F[0,4]=fc, F[1,4]=fd, F[2,4]=fe, F[3,3]=0;
    # rij = (F P)[i, j]; G = [[xv, fc], [yv, fd], [wv, fe], [1, 0], [0, 0]],
    # gij = (G diag(vs, vd))[i, j]; nij = (F P F^T + G diag(vs, vd) G^T + rw)[i, j]
    r00 = p00 + fa * p02 + fc * p04
    r01 = p01 + fa * p12 + fc * p14
    r02 = p02 + fa * p22 + fc * p24
    r04 = p04 + fa * p24 + fc * p44
    r11 = p11 + fb * p12 + fd * p14
    r12 = p12 + fb * p22 + fd * p24
    r14 = p14 + fb * p24 + fd * p44
    r22 = p22 + fe * p24
    r24 = p24 + fe * p44
    g00 = xv * vs
    g01 = fc * vd
    g10 = yv * vs
    g11 = fd * vd
    g20 = wv * vs
    g21 = fe * vd
    n00 = r00 + r02 * fa + r04 * fc + g00 * xv + g01 * fc + qp
    n01 = r01 + r02 * fb + r04 * fd + g00 * yv + g01 * fd
    n02 = r02 + r04 * fe + g00 * wv + g01 * fe
    n03 = g00
    n04 = r04
    n11 = r11 + r12 * fb + r14 * fd + g10 * yv + g11 * fd + qp
    n12 = r12 + r14 * fe + g10 * wv + g11 * fe
    n13 = g10
    n14 = r14
    n22 = r22 + r24 * fe + g20 * wv + g21 * fe + qw
    n23 = g20
    n24 = r24
    n33 = vs
    n34 = 0.0
    n44 = p44 + qb
    return (n00, n01, n02, n03, n04, n11, n12, n13, n14, n22, n23, n24, n33, n34, n44)
