"""Estimate the vehicle's calibration from ordinary drives (pure core, no ROS import).

Input: time-ordered samples (:class:`ChassisSample`, :class:`LocalizationSample`,
:class:`ImuSample`) from one or more drives, and the current parameters. Output: a
:class:`CalibrationResult` with each parameter's estimate, its standard error from the
fit's covariance and from a block bootstrap over segments, and whether the data make it
observable. Units and frames follow REP 103 (SI, radians, body x forward, y left, z up,
counter-clockwise positive).

Alignment
    The localisation stamps are the time base. Chassis and IMU values are linearly
    interpolated to them; a localisation stamp whose neighbouring chassis samples are more
    than ``max_gap`` apart is unusable. The localisation twist is taken at the CG
    (``inputs.localization.reference_x`` metres ahead of it when that parameter exists):
    ``vx`` is the same at every point of the rigid body, ``vy_cg = vy - reference_x * r``.
    Without a twist, velocity comes from differenced positions; without a yaw rate, from
    the IMU, else from differenced yaw.

Selection (the kinematic assumption holds): speed ``vx >= min_speed``; steady-state
    lateral acceleration ``a_y = vx * r`` within ``max_lateral_accel`` (``k_max_lateral_accel``
    for the understeer fit); longitudinal acceleration, steering rate and yaw acceleration
    small (steady inputs); no wheel slip (rear-axle wheel speed within ``max_wheel_slip`` of
    the drive's median ratio to ground speed); no localisation jump (a pose step not
    explained by the twist, +-1 s around it); outside caller-given ``exclude`` windows (e.g.
    the events of a replay). Usable runs shorter than ``min_run`` are dropped; runs are cut
    into segments of at most ``segment_length`` seconds for the bootstrap.

Measurement equations (rear-axle form, Rajamani 2012, kinematic model; the rear-axle centre
moves along the heading at ``vx`` with path curvature ``kappa = r / vx``):

* steering, road-wheel angles: ``delta_m = atan(L * kappa) + K * a_y + T * dr/dt - offset``
  where ``delta_m`` is the measured bicycle angle (each measured wheel angle mapped to the
  bicycle angle through Ackermann geometry, ``tan d = tan d_i / (1 +- (w / 2L) tan d_i)``,
  the two averaged) and ``delta_true = delta_m + offset`` as in
  :mod:`kinematic_monitor.core.model`.
  ``K * a_y`` is the steady-state understeer term of Gillespie 1992, ch. 6
  (``delta = L/R + K a_y``), fitted as a nuisance so that cornering does not bias the
  offset. ``T * dr/dt`` is the yaw-lag term, also a nuisance: in the linear single-track
  model (Rajamani 2012, dynamic bicycle model; derivation ours) with the lateral velocity
  quasi-steady, the axle forces that also turn the body (``I_z dr/dt``) need
  ``delta = L r / v + K a_y + (I_z / L)(1/C_f + 1/C_r) dr/dt``; the selected samples are
  steady only within ``max_yaw_accel``, and a drive that enters its bends more gently than
  it leaves them leaves a mean ``dr/dt`` that, unmodelled, biased the offset (0.0025 deg on
  the simulated gentle loop, twice the stated standard error). ``L`` is fitted too
  (linearised, Gauss-Newton) when the data make it observable.
* steering ratio: the converters hand over road-wheel angles only; a steering-wheel angle
  (JointState steer joints when ``vehicle.steering_ratio != 1``, or a single-value input of
  kind 'steering_wheel') has been divided by the file's ratio. When the steering is such an
  angle (:func:`steering_wheel_input`), a wrong ratio scales every angle by
  ``f = true ratio / file ratio``: ``delta_m = f (atan(L kappa) + K a_y + T dr/dt -
  offset)``, linear in ``(f, f K, f T, -f offset)``; the reported ratio is
  ``vehicle.steering_ratio * f``. Only ``f * L`` is observable from yaw rate, so ``L`` is
  kept. Nothing here divides by the ratio again.
* wheel speed, rear axle: ``vx = s_r * R * (w_rl + w_rr) / 2`` (least squares through zero);
  front axle: the wheel centres' ground speeds ``|(vx -+ r w/2, vy_cg + r l_f)|`` (the
  Ackermann ICR geometry without using the steering angle) ``= s_f * R * w_f``.
  ``vehicle.wheel_speed_scale`` is written from the rear axle (the axle the monitor uses).
* l_r: the rear axle does not slide sideways, ``vy_cg = l_r * r``; the rear tyres' slip
  angle adds ``-c * a_y * vx`` (fitted as a nuisance).
* understeer gradient K from steady-state cornering (ISO 4138 steady-state circular test,
  constant radius or slow ramp): ``delta_m + offset - atan(L kappa) = K a_y + c`` on the
  steady samples up to ``k_max_lateral_accel``.

Uncertainty: ``se_fit`` from ``sigma^2 (J^T J)^-1`` with ``sigma^2`` the residual variance
times the Newey-West long-run factor (Bartlett kernel, ``3 * fit_smooth_time`` of lags);
``se_boot`` from a seeded block bootstrap over segments of ``segment_length`` (drawn with
replacement). The reported ``uncertainty`` is the larger. Both are built from the
residuals, so model error that stays in them (tyre transients, load transfer, the
Magic-Formula curvature beyond ``K a_y``) counts as error, as if it were random between
drives; model error that is the same in every sample is a bias no residual shows, which is
why the systematic part (understeer, yaw lag) is in the equations instead. Checked by
``bench/calibration_coverage.py`` (20 seeds of a 5-minute simulated gentle drive with the
dynamic simulator: the 95 % intervals cover the injected offset and scale).
A parameter is *not observable* when its standard error exceeds its resolution, its
correlation with another fitted parameter exceeds ``max_correlation`` or the column-scaled
design's condition number exceeds ``max_condition``; it keeps its input value and the
reason is reported.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample

GRAVITY = 9.80665  # [m/s^2] standard gravity (ISO 80000-3), for deg/g


class CalibrationError(ValueError):
    """The data cannot give a calibration (too little usable driving, missing inputs)."""


@dataclass(frozen=True)
class SelectionRules:
    """Which samples count as kinematic driving. Defaults: common practice, no source."""

    min_speed: float = 3.0  # [m/s]
    max_lateral_accel: float = 2.0  # [m/s^2] well inside |a_y| <= 0.5 mu g (Polack 2017)
    k_max_lateral_accel: float = 3.0  # [m/s^2] upper end of the understeer fit (linear range)
    max_long_accel: float = 1.0  # [m/s^2]
    max_steer_rate: float = 0.05  # [rad/s] road-wheel angle rate (steady inputs)
    max_yaw_accel: float = 0.1  # [rad/s^2]
    max_wheel_slip: float = 0.03  # [-] rear wheel/ground speed ratio off the drive's median
    max_position_jump: float = 0.3  # [m] pose step not explained by the twist
    max_yaw_jump: float = 0.05  # [rad]
    max_gap: float = 0.2  # [s] largest gap between chassis samples to interpolate over
    smooth_time: float = 0.2  # [s] moving-average window before differentiating
    fit_smooth_time: float = 0.5  # [s] moving-average window of the fitted signals
    min_run: float = 1.0  # [s] shorter usable runs are dropped
    segment_length: float = 5.0  # [s] bootstrap block length
    min_usable: float = 60.0  # [s] least usable driving for a calibration
    min_k_spread: float = 0.5  # [m/s^2] std. dev. of a_y needed to fit K

    def __post_init__(self) -> None:
        for name, value in vars(self).items():
            if not (isinstance(value, int | float) and math.isfinite(value) and value > 0.0):
                raise ValueError(f"selection rule {name}={value!r} must be a positive number")


@dataclass(frozen=True)
class Estimate:
    """One calibrated quantity. ``value`` is the input value when not observable."""

    name: str  # parameter name (dotted, as in the parameter file) or a report-only name
    unit: str
    prior: float  # the input value
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
    """Estimates, the data used and residuals before/after (see module docstring)."""

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

    def parameter_updates(self) -> dict[str, float]:
        """Parameter-file values to write: observable estimates of schema parameters."""
        out: dict[str, float] = {}
        for e in self.estimates.values():
            if e.name.startswith("vehicle.") and e.observable and math.isfinite(e.value):
                out[e.name] = float(e.value)
        return out


# ---------------------------------------------------------------------------------------
# Parameters
# ---------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Vehicle:
    wheelbase: float
    cg_to_rear_axle: float
    wheel_radius: float
    track_width: float
    steering_offset: float
    wheel_speed_scale: float
    steering_ratio: float
    max_road_wheel_angle: float
    reference_x: float
    understeer_gradient: float
    steering_wheel: bool  # steering read as a steering-wheel angle (see steering_wheel_input)


def steering_wheel_input(config: Any) -> bool:
    """True when the steering is read as a steering-wheel angle and divided by the ratio.

    The rule (params.py, ``vehicle.steering_ratio``): a JointState steer joint is a
    steering-wheel angle whenever ``vehicle.steering_ratio != 1``; a single-value steering
    input (``inputs.steering.topic``) is one when ``inputs.steering.kind`` is
    'steering_wheel'. The converters divide by the ratio, so every sample holds road-wheel
    angles.
    """

    def get(name: str, default: Any) -> Any:
        try:
            return config[name] if isinstance(config, Mapping) else config.values[name]
        except KeyError:
            return default

    if str(get("inputs.steering.topic", "") or ""):
        return str(get("inputs.steering.kind", "road_wheel")) == "steering_wheel"
    return float(get("vehicle.steering_ratio", 1.0)) != 1.0


def _vehicle(config: Any) -> _Vehicle:
    """Vehicle values from a MonitorConfig (``params.validate``) or a flat dotted mapping."""

    def get(name: str, default: float | None = None) -> float:
        try:
            if isinstance(config, Mapping):
                value = config[name]
            else:
                value = config.values[name]
        except KeyError:
            if default is None:
                raise CalibrationError(f"parameter '{name}' is required") from None
            return default
        return float(value)

    return _Vehicle(
        wheelbase=get("vehicle.wheelbase"),
        cg_to_rear_axle=get("vehicle.cg_to_rear_axle"),
        wheel_radius=get("vehicle.wheel_radius"),
        track_width=get("vehicle.track_width"),
        steering_offset=get("vehicle.steering_offset", 0.0),
        wheel_speed_scale=get("vehicle.wheel_speed_scale", 1.0),
        steering_ratio=get("vehicle.steering_ratio", 1.0),
        max_road_wheel_angle=get("vehicle.max_road_wheel_angle", 0.7),
        reference_x=get("inputs.localization.reference_x", 0.0),
        understeer_gradient=get("vehicle.understeer_gradient", 0.0),
        steering_wheel=steering_wheel_input(config),
    )


# ---------------------------------------------------------------------------------------
# Alignment
# ---------------------------------------------------------------------------------------
@dataclass
class _Data:
    """Aligned arrays on the localisation stamps of one or more drives."""

    t: np.ndarray
    source: np.ndarray  # drive index
    vx: np.ndarray
    vy: np.ndarray  # at the CG
    r: np.ndarray  # yaw rate
    steer: np.ndarray  # measured bicycle angle (or steering-wheel angle)
    w_front: np.ndarray  # mean front wheel angular speed [rad/s]
    w_rear: np.ndarray
    valid: np.ndarray  # aligned (chassis present)
    jump: np.ndarray  # localisation jump nearby
    ax: np.ndarray
    steer_rate: np.ndarray
    yaw_accel: np.ndarray
    dt: np.ndarray  # time each sample stands for [s]
    yaw_rate_source: str


def _bicycle_angle(dl: np.ndarray, dr: np.ndarray, v: _Vehicle) -> np.ndarray:
    """Mean of the bicycle angles implied by each measured road-wheel angle (Ackermann)."""
    q = 0.5 * v.track_width / v.wheelbase
    with np.errstate(invalid="ignore", divide="ignore"):
        tl, tr = np.tan(dl), np.tan(dr)
        a = np.arctan(tl / (1.0 + q * tl))
        b = np.arctan(tr / (1.0 - q * tr))
    return 0.5 * (a + b)


def _smooth(x: np.ndarray, n: int) -> np.ndarray:
    if n <= 1 or len(x) < n:
        return x.copy()
    kernel = np.ones(n) / n
    pad = n // 2
    xp = np.concatenate([np.full(pad, x[0]), x, np.full(n - 1 - pad, x[-1])])
    return np.convolve(xp, kernel, mode="valid")


def _smooth_nan(x: np.ndarray, n: int) -> np.ndarray:
    """Centred moving average over n samples ignoring NaN (NaN stays NaN)."""
    if n <= 1 or len(x) < n:
        return x.copy()
    ok = np.isfinite(x)
    num = _smooth(np.where(ok, x, 0.0), n)
    den = _smooth(ok.astype(float), n)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    out[~ok] = np.nan
    return out


def _derivative(t: np.ndarray, x: np.ndarray, n: int) -> np.ndarray:
    if len(t) < 2:
        return np.zeros_like(x)
    return np.gradient(_smooth(x, n), t)


def _interp_with_gap(ts: np.ndarray, tc: np.ndarray, xc: np.ndarray,
                     max_gap: float) -> tuple[np.ndarray, np.ndarray]:
    """Interpolate (tc, xc) at ts; ok where neighbours are within max_gap and finite."""
    if len(tc) == 0:
        return np.full(len(ts), np.nan), np.zeros(len(ts), bool)
    good = np.isfinite(xc)
    tc, xc = tc[good], xc[good]
    if len(tc) == 0:
        return np.full(len(ts), np.nan), np.zeros(len(ts), bool)
    i = np.searchsorted(tc, ts)
    lo = np.clip(i - 1, 0, len(tc) - 1)
    hi = np.clip(i, 0, len(tc) - 1)
    ok = (i > 0) & (i < len(tc)) & ((tc[hi] - tc[lo]) <= max_gap)
    exact = (i < len(tc)) & (tc[hi] == ts)
    ok |= exact
    return np.interp(ts, tc, xc), ok


def _align(samples: Iterable[Any], v: _Vehicle, rules: SelectionRules,
           source: int) -> _Data | None:
    ch: list[tuple[float, float, float, float, float, float]] = []
    loc: list[tuple[float, float, float, float, float, float, float]] = []
    imu: list[tuple[float, float, float]] = []
    for s in samples:
        if isinstance(s, ChassisSample):
            ch.append((s.stamp, s.steer, s.steer_left, s.steer_right,
                       0.5 * (s.wheel_front_left + s.wheel_front_right),
                       0.5 * (s.wheel_rear_left + s.wheel_rear_right)))
        elif isinstance(s, LocalizationSample):
            loc.append((s.stamp, s.x, s.y, s.yaw, s.vx, s.vy, s.yaw_rate))
        elif isinstance(s, ImuSample):
            imu.append((s.stamp, s.yaw_rate, s.ax))
    if not loc or not ch:
        return None
    L = np.array(loc, dtype=float)
    C = np.array(ch, dtype=float)
    order = np.argsort(L[:, 0], kind="stable")
    L = L[order]
    C = C[np.argsort(C[:, 0], kind="stable")]
    # measured bicycle angle: given directly, else from the left/right road-wheel pair
    # (the converters have divided steering-wheel angles by the ratio already)
    pair = _bicycle_angle(C[:, 2], C[:, 3], v)
    C = np.column_stack([C[:, 0], np.where(np.isfinite(C[:, 1]), C[:, 1], pair),
                         C[:, 4], C[:, 5]])
    keep = np.concatenate([[True], np.diff(L[:, 0]) > 0.0])
    L = L[keep]
    t = L[:, 0]
    n = len(t)
    if n < 3:
        return None
    dt_med = float(np.median(np.diff(t)))
    nsm = max(int(round(rules.smooth_time / max(dt_med, 1e-6))), 1)
    x, y, yaw = L[:, 1], L[:, 2], np.unwrap(L[:, 3])
    # velocities: twist if given, else differenced positions rotated into the body frame
    vx, vy = L[:, 4].copy(), L[:, 5].copy()
    if not np.all(np.isfinite(vx)):
        gx, gy = np.gradient(x, t), np.gradient(y, t)
        c, s_ = np.cos(yaw), np.sin(yaw)
        bad = ~np.isfinite(vx)
        vx[bad] = (c * gx + s_ * gy)[bad]
        bad = ~np.isfinite(vy)
        vy[bad] = (-s_ * gx + c * gy)[bad]
    r = L[:, 6].copy()
    src = "localisation twist"
    I = np.array(imu, dtype=float) if imu else np.zeros((0, 3))
    if not np.all(np.isfinite(r)):
        bad = ~np.isfinite(r)
        if len(I):
            ri, ok = _interp_with_gap(t, I[:, 0], I[:, 1], rules.max_gap)
            r[bad & ok] = ri[bad & ok]
            src = "IMU"
        bad = ~np.isfinite(r)
        if np.any(bad):
            r[bad] = np.gradient(yaw, t)[bad]
            src = "differenced localisation yaw" if src != "IMU" else "IMU / differenced yaw"
    vy_cg = vy - v.reference_x * r
    steer, ok_s = _interp_with_gap(t, C[:, 0], C[:, 1], rules.max_gap)
    wf, ok_f = _interp_with_gap(t, C[:, 0], C[:, 2], rules.max_gap)
    wr, ok_r = _interp_with_gap(t, C[:, 0], C[:, 3], rules.max_gap)
    valid = ok_s & ok_r & np.isfinite(vx) & np.isfinite(r)
    if not np.any(ok_f):
        wf = np.full(n, np.nan)
    else:
        wf[~ok_f] = np.nan
    # localisation jumps: pose step against the twist-integrated step
    dtt = np.diff(t)
    mid_yaw = 0.5 * (yaw[1:] + yaw[:-1])
    vxm, vym = 0.5 * (vx[1:] + vx[:-1]), 0.5 * (vy[1:] + vy[:-1])
    px = np.cos(mid_yaw) * vxm - np.sin(mid_yaw) * vym
    py = np.sin(mid_yaw) * vxm + np.cos(mid_yaw) * vym
    err_p = np.hypot(np.diff(x) - px * dtt, np.diff(y) - py * dtt)
    err_y = np.abs(np.diff(yaw) - 0.5 * (r[1:] + r[:-1]) * dtt)
    big = (err_p > rules.max_position_jump) | (err_y > rules.max_yaw_jump) \
        | (dtt > rules.max_gap)
    jump = np.zeros(n, bool)
    for k in np.flatnonzero(big):
        jump[(t >= t[k] - 1.0) & (t <= t[k + 1] + 1.0)] = True
    if len(I) and np.all(np.isfinite(I[:, 2])):
        ax, ok_a = _interp_with_gap(t, I[:, 0], I[:, 2], rules.max_gap)
        ax = np.where(ok_a, _smooth(ax, nsm), _derivative(t, vx, nsm))
    else:
        ax = _derivative(t, vx, nsm)
    steer_for_rate = steer
    # low-pass the fitted signals: noise in a regressor (yaw rate in kappa) biases a least
    # squares slope towards zero by var(noise)/var(signal); averaging over fit_smooth_time
    # shrinks that ratio by the number of samples averaged
    nfit = max(int(round(rules.fit_smooth_time / max(dt_med, 1e-6))), 1)
    vx, vy_cg, r = _smooth_nan(vx, nfit), _smooth_nan(vy_cg, nfit), _smooth_nan(r, nfit)
    steer, wf, wr = _smooth_nan(steer, nfit), _smooth_nan(wf, nfit), _smooth_nan(wr, nfit)
    dt_each = np.minimum(np.concatenate([dtt, [dt_med]]), rules.max_gap)
    return _Data(
        t=t, source=np.full(n, source), vx=vx, vy=vy_cg, r=r, steer=steer, w_front=wf,
        w_rear=wr, valid=valid, jump=jump, ax=ax,
        steer_rate=_derivative(t, np.nan_to_num(steer_for_rate), nsm),
        yaw_accel=_derivative(t, r, nsm), dt=dt_each, yaw_rate_source=src,
    )


def _concat(parts: list[_Data]) -> _Data:
    def cat(name: str) -> np.ndarray:
        return np.concatenate([getattr(p, name) for p in parts])

    names = ("t", "source", "vx", "vy", "r", "steer", "w_front", "w_rear", "valid", "jump",
             "ax", "steer_rate", "yaw_accel", "dt")
    srcs = sorted({p.yaw_rate_source for p in parts})
    return _Data(**{n: cat(n) for n in names}, yaw_rate_source=", ".join(srcs))  # type: ignore[arg-type]


# ---------------------------------------------------------------------------------------
# Selection
# ---------------------------------------------------------------------------------------
def _select(d: _Data, v: _Vehicle, rules: SelectionRules, max_ay: float,
            exclude: Sequence[tuple[float, float]],
            reasons: dict[str, float] | None) -> np.ndarray:
    ay = d.vx * d.r
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = d.vx / (v.wheel_radius * d.w_rear)
    base = d.valid & (d.vx >= rules.min_speed)
    med = float(np.nanmedian(ratio[base])) if np.any(base) else math.nan
    tests: list[tuple[str, np.ndarray]] = [
        ("no chassis data", ~d.valid),
        ("below minimum speed", ~(d.vx >= rules.min_speed)),
        ("lateral acceleration", ~(np.abs(ay) <= max_ay)),
        ("longitudinal acceleration", ~(np.abs(d.ax) <= rules.max_long_accel)),
        ("steering not steady", ~(np.abs(d.steer_rate) <= rules.max_steer_rate)),
        ("yaw rate not steady", ~(np.abs(d.yaw_accel) <= rules.max_yaw_accel)),
        ("wheel slip", ~(np.abs(ratio / med - 1.0) <= rules.max_wheel_slip)
         if math.isfinite(med) else np.zeros(len(ay), bool)),
        ("localisation jump", d.jump),
        ("steering beyond max_road_wheel_angle",
         ~(np.abs(d.steer) <= v.max_road_wheel_angle)),
    ]
    ex = np.zeros(len(d.t), bool)
    for a, b in exclude:
        ex |= (d.t >= a) & (d.t <= b)
    tests.append(("excluded window (events)", ex))
    sel = np.ones(len(d.t), bool)
    for name, bad in tests:
        if reasons is not None:
            # attribute each rejected sample to the first rule it fails
            reasons[name] = float(np.sum(d.dt[sel & bad]))
        sel &= ~bad
    return sel


def _segments(d: _Data, sel: np.ndarray, rules: SelectionRules) -> np.ndarray:
    """Segment id per sample (-1 = unused): runs >= min_run cut into segment_length blocks."""
    seg = np.full(len(d.t), -1)
    n = len(d.t)
    k = 0
    next_id = 0
    while k < n:
        if not sel[k]:
            k += 1
            continue
        j = k
        while j + 1 < n and sel[j + 1] and d.source[j + 1] == d.source[k] \
                and d.t[j + 1] - d.t[j] <= rules.max_gap:
            j += 1
        run = np.arange(k, j + 1)
        dur = float(np.sum(d.dt[run]))
        if dur >= rules.min_run:
            nblk = max(int(round(dur / rules.segment_length)), 1)
            for part in np.array_split(run, nblk):
                seg[part] = next_id
                next_id += 1
        k = j + 1
    return seg


# ---------------------------------------------------------------------------------------
# Least squares with block bootstrap
# ---------------------------------------------------------------------------------------
@dataclass
class _Fit:
    beta: np.ndarray
    cov: np.ndarray
    boot: np.ndarray  # (n_boot, p) bootstrap estimates
    resid: np.ndarray
    cond: float
    corr: np.ndarray

    def se(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov))

    def se_boot(self) -> np.ndarray:
        if len(self.boot) < 2:
            return np.full(len(self.beta), np.nan)
        return np.asarray(np.std(self.boot, axis=0, ddof=1))


@dataclass(frozen=True)
class _Boot:
    """Bootstrap generator, number of resamples and Newey-West lags of one run."""

    rng: np.random.Generator
    n: int
    lags: int


def _long_run_factor(resid: np.ndarray, seg: np.ndarray, lags: int) -> float:
    """Newey-West (Bartlett kernel) factor 1 + 2 sum (1 - k/(M+1)) rho_k, at least 1.

    Newey & West, Econometrica 55 (1987): residuals correlated over a few samples (here
    by the low-pass filter and the vehicle's own dynamics) make sigma^2 (X^T X)^-1 too
    small by about this factor. Pairs across segment borders are skipped.
    """
    e = resid - np.mean(resid)
    var = float(e @ e)
    if var <= 0.0 or lags < 1:
        return 1.0
    f = 1.0
    for k in range(1, min(lags, len(e) - 1) + 1):
        same = seg[k:] == seg[:-k]
        rho = float(np.sum((e[k:] * e[:-k])[same])) / var
        f += 2.0 * (1.0 - k / (lags + 1.0)) * rho
    return max(f, 1.0)


def _lsq(X: np.ndarray, y: np.ndarray, seg: np.ndarray, boot_opts: _Boot) -> _Fit:
    n, p = X.shape
    scale = np.linalg.norm(X, axis=0)
    scale[scale == 0.0] = 1.0
    Xs = X / scale
    bs, *_ = np.linalg.lstsq(Xs, y, rcond=None)
    beta = bs / scale
    resid = y - X @ beta
    dof = max(n - p, 1)
    sigma2 = float(resid @ resid) / dof * _long_run_factor(resid, seg, boot_opts.lags)
    sv = np.linalg.svd(Xs, compute_uv=False)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else math.inf
    xtx_s = Xs.T @ Xs
    try:
        inv_s = np.linalg.inv(xtx_s)
    except np.linalg.LinAlgError:
        inv_s = np.linalg.pinv(xtx_s)
    cov = sigma2 * inv_s / np.outer(scale, scale)
    sd = np.sqrt(np.abs(np.diag(cov)))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(sd, sd)
    # block bootstrap over segments: per-segment normal equations, resampled counts
    ids = np.unique(seg)
    nb = len(ids)
    boot = np.zeros((0, p))
    if nb >= 2 and boot_opts.n > 0:
        idx = np.searchsorted(ids, seg)
        A = np.zeros((nb, p, p))
        b = np.zeros((nb, p))
        np.add.at(A, idx, Xs[:, :, None] * Xs[:, None, :])
        np.add.at(b, idx, Xs * y[:, None])
        out = []
        for _ in range(boot_opts.n):
            w = np.bincount(boot_opts.rng.integers(0, nb, nb), minlength=nb).astype(float)
            Ab = np.einsum("b,bij->ij", w, A)
            bb = w @ b
            try:
                out.append(np.linalg.solve(Ab, bb) / scale)
            except np.linalg.LinAlgError:
                continue
        boot = np.array(out) if out else np.zeros((0, p))
    return _Fit(beta, cov, boot, resid, cond, corr)


@dataclass(frozen=True)
class Resolution:
    """Largest standard error at which a parameter still counts as observable.

    Our choices (common practice, no source): a tenth of the effect each calibration is
    meant to catch (1 deg offset, 2 % radius), a few centimetres for lengths.
    """

    steering_offset: float = 0.002  # [rad] ~0.1 deg
    wheel_speed_scale: float = 0.002  # [-]
    steering_ratio: float = 0.02  # [relative]
    wheelbase: float = 0.02  # [m]
    cg_to_rear_axle: float = 0.05  # [m]
    understeer_gradient: float = 3.0e-4  # [rad/(m/s^2)] ~0.17 deg/g


def _obs_reason(name: str, i: int, fit: _Fit, limit: float, unit: str,
                max_corr: float, max_cond: float, labels: Sequence[str]) -> str:
    """'' when parameter i of the fit is observable, else why not."""
    se = max(float(fit.se()[i]), float(fit.se_boot()[i]) if len(fit.boot) > 1 else 0.0)
    if not math.isfinite(se) or se > limit:
        return (f"standard error {se:.3g} {unit} exceeds the resolution {limit:.3g} {unit} "
                f"(condition number {fit.cond:.3g})")
    c = np.abs(np.nan_to_num(fit.corr[i]))
    c[i] = 0.0
    j = int(np.argmax(c)) if len(c) else 0
    if len(c) > 1 and c[j] > max_corr:
        return (f"correlation {fit.corr[i, j]:+.3f} with {labels[j]} (limit {max_corr}); "
                f"condition number {fit.cond:.3g}")
    if fit.cond > max_cond:
        return f"condition number {fit.cond:.3g} exceeds {max_cond:.3g}"
    return ""


# ---------------------------------------------------------------------------------------
# The calibration
# ---------------------------------------------------------------------------------------
def calibrate(
    drives: Iterable[Any] | Sequence[Iterable[Any]],
    config: Any,
    rules: SelectionRules | None = None,
    *,
    exclude: Sequence[tuple[float, float]] = (),
    seed: int = 0,
    n_boot: int = 200,
    resolution: Resolution | None = None,
    max_correlation: float = 0.99,
    max_condition: float = 1.0e4,
    fit_wheelbase: bool = True,
    fit_cg: bool = True,
) -> CalibrationResult:
    """Estimate the calibration from samples of one drive or a list of drives.

    ``drives``: an iterable of samples, or a list of such iterables (one per bag).
    ``config``: a MonitorConfig or flat dotted mapping with the current ``vehicle.*``.
    ``exclude``: (start, end) stamp windows [s] not to use (e.g. events of a replay).
    Raises :class:`CalibrationError` when there is too little usable data.
    """
    rules = rules or SelectionRules()
    res = resolution or Resolution()
    v = _vehicle(config)
    streams = _as_streams(drives)
    parts = [p for i, s in enumerate(streams) if (p := _align(s, v, rules, i)) is not None]
    if not parts:
        raise CalibrationError("no usable input: need both joint states (steering and wheel "
                               "speeds) and localisation in the data")
    d = _concat(parts)
    total = float(np.sum(d.dt))
    lags = max(3 * int(round(rules.fit_smooth_time / max(float(np.median(d.dt)), 1e-6))), 1)
    boot = _Boot(np.random.default_rng(seed), n_boot, lags)
    reasons: dict[str, float] = {}
    sel = _select(d, v, rules, rules.max_lateral_accel, exclude, reasons)
    seg = _segments(d, sel, rules)
    use = seg >= 0
    usable = float(np.sum(d.dt[use]))
    if usable < rules.min_usable:
        why = ", ".join(f"{k} {s:.0f} s" for k, s in sorted(reasons.items(), key=lambda kv:
                                                           -kv[1]) if s >= 0.5)
        raise CalibrationError(
            f"only {usable:.0f} s of usable driving; need at least {rules.min_usable:.0f} s "
            f"of moving, low-lateral-acceleration data (of {total:.0f} s; rejected: "
            f"{why or 'short runs'})")
    road_wheel = not v.steering_wheel
    est: dict[str, Estimate] = {}
    notes: list[str] = []
    S = seg[use]
    vx, r, steer = d.vx[use], d.r[use], d.steer[use]
    ay = vx * r
    kappa = r / vx
    ctx = (max_correlation, max_condition)

    # -- steering ---------------------------------------------------------------------
    Lw = v.wheelbase
    K_nuis = math.nan
    rdot = _lag_column(d.yaw_accel[use])
    if road_wheel:
        offset, K_nuis, Lw = _fit_steering(est, steer, kappa, ay, rdot, S, v, res, boot,
                                           ctx, fit_wheelbase)
    else:
        offset, K_nuis = _fit_steering_ratio(est, steer, kappa, ay, rdot, S, v, res, boot,
                                             ctx)
        est["vehicle.wheelbase"] = Estimate(
            "vehicle.wheelbase", "m", v.wheelbase, v.wheelbase, observable=False,
            reason="steering given as steering-wheel angle: yaw rate shows only "
                   "steering_ratio x wheelbase; wheelbase kept")

    # -- wheel speed scales --------------------------------------------------------------
    u_r = v.wheel_radius * d.w_rear[use]
    fit = _lsq(u_r[:, None], vx, S, boot)
    reason = _obs_reason("scale", 0, fit, res.wheel_speed_scale, "", *ctx, ["scale"])
    est["vehicle.wheel_speed_scale"] = _mk("vehicle.wheel_speed_scale", "-",
                                           v.wheel_speed_scale, fit, 0, reason)
    lf = Lw - v.cg_to_rear_axle
    wf = d.w_front[use]
    okf = np.isfinite(wf)
    if np.sum(okf) > 10:
        vy = d.vy[use]
        half = 0.5 * v.track_width
        g_fl = np.hypot(vx - r * half, vy + r * lf)
        g_fr = np.hypot(vx + r * half, vy + r * lf)
        yf = 0.5 * (g_fl + g_fr)
        fitf = _lsq((v.wheel_radius * wf[okf])[:, None], yf[okf], S[okf], boot)
        reason = _obs_reason("front", 0, fitf, res.wheel_speed_scale, "", *ctx, ["scale"])
        est["front_wheel_speed_scale"] = _mk("front_wheel_speed_scale", "-",
                                             v.wheel_speed_scale, fitf, 0, reason)
        diff = est["front_wheel_speed_scale"].value - est["vehicle.wheel_speed_scale"].value
        if abs(diff) > 0.005:
            notes.append(f"front and rear wheel-speed scales differ by {100 * diff:+.2f} % "
                         "(tyre sizes or wear differ, or the driven axle slips); "
                         "vehicle.wheel_speed_scale is the rear axle's")

    # -- l_r from the lateral velocity ---------------------------------------------------
    vy = d.vy[use]
    if fit_cg and np.all(np.isfinite(vy)) and np.any(np.abs(r) > 0.0):
        X = np.column_stack([r, -ay * vx])
        fl_ = _lsq(X, vy, S, boot)
        reason = _obs_reason("l_r", 0, fl_, res.cg_to_rear_axle, "m", *ctx,
                             ["l_r", "rear slip-angle term"])
        e = _mk("vehicle.cg_to_rear_axle", "m", v.cg_to_rear_axle, fl_, 0, reason)
        if e.observable and not 0.0 < e.value < Lw:
            e = Estimate(e.name, e.unit, e.prior, e.prior, e.se_fit, e.se_boot, False,
                         f"fitted {e.value:.3f} m is outside (0, wheelbase)", e.value)
        est["vehicle.cg_to_rear_axle"] = e
    else:
        est["vehicle.cg_to_rear_axle"] = Estimate(
            "vehicle.cg_to_rear_axle", "m", v.cg_to_rear_axle, v.cg_to_rear_axle,
            observable=False,
            reason="no lateral velocity in the localisation twist" if fit_cg else "not fitted")

    # -- understeer gradient from steady-state cornering --------------------------------
    selk = _select(d, v, rules, rules.k_max_lateral_accel, exclude, None)
    segk = _segments(d, selk, rules)
    usek = segk >= 0
    k_usable = float(np.sum(d.dt[usek]))
    ratio = est["vehicle.steering_ratio"].value if "vehicle.steering_ratio" in est \
        else v.steering_ratio
    factor = ratio / v.steering_ratio  # true road-wheel angle per converted angle
    est["vehicle.understeer_gradient"] = _fit_understeer(d, usek, segk, v, offset, factor,
                                                         Lw, res, boot, ctx, rules, notes)

    # -- residuals before / after --------------------------------------------------------
    cal = est["vehicle.steering_offset"].value
    scale = est["vehicle.wheel_speed_scale"].value
    ek = est["vehicle.understeer_gradient"]
    K_after = ek.value if ek.observable else (K_nuis if math.isfinite(K_nuis) else 0.0)
    rate_before = _kin_rate(steer + v.steering_offset, vx, v.wheelbase,
                            v.understeer_gradient, ay)
    rate_after = _kin_rate(steer / factor + cal, vx, Lw, K_after, ay)
    speed_before = v.wheel_radius * v.wheel_speed_scale * d.w_rear[use]
    speed_after = v.wheel_radius * scale * d.w_rear[use]
    residuals = [
        _resid("yaw rate (measured - kinematic)", "rad/s", r - rate_before, r - rate_after),
        _resid("speed (localisation - rear wheels)", "m/s", vx - speed_before,
               vx - speed_after),
    ]
    return CalibrationResult(
        estimates=est, usable_seconds=usable, k_usable_seconds=k_usable,
        total_seconds=total, n_segments=int(len(np.unique(S))),
        rejected_seconds={k: s for k, s in reasons.items() if s > 0.0},
        residuals=residuals, steering_input="road_wheel" if road_wheel else "steering_wheel",
        yaw_rate_source=d.yaw_rate_source, notes=notes,
    )


def _as_streams(drives: Any) -> list[Iterable[Any]]:
    if isinstance(drives, list | tuple) and drives and not isinstance(
            drives[0], ChassisSample | LocalizationSample | ImuSample) and \
            hasattr(drives[0], "__iter__"):
        return list(drives)
    return [drives]


def _kin_rate(delta: np.ndarray, vx: np.ndarray, L: float, K: float,
              ay: np.ndarray) -> np.ndarray:
    """Rear-axle kinematic yaw rate vx tan(delta - K a_y) / L [rad/s]."""
    return np.asarray(vx * np.tan(delta - K * ay) / L)


def _resid(name: str, unit: str, before: np.ndarray, after: np.ndarray) -> Residuals:
    return Residuals(name, unit, float(np.mean(before)), float(np.sqrt(np.mean(before**2))),
                     float(np.mean(after)), float(np.sqrt(np.mean(after**2))))


def _mk(name: str, unit: str, prior: float, fit: _Fit, i: int, reason: str,
        transform: float = 1.0) -> Estimate:
    val = float(fit.beta[i]) * transform
    se = float(fit.se()[i]) * abs(transform)
    sb = float(fit.se_boot()[i]) * abs(transform)
    ok = reason == ""
    return Estimate(name, unit, prior, val if ok else prior, se, sb, ok, reason, val)


def _lag_column(rdot: np.ndarray) -> np.ndarray | None:
    """The yaw-acceleration regressor [rad/s^2], or None when it carries no signal."""
    return rdot if float(np.std(rdot)) > 1e-6 else None


def _design(cols: Sequence[np.ndarray], rdot: np.ndarray | None,
            last: np.ndarray) -> np.ndarray:
    """Columns + the yaw-lag column (when present) + the offset column, in that order."""
    return np.column_stack([*cols, *(() if rdot is None else (rdot,)), last])


def _fit_steering(est: dict[str, Estimate], steer: np.ndarray, kappa: np.ndarray,
                  ay: np.ndarray, rdot: np.ndarray | None, S: np.ndarray, v: _Vehicle,
                  res: Resolution, boot: _Boot, ctx: tuple[float, float],
                  fit_wheelbase: bool) -> tuple[float, float, float]:
    """delta_m = atan(L kappa) + K a_y + T dr/dt - offset; returns (offset, K, L used)."""
    lag = [] if rdot is None else ["yaw-lag term"]
    labels = ["wheelbase", "understeer term", *lag, "steering offset"]
    L = v.wheelbase
    fit: _Fit | None = None
    reason_L = "not fitted"
    minus = -np.ones_like(ay)
    if fit_wheelbase:
        for _ in range(4):  # Gauss-Newton on L (the model is linear in K, T and offset)
            J = kappa / (1.0 + (L * kappa) ** 2)
            y = steer - np.arctan(L * kappa) + L * J
            fit = _lsq(_design([J, ay], rdot, minus), y, S, _Boot(boot.rng, 0, boot.lags))
            L_new = float(fit.beta[0])
            if not (0.2 * v.wheelbase < L_new < 5.0 * v.wheelbase):
                break
            done = abs(L_new - L) < 1e-7
            L = L_new
            if done:
                break
        J = kappa / (1.0 + (L * kappa) ** 2)
        y = steer - np.arctan(L * kappa) + L * J
        fit = _lsq(_design([J, ay], rdot, minus), y, S, boot)
        reason_L = _obs_reason("L", 0, fit, res.wheelbase, "m", *ctx, labels)
        if not (0.2 * v.wheelbase < float(fit.beta[0]) < 5.0 * v.wheelbase) and not reason_L:
            reason_L = f"fitted {float(fit.beta[0]):.3g} m is implausible"
    if fit is not None and reason_L == "":
        est["vehicle.wheelbase"] = _mk("vehicle.wheelbase", "m", v.wheelbase, fit, 0, "")
        i_k, i_o = 1, len(labels) - 1
    else:
        fitted = float(fit.beta[0]) if fit is not None else math.nan
        est["vehicle.wheelbase"] = Estimate(
            "vehicle.wheelbase", "m", v.wheelbase, v.wheelbase,
            float(fit.se()[0]) if fit is not None else math.nan,
            float(fit.se_boot()[0]) if fit is not None else math.nan,
            False, reason_L, fitted)
        L = v.wheelbase
        y = steer - np.arctan(L * kappa)
        fit = _lsq(_design([ay], rdot, minus), y, S, boot)
        labels = labels[1:]
        i_k, i_o = 0, len(labels) - 1
    reason = _obs_reason("offset", i_o, fit, res.steering_offset, "rad", *ctx, labels)
    est["vehicle.steering_offset"] = _mk("vehicle.steering_offset", "rad", v.steering_offset,
                                         fit, i_o, reason)
    return float(fit.beta[i_o]), float(fit.beta[i_k]), L


def _fit_steering_ratio(est: dict[str, Estimate], steer: np.ndarray, kappa: np.ndarray,
                        ay: np.ndarray, rdot: np.ndarray | None, S: np.ndarray, v: _Vehicle,
                        res: Resolution, boot: _Boot,
                        ctx: tuple[float, float]) -> tuple[float, float]:
    """delta_m = f (atan(L kappa) + K a_y + T dr/dt - offset) = a atan(L kappa) + b a_y
    (+ t dr/dt) + c; the ratio factor f = a, K = b/a, offset = -c/a.

    ``delta_m`` is the road-wheel angle the converter made with the file's ratio; the
    steering-wheel angle read / true ratio is the true angle, so f = true / file ratio and
    the corrected ratio is ``vehicle.steering_ratio * f``.
    """
    X = _design([np.arctan(v.wheelbase * kappa), ay], rdot, np.ones_like(ay))
    fit = _lsq(X, steer, S, boot)
    a, b, c = float(fit.beta[0]), float(fit.beta[1]), float(fit.beta[-1])
    lag = [] if rdot is None else ["yaw-lag term"]
    labels = ["steering ratio", "understeer term", *lag, "steering offset"]
    # delta method for (rho, offset): gradients of (a) and (-c/a)
    g_off = np.zeros(len(fit.beta))
    g_off[0], g_off[-1] = c / a**2, -1.0 / a
    se_off = float(math.sqrt(max(g_off @ fit.cov @ g_off, 0.0)))
    boot_off = -fit.boot[:, -1] / fit.boot[:, 0] if len(fit.boot) > 1 else np.zeros(0)
    sb_off = float(np.std(boot_off, ddof=1)) if len(boot_off) > 1 else math.nan
    r_ratio = _obs_reason("ratio", 0, fit, res.steering_ratio, "", *ctx, labels)
    est["vehicle.steering_ratio"] = _mk("vehicle.steering_ratio", "-", v.steering_ratio, fit,
                                        0, r_ratio, transform=v.steering_ratio)
    off = -c / a
    worst = max(se_off, sb_off if math.isfinite(sb_off) else 0.0)
    r_off = "" if worst <= res.steering_offset else (
        f"standard error {worst:.3g} rad exceeds the resolution {res.steering_offset:.3g} rad")
    est["vehicle.steering_offset"] = Estimate(
        "vehicle.steering_offset", "rad", v.steering_offset,
        off if not r_off else v.steering_offset, se_off, sb_off, not r_off, r_off, off)
    return off, b / a


def _fit_understeer(d: _Data, usek: np.ndarray, segk: np.ndarray, v: _Vehicle,
                    offset: float, factor: float, L: float, res: Resolution, boot: _Boot,
                    ctx: tuple[float, float], rules: SelectionRules,
                    notes: list[str]) -> Estimate:
    name, unit = "vehicle.understeer_gradient", "rad/(m/s^2)"
    if not np.any(usek):
        return Estimate(name, unit, v.understeer_gradient, v.understeer_gradient,
                        observable=False, reason="no steady-state driving")
    vx, r = d.vx[usek], d.r[usek]
    ay = vx * r
    delta = d.steer[usek] / factor + offset
    y = delta - np.arctan(L * r / vx)
    spread = float(np.std(ay))
    rdot = _lag_column(d.yaw_accel[usek])
    fit = _lsq(_design([ay], rdot, np.ones_like(ay)), y, segk[usek], boot)
    if spread < rules.min_k_spread:
        reason = (f"lateral acceleration spread {spread:.2f} m/s^2 below "
                  f"{rules.min_k_spread:g} m/s^2: drive a constant-radius circle with rising "
                  "speed or a slow ramp steer (ISO 4138)")
        e = _mk(name, unit, v.understeer_gradient, fit, 0, reason)
    else:
        reason = _obs_reason(name, 0, fit, res.understeer_gradient, unit, *ctx,
                             ["understeer gradient",
                              *(() if rdot is None else ("yaw-lag term",)),
                              "steering offset residual"])
        e = _mk(name, unit, v.understeer_gradient, fit, 0, reason)
    if e.observable and (np.all(ay > 0) or np.all(ay < 0)):
        notes.append("understeer gradient from one turn direction only "
                     "(ISO 4138 asks for both directions)")
    return e


def per_g_degrees(k: float) -> float:
    """Understeer gradient in deg/g from rad/(m/s^2)."""
    return math.degrees(k) * GRAVITY
