"""Ground-truth intervals from a simulated trace: when did the vehicle really slip?

:class:`TruthInterval` is shared by every truth producer (this module for tyre slip, the
fault injector for ``localization_fault``, ``calibration_bias`` and ``input_stale``).

Definitions (all thresholds are fields of :class:`TruthConfig`; defaults in brackets):

``lateral_slip``
    The true motion departs from the kinematic bicycle model fed with the *true* steering
    angle and CG speed (Rajamani 2012, CG reference, via ``kinematic_monitor.core.model``):
    beta_kin = atan(l_r tan(delta) / L), yaw_rate_kin = v cos(beta_kin) tan(delta) / L.
    A sample is slipping when |yaw_rate - yaw_rate_kin| > max(yaw_abs [0.03 rad/s],
    yaw_rel [0.15] * |yaw_rate_kin|) or |beta - beta_kin| > beta_abs [0.05 rad], at CG
    speed >= min_speed [2 m/s].
    Note: an understeering car departs from the kinematic yaw rate already in the linear
    tyre range (steady-state yaw-rate gain (v/L) / (1 + K v^2 / L), Gillespie 1992, ch. 6
    from memory), so at higher speed moderate cornering counts as lateral slip under this
    definition. Set ``understeer_gradient`` (K [rad per m/s^2]) to compare with that
    steady-state gain instead of the pure kinematic yaw rate; by default the simulated
    vehicle's own K is used, so lateral_slip means grip lost beyond the linear tyre range.
``longitudinal_slip``
    Some wheel's slip ratio |kappa| > slip_ratio [0.1], kappa = (Omega R_e - V_x) / |V_x|
    (ISO 8855 / Pacejka sign, V_x the wheel-centre speed along the wheel, denominator
    guarded at 1 m/s), at CG speed >= min_speed_long [1 m/s]. ``detail["mode"]`` says
    "spin" (kappa > 0) or "lock" (kappa < 0).

A condition must hold for min_duration [0.2 s]; episodes separated by less than
merge_gap [0.3 s] are merged. Times are simulated seconds (the trace clock).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from kinematic_monitor.core import model
from kinematic_monitor.sim.trace import WHEEL_NAMES, TrueTrace

TRUTH_KINDS = (
    "lateral_slip",
    "longitudinal_slip",
    "localization_fault",
    "calibration_bias",
    "input_stale",
)
# truth that is not a fault: a relocalisation the localisation declares (REP 105 lets the
# map frame jump by design); the monitor should note it, never raise an event for it
NOTE_KINDS = ("relocalization",)


@dataclass
class TruthInterval:
    """One true episode: ``kind`` (one of TRUTH_KINDS), ``start``/``end`` [s], details.

    ``detail`` is a JSON-friendly dict; a plain string given there is stored as
    ``{"summary": text}``.
    """

    kind: str
    start: float
    end: float
    detail: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if isinstance(self.detail, str):
            self.detail = {"summary": self.detail}
        if self.kind not in TRUTH_KINDS + NOTE_KINDS:
            raise ValueError(
                f"TruthInterval.kind={self.kind!r} must be one of {TRUTH_KINDS + NOTE_KINDS}"
            )
        if not self.end >= self.start:
            raise ValueError(f"TruthInterval end={self.end!r} is before start={self.start!r}")

    @property
    def duration(self) -> float:
        """Length of the episode [s]."""
        return self.end - self.start

    def overlaps(self, start: float, end: float) -> bool:
        """Whether [start, end] intersects this interval."""
        return start <= self.end and end >= self.start

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly form."""
        return {"kind": self.kind, "start": self.start, "end": self.end, "detail": self.detail}


@dataclass(frozen=True)
class TruthConfig:
    """Thresholds of the truth definitions (see the module docstring)."""

    yaw_abs: float = 0.03  # [rad/s]
    yaw_rel: float = 0.15  # [-]
    beta_abs: float = 0.05  # [rad]
    min_speed: float = 2.0  # [m/s]
    slip_ratio: float = 0.1  # [-]
    min_speed_long: float = 1.0  # [m/s]
    min_duration: float = 0.2  # [s]
    merge_gap: float = 0.3  # [s]
    understeer_gradient: float = 0.0  # [rad/(m/s^2)]; 0 = pure kinematic reference


def mask_intervals(
    t: np.ndarray, mask: np.ndarray, min_duration: float, merge_gap: float
) -> list[tuple[int, int]]:
    """Index ranges [i0, i1] (inclusive) of runs of True in ``mask``.

    Runs separated by less than ``merge_gap`` [s] are merged first, then runs shorter than
    ``min_duration`` [s] are dropped.
    """
    m = np.asarray(mask, dtype=bool)
    if m.size == 0 or not m.any():
        return []
    d = np.diff(m.astype(np.int8))
    starts: list[int] = (np.flatnonzero(d == 1) + 1).tolist()
    ends: list[int] = np.flatnonzero(d == -1).tolist()
    if m[0]:
        starts.insert(0, 0)
    if m[-1]:
        ends.append(m.size - 1)
    runs: list[list[int]] = []
    for s, e in zip(starts, ends, strict=True):
        if runs and t[s] - t[runs[-1][1]] < merge_gap:
            runs[-1][1] = int(e)
        else:
            runs.append([int(s), int(e)])
    return [(s, e) for s, e in runs if t[e] - t[s] >= min_duration]


def _vehicle_params(trace: TrueTrace) -> model.VehicleParams:
    p = trace.vehicle
    return model.VehicleParams(
        wheelbase=p.wheelbase,
        cg_to_rear_axle=p.cg_to_rear_axle,
        wheel_radius=p.wheel_radius,
        track_width=p.track_width,
    )


def kinematic_prediction(trace: TrueTrace) -> tuple[np.ndarray, np.ndarray]:
    """Kinematic (beta [rad], yaw rate [rad/s]) from the true steering and signed CG speed."""
    vp = _vehicle_params(trace)
    v = np.hypot(trace.vx, trace.vy) * np.sign(trace.vx)
    steer = trace.steer.tolist()
    beta = np.array([model.sideslip(d, vp) for d in steer])
    rate = np.array([model.yaw_rate(vi, d, vp) for vi, d in zip(v.tolist(), steer, strict=True)])
    return beta, rate


def _vehicle_understeer(trace: TrueTrace) -> float:
    fn = getattr(trace.vehicle, "understeer_gradient", None)
    return float(fn()) if callable(fn) else 0.0


def lateral_slip_intervals(
    trace: TrueTrace, cfg: TruthConfig | None = None
) -> list[TruthInterval]:
    """``lateral_slip`` episodes of the trace (definition in the module docstring).

    Without ``cfg``, the reference is the vehicle's own linear steady-state yaw-rate gain
    (its understeer gradient), so only departures beyond the linear tyre range count: the
    loss of grip an engineer means by "slipping".
    """
    cfg = cfg or TruthConfig(understeer_gradient=_vehicle_understeer(trace))
    if len(trace) == 0:
        return []
    beta_kin, r_kin = kinematic_prediction(trace)
    speed = np.hypot(trace.vx, trace.vy)
    if cfg.understeer_gradient:
        r_kin = (
            r_kin
            * trace.vehicle.wheelbase
            / (trace.vehicle.wheelbase + cfg.understeer_gradient * speed**2)
        )
    beta = np.arctan2(trace.vy, np.maximum(np.abs(trace.vx), 1e-3))
    r_res = trace.yaw_rate - r_kin
    b_res = beta - beta_kin
    bad = (np.abs(r_res) > np.maximum(cfg.yaw_abs, cfg.yaw_rel * np.abs(r_kin))) | (
        np.abs(b_res) > cfg.beta_abs
    )
    bad &= speed >= cfg.min_speed
    out = []
    for i0, i1 in mask_intervals(trace.t, bad, cfg.min_duration, cfg.merge_gap):
        sl = slice(i0, i1 + 1)
        j = i0 + int(np.argmax(np.abs(r_res[sl])))
        out.append(
            TruthInterval(
                "lateral_slip",
                float(trace.t[i0]),
                float(trace.t[i1]),
                {
                    "yaw_rate_residual": float(r_res[j]),
                    "sideslip_residual": float(b_res[i0 + int(np.argmax(np.abs(b_res[sl])))]),
                    "max_abs_ay": float(np.max(np.abs(trace.ay[sl]))),
                    "min_mu": float(np.min(trace.mu[sl])),
                    "position": [float(trace.x[i0]), float(trace.y[i0])],
                },
            )
        )
    return out


def longitudinal_slip_intervals(
    trace: TrueTrace, cfg: TruthConfig | None = None
) -> list[TruthInterval]:
    """``longitudinal_slip`` episodes of the trace (definition in the module docstring)."""
    cfg = cfg or TruthConfig()
    if len(trace) == 0:
        return []
    kappa = trace.slip_ratio(min_speed=1.0)
    speed = np.hypot(trace.vx, trace.vy)
    worst = np.max(np.abs(kappa), axis=1)
    bad = (worst > cfg.slip_ratio) & (speed >= cfg.min_speed_long)
    out = []
    for i0, i1 in mask_intervals(trace.t, bad, cfg.min_duration, cfg.merge_gap):
        sl = slice(i0, i1 + 1)
        k = kappa[sl]
        flat = int(np.argmax(np.abs(k)))
        row, col = divmod(flat, 4)
        peak = float(k[row, col])
        wheels = [WHEEL_NAMES[c] for c in range(4) if np.any(np.abs(k[:, c]) > cfg.slip_ratio)]
        out.append(
            TruthInterval(
                "longitudinal_slip",
                float(trace.t[i0]),
                float(trace.t[i1]),
                {
                    "peak_slip_ratio": peak,
                    "mode": "spin" if peak > 0 else "lock",
                    "wheels": wheels,
                    "min_mu": float(np.min(trace.mu[sl])),
                    "position": [float(trace.x[i0]), float(trace.y[i0])],
                },
            )
        )
    return out


def truth_intervals(trace: TrueTrace, cfg: TruthConfig | None = None) -> list[TruthInterval]:
    """All tyre-slip truth intervals of the trace, sorted by start time."""
    out = lateral_slip_intervals(trace, cfg) + longitudinal_slip_intervals(trace, cfg)
    return sorted(out, key=lambda iv: (iv.start, iv.kind))
