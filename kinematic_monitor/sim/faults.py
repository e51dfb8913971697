"""Faults injected into simulated sensor data, each with the truth window it creates.

A fault changes the clean `SensorSeries` (before noise) in place and reports
`TruthInterval`s in simulated time [s]; the bag writer shifts them to header-stamp time.
Truth kinds follow the event kinds of DESIGN.md section 4 (``localization_fault``,
``calibration_bias``, ``input_stale``); a declared relocalisation is kind ``none``: the
``map`` frame may jump by design (REP 105), so no alarm is expected.

Text form (command line ``--fault``): ``NAME:key=value,key=value``; names and keys in
`FAULT_HELP`. Times in seconds of simulated time, angles in radians, distances in metres.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields
from typing import Any, ClassVar

import numpy as np

from kinematic_monitor.sim.sensors import TOPIC_KEYS, SensorSeries
from kinematic_monitor.sim.truth import TruthInterval

__all__ = [
    "FAULT_HELP",
    "FAULT_TYPES",
    "Fault",
    "HeadingDrift",
    "LocalizationJump",
    "Relocalization",
    "SteeringOffset",
    "TopicSilent",
    "TruthInterval",
    "WheelRadiusError",
    "apply_faults",
    "parse_fault",
]


def _end(start: float, duration: float | None) -> float | None:
    return None if duration is None else start + duration


def _truth_end(start: float, duration: float | None, total: float) -> float:
    end = total if duration is None else min(start + duration, total)
    return max(end, start)


@dataclass(frozen=True)
class Fault:
    """Base class: subclasses set NAME and implement `apply`."""

    NAME: ClassVar[str] = ""
    KIND: ClassVar[str] = ""

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, float | int) and not isinstance(value, bool):
                if not math.isfinite(value):
                    raise ValueError(f"fault {self.NAME}: {f.name}={value!r} must be finite")
        start = getattr(self, "start", 0.0)
        if start < 0:
            raise ValueError(f"fault {self.NAME}: start={start!r} s must be >= 0")
        duration = getattr(self, "duration", None)
        if duration is not None and not duration > 0:
            raise ValueError(f"fault {self.NAME}: duration={duration!r} s must be > 0")

    def apply(self, series: SensorSeries) -> list[TruthInterval]:
        """Change ``series`` in place; return the truth windows (simulated time [s])."""
        raise NotImplementedError

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly description (``name`` plus the fields)."""
        return {"name": self.NAME, **asdict(self)}

    def spec(self) -> str:
        """The text form `parse_fault` reads back."""
        parts = [f"{k}={v}" for k, v in asdict(self).items() if v is not None]
        return f"{self.NAME}:" + ",".join(parts)


@dataclass(frozen=True)
class LocalizationJump(Fault):
    """Localisation position steps by (dx, dy) [m, map frame] at ``start`` [s].

    Lasts ``duration`` [s] (then steps back) or to the end (None). Reported covariance
    is unchanged, so the jump is not declared.
    """

    NAME: ClassVar[str] = "loc-jump"
    KIND: ClassVar[str] = "localization_fault"
    start: float = 10.0
    dx: float = 2.0
    dy: float = 0.0
    duration: float | None = None

    def apply(self, series: SensorSeries) -> list[TruthInterval]:
        od = series["odometry"]
        m = od.window(self.start, _end(self.start, self.duration))
        od.values["x"][m] += self.dx
        od.values["y"][m] += self.dy
        end = _truth_end(self.start, self.duration, series.duration)
        detail = f"position step dx={self.dx:g} m, dy={self.dy:g} m (map frame)"
        return [TruthInterval(self.KIND, self.start, end, {"summary": detail})]


@dataclass(frozen=True)
class HeadingDrift(Fault):
    """Localisation frame rotates at ``rate`` [rad/s] about the pose at ``start`` [s].

    Reported yaw gains rate*(t - start) and the reported position turns with it about
    the position at onset (a rotating map frame), so the body-frame twist stays true.
    """

    NAME: ClassVar[str] = "heading-drift"
    KIND: ClassVar[str] = "localization_fault"
    start: float = 10.0
    rate: float = 0.01
    duration: float | None = None

    def apply(self, series: SensorSeries) -> list[TruthInterval]:
        od = series["odometry"]
        m = od.window(self.start, _end(self.start, self.duration))
        if not m.any():
            return []
        v = od.values
        i0 = int(np.flatnonzero(m)[0])
        x0, y0 = float(v["x"][i0]), float(v["y"][i0])
        angle = self.rate * (od.t[m] - self.start)
        c, s = np.cos(angle), np.sin(angle)
        dx, dy = v["x"][m] - x0, v["y"][m] - y0
        v["x"][m] = x0 + c * dx - s * dy
        v["y"][m] = y0 + s * dx + c * dy
        v["yaw"][m] += angle
        end = _truth_end(self.start, self.duration, series.duration)
        detail = f"heading drift {self.rate:g} rad/s from the pose at onset"
        return [TruthInterval(self.KIND, self.start, end, {"summary": detail})]


@dataclass(frozen=True)
class Relocalization(Fault):
    """A declared relocalisation: position steps by (dx, dy) [m] at ``start`` [s].

    For ``window`` [s] before the step the reported position sigma is ``sigma`` [m]
    (the localisation says it is unsure); at the step it collapses to nominal. REP 105
    allows ``map`` to jump, so the truth kind is ``none`` over start +- window.
    """

    NAME: ClassVar[str] = "reloc"
    KIND: ClassVar[str] = "relocalization"
    start: float = 10.0
    dx: float = 1.5
    dy: float = 0.0
    sigma: float = 2.0
    window: float = 3.0

    def __post_init__(self) -> None:
        super().__post_init__()
        if self.sigma <= 0 or self.window < 0:
            raise ValueError(
                f"fault {self.NAME}: sigma={self.sigma!r} m must be > 0 and "
                f"window={self.window!r} s >= 0"
            )

    def apply(self, series: SensorSeries) -> list[TruthInterval]:
        od = series["odometry"]
        after = od.window(self.start, None)
        od.values["x"][after] += self.dx
        od.values["y"][after] += self.dy
        before = od.window(max(self.start - self.window, 0.0), self.start)
        od.values["pos_sigma"][before] = np.maximum(od.values["pos_sigma"][before], self.sigma)
        detail = (
            f"relocalization: declared jump dx={self.dx:g} m, dy={self.dy:g} m; "
            f"position sigma {self.sigma:g} m before it collapses at the jump"
        )
        # the window around the jump in which no localisation alarm is expected
        start = max(self.start - self.window, 0.0)
        end = min(self.start + self.window, series.duration)
        return [TruthInterval(self.KIND, start, end, {"summary": detail})]


@dataclass(frozen=True)
class SteeringOffset(Fault):
    """Reported road-wheel angles (both) carry a constant ``offset`` [rad] (calibration bias)."""

    NAME: ClassVar[str] = "steer-offset"
    KIND: ClassVar[str] = "calibration_bias"
    offset: float = 0.01
    start: float = 0.0
    duration: float | None = None

    def apply(self, series: SensorSeries) -> list[TruthInterval]:
        js = series["joint_states"]
        m = js.window(self.start, _end(self.start, self.duration))
        js.values["steer_left"][m] += self.offset
        js.values["steer_right"][m] += self.offset
        end = _truth_end(self.start, self.duration, series.duration)
        detail = f"steering offset {self.offset:g} rad on both road-wheel angles"
        return [TruthInterval(self.KIND, self.start, end, {"summary": detail})]


@dataclass(frozen=True)
class WheelRadiusError(Fault):
    """Reported wheel speeds scaled by (1 + ``error``) [-].

    Equivalent to the parameter file's wheel radius being wrong by ``error`` (e.g.
    -0.02: the configured radius is 2 % small, so the speed from the wheels reads 2 % low).
    """

    NAME: ClassVar[str] = "wheel-radius"
    KIND: ClassVar[str] = "calibration_bias"
    error: float = -0.02
    start: float = 0.0
    duration: float | None = None

    def __post_init__(self) -> None:
        super().__post_init__()
        if not -0.5 < self.error < 0.5:
            raise ValueError(f"fault {self.NAME}: error={self.error!r} must be in (-0.5, 0.5)")

    def apply(self, series: SensorSeries) -> list[TruthInterval]:
        js = series["joint_states"]
        m = js.window(self.start, _end(self.start, self.duration))
        scale = 1.0 + self.error
        for j in range(4):
            js.values[f"wheel_omega_{j}"][m] *= scale
        end = _truth_end(self.start, self.duration, series.duration)
        detail = f"wheel speeds scaled by {scale:g} (radius error {100 * self.error:+g} %)"
        return [TruthInterval(self.KIND, self.start, end, {"summary": detail})]


@dataclass(frozen=True)
class TopicSilent(Fault):
    """No messages on ``topic`` (one of joint_states, odometry, imu, gnss) for ``duration`` [s]."""

    NAME: ClassVar[str] = "silent"
    KIND: ClassVar[str] = "input_stale"
    topic: str = "odometry"
    start: float = 10.0
    duration: float | None = 2.0

    def __post_init__(self) -> None:
        super().__post_init__()
        if self.topic not in TOPIC_KEYS:
            raise ValueError(
                f"fault {self.NAME}: topic={self.topic!r} is not one of {', '.join(TOPIC_KEYS)}"
            )

    def apply(self, series: SensorSeries) -> list[TruthInterval]:
        if self.topic not in series.series:
            raise ValueError(f"fault {self.NAME}: topic {self.topic!r} is switched off")
        s = series[self.topic]
        m = s.window(self.start, _end(self.start, self.duration))
        s.keep[m] = False
        end = _truth_end(self.start, self.duration, series.duration)
        detail = {"summary": f"no {self.topic} messages"}
        return [TruthInterval(self.KIND, self.start, end, detail)]


FAULT_TYPES: dict[str, type[Fault]] = {
    cls.NAME: cls
    for cls in (
        LocalizationJump,
        HeadingDrift,
        Relocalization,
        SteeringOffset,
        WheelRadiusError,
        TopicSilent,
    )
}

FAULT_HELP = "\n".join(
    f"  {name}:" + ",".join(f"{f.name}={f.default}" for f in fields(cls)) + f"  ({cls.KIND})"
    for name, cls in FAULT_TYPES.items()
)
"""One line per fault: name, keys with defaults, truth kind."""


def parse_fault(text: str) -> Fault:
    """Parse ``NAME[:key=value,...]``; ``ValueError`` names the bad part."""
    name, _, rest = text.strip().partition(":")
    cls = FAULT_TYPES.get(name.strip())
    if cls is None:
        raise ValueError(f"unknown fault {name!r} in {text!r}; known: {', '.join(FAULT_TYPES)}")
    known = {f.name: f for f in fields(cls)}
    kwargs: dict[str, Any] = {}
    for item in filter(None, (p.strip() for p in rest.split(","))):
        key, eq, value = item.partition("=")
        key = key.strip()
        if not eq or key not in known:
            raise ValueError(
                f"fault {name}: bad setting {item!r} in {text!r}; keys: {', '.join(known)}"
            )
        value = value.strip()
        if key == "topic":
            kwargs[key] = value
        elif key == "duration" and value.lower() in ("none", ""):
            kwargs[key] = None
        else:
            try:
                kwargs[key] = float(value)
            except ValueError:
                raise ValueError(
                    f"fault {name}: {key}={value!r} in {text!r} is not a number"
                ) from None
    return cls(**kwargs)


def apply_faults(series: SensorSeries, faults: list[Fault]) -> list[TruthInterval]:
    """Apply every fault in order; return all their truth windows sorted by start."""
    out: list[TruthInterval] = []
    for fault in faults:
        out.extend(fault.apply(series))
    return sorted(out, key=lambda iv: (iv.start, iv.kind))
