"""Drive scenarios on our invented proving ground, and :func:`simulate`.

A :class:`Scenario` is a small dataclass: a path (polyline), a speed profile, low-grip
patches, the duration and the start pose. Write your own or use the registry
``SCENARIOS`` (name -> factory taking keyword options, all with defaults).

Road friction: ``mu`` is the *peak* tyre-road friction coefficient (the Magic Formula D/F_z).
Values per surface (``SURFACE_MU``) are the peaks of Burckhardt's mu(s) curves
(Burckhardt 1993, in Kiencke & Nielsen, *Automotive Control Systems*; dry asphalt
coefficients as published, wet/snow/ice coefficients from memory) computed by
:func:`burckhardt_peak`; gravel has no Burckhardt set, so its value is Noon's sliding
friction (Noon 1994, second-hand), i.e. a conservative peak.

Proving-ground layout (all ours): a 120 m dynamics pad at the origin for circles, slalom
and figure-eight; a 700 m straight strip along +x for acceleration and braking; and a
~1.2 km handling loop.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from kinematic_monitor.sim.driver import DriverGains, Path, PurePursuitDriver, SpeedProfile
from kinematic_monitor.sim.dynamics import (
    IOMEGA,
    IR,
    IVX,
    IVY,
    IX,
    IY,
    IYAW,
    SimVehicle,
    VehicleDynamics,
    ackermann_angles,
)
from kinematic_monitor.sim.trace import TrueTrace


def burckhardt_peak(c1: float, c2: float, c3: float) -> tuple[float, float]:
    """Peak (mu_max, slip at peak) of Burckhardt's mu(s) = c1 (1 - exp(-c2 s)) - c3 s.

    dmu/ds = 0 at s* = ln(c1 c2 / c3) / c2; with c3 = 0 the curve rises to c1 as s -> 1,
    so the value at s = 1 is returned.
    """
    if c3 <= 0.0:
        return c1 * (1.0 - math.exp(-c2)), 1.0
    s = min(max(math.log(c1 * c2 / c3) / c2, 0.0), 1.0)
    return c1 * (1.0 - math.exp(-c2 * s)) - c3 * s, s


BURCKHARDT = {
    "dry": (1.2801, 23.99, 0.52),
    "wet": (0.857, 33.822, 0.347),
    "snow": (0.1946, 94.129, 0.0646),
    "ice": (0.05, 306.39, 0.0),
}
SURFACE_MU: dict[str, float] = {k: round(burckhardt_peak(*c)[0], 3) for k, c in BURCKHARDT.items()}
SURFACE_MU["gravel"] = 0.35


@dataclass(frozen=True)
class FrictionPatch:
    """A low- (or high-) grip area of the road [m, map frame].

    ``shape`` "rect": centre (cx, cy), ``length`` along ``angle`` [rad], ``width`` across;
    ``shape`` "circle": centre and ``radius``. ``mu``: peak friction in the patch;
    ``surface``: a label (e.g. "ice").
    """

    shape: str
    cx: float
    cy: float
    mu: float
    surface: str = ""
    length: float = 0.0
    width: float = 0.0
    angle: float = 0.0
    radius: float = 0.0

    def __post_init__(self) -> None:
        if self.shape not in ("rect", "circle"):
            raise ValueError(f"FrictionPatch.shape={self.shape!r} must be 'rect' or 'circle'")
        if not (math.isfinite(self.mu) and self.mu > 0.0):
            raise ValueError(f"FrictionPatch.mu={self.mu!r} must be positive and finite")
        if self.shape == "rect" and not (self.length > 0.0 and self.width > 0.0):
            raise ValueError(
                f"rectangular FrictionPatch needs length > 0 and width > 0, got "
                f"{self.length!r}, {self.width!r}"
            )
        if self.shape == "circle" and not self.radius > 0.0:
            raise ValueError(f"circular FrictionPatch needs radius > 0, got {self.radius!r}")

    @classmethod
    def of(cls, surface: str, shape: str, cx: float, cy: float, **size: float) -> FrictionPatch:
        """Patch of a named surface from ``SURFACE_MU`` (e.g. ``of("ice", "circle", ...)``)."""
        if surface not in SURFACE_MU:
            raise ValueError(f"unknown surface {surface!r}; known: {sorted(SURFACE_MU)}")
        return cls(shape=shape, cx=cx, cy=cy, mu=SURFACE_MU[surface], surface=surface, **size)

    def contains(self, x: float, y: float) -> bool:
        """Whether the point (x, y) [m] is inside the patch."""
        dx, dy = x - self.cx, y - self.cy
        if self.shape == "circle":
            return dx * dx + dy * dy <= self.radius * self.radius
        c, s = math.cos(self.angle), math.sin(self.angle)
        return abs(c * dx + s * dy) <= 0.5 * self.length and abs(-s * dx + c * dy) <= (
            0.5 * self.width
        )


@dataclass
class Scenario:
    """A drive: path, speed reference, road friction, duration and start.

    ``start``: (x, y, yaw) of the CG [m, m, rad]; None starts on the path's first point
    facing along it. ``initial_speed`` [m/s]. ``base_mu``: friction outside all patches;
    where patches overlap, the last one listed wins.
    """

    name: str
    path: Path
    speed: SpeedProfile
    duration: float
    patches: tuple[FrictionPatch, ...] = ()
    base_mu: float = SURFACE_MU["dry"]
    start: tuple[float, float, float] | None = None
    initial_speed: float = 0.0
    description: str = ""
    vehicle: SimVehicle = field(default_factory=SimVehicle)
    gains: DriverGains = field(default_factory=DriverGains)
    dt: float = 0.002
    driver_period: float = 0.01

    def __post_init__(self) -> None:
        if not (math.isfinite(self.duration) and self.duration > 0.0):
            raise ValueError(f"Scenario.duration={self.duration!r} s must be > 0")
        if not (math.isfinite(self.base_mu) and self.base_mu > 0.0):
            raise ValueError(f"Scenario.base_mu={self.base_mu!r} must be positive")
        if not (self.driver_period >= self.dt > 0.0):
            raise ValueError(
                f"Scenario needs 0 < dt ({self.dt!r}) <= driver_period ({self.driver_period!r})"
            )

    def friction(self, x: float, y: float) -> float:
        """Peak road friction at (x, y) [m]."""
        mu = self.base_mu
        for p in self.patches:
            if p.contains(x, y):
                mu = p.mu
        return mu

    def start_pose(self) -> tuple[float, float, float]:
        """CG start pose (x, y, yaw)."""
        if self.start is not None:
            return self.start
        x, y = self.path.point_at(0.0)
        return (x, y, self.path.heading_at_start())


def simulate(scenario: Scenario, duration: float | None = None, seed: int = 0) -> TrueTrace:
    """Run ``scenario`` (optionally for another ``duration`` [s]) and return the true trace.

    ``seed`` drives the driver's small random steering disturbance; the same seed gives the
    same trace bit for bit.
    """
    sc = scenario
    T = sc.duration if duration is None else duration
    if not (math.isfinite(T) and T > 0.0):
        raise ValueError(f"duration={T!r} s must be positive and finite")
    p = sc.vehicle
    dt = sc.dt
    x0, y0, yaw0 = sc.start_pose()
    fric = sc.friction if sc.patches else sc.base_mu
    dyn = VehicleDynamics(p, dt, friction=fric, x0=x0, y0=y0, yaw0=yaw0, v0=sc.initial_speed)
    drv = PurePursuitDriver(sc.path, sc.speed, p, gains=sc.gains, seed=seed)
    n = int(round(T / dt)) + 1
    every = max(int(round(sc.driver_period / dt)), 1)
    L, tw, R = p.wheelbase, p.track_width, p.wheel_radius
    split = p.drive_split()
    rows: list[tuple[float, ...]] = []
    odo = 0.0
    cmd = (0.0, 0.0, 0.0)
    for k in range(n):
        s = dyn.state
        if k % every == 0:
            spin = max(s[IOMEGA + i] * split[i] for i in range(4)) * 2.0 * R - s[IVX]
            cmd = drv.update(k * dt, every * dt, s[IX], s[IY], s[IYAW], s[IVX], odo, spin)
        d = dyn.delta
        mu_cg = sc.friction(s[IX], s[IY]) if sc.patches else sc.base_mu
        row_state = (
            s[IX],
            s[IY],
            s[IYAW],
            s[IVX],
            s[IVY],
            s[IR],
            d,
            mu_cg,
            s[IOMEGA],
            s[IOMEGA + 1],
            s[IOMEGA + 2],
            s[IOMEGA + 3],
        )
        dyn.step(*cmd)
        # accelerations belong to the state at the start of the step just taken
        ax, ay = dyn.last_accel
        rows.append(row_state + (ax, ay))
        odo += math.hypot(s[IVX], s[IVY]) * dt
        if not math.isfinite(dyn.state[IVX]):
            raise RuntimeError(f"simulation of {sc.name!r} diverged at t={k * dt:.3f} s")
    a = np.asarray(rows)
    steer = a[:, 6]
    lr = np.array([ackermann_angles(float(v), L, tw) for v in steer.tolist()])
    return TrueTrace(
        dt=dt,
        t=np.arange(n) * dt,
        x=a[:, 0],
        y=a[:, 1],
        yaw=a[:, 2],
        vx=a[:, 3],
        vy=a[:, 4],
        yaw_rate=a[:, 5],
        ax=a[:, 12],
        ay=a[:, 13],
        steer_left=lr[:, 0],
        steer_right=lr[:, 1],
        steer=steer,
        wheel_omega=a[:, 8:12].copy(),
        mu=a[:, 7],
        vehicle=p,
        scenario=sc.name,
    )


# ---------------------------------------------------------------- path builders
def circle_points(
    cx: float,
    cy: float,
    radius: float,
    ds: float = 0.5,
    ccw: bool = True,
    start_angle: float = -math.pi / 2,
) -> np.ndarray:
    """Polyline of a full circle [m] starting at ``start_angle`` (closed path)."""
    n = max(int(math.ceil(2 * math.pi * radius / ds)), 16)
    th = start_angle + (1 if ccw else -1) * np.linspace(0.0, 2 * math.pi, n, endpoint=False)
    return np.column_stack([cx + radius * np.cos(th), cy + radius * np.sin(th)])


def segments_points(
    segs: Sequence[tuple[float, float]],
    ds: float = 0.5,
    x0: float = 0.0,
    y0: float = 0.0,
    yaw0: float = 0.0,
) -> np.ndarray:
    """Polyline from (length [m], curvature [1/m]) segments, starting at a pose."""
    xs, ys = [x0], [y0]
    x, y, h = x0, y0, yaw0
    for length, kappa in segs:
        n = max(int(math.ceil(length / ds)), 1)
        step = length / n
        for _ in range(n):
            if abs(kappa) < 1e-12:
                x += step * math.cos(h)
                y += step * math.sin(h)
            else:
                h2 = h + kappa * step
                x += (math.sin(h2) - math.sin(h)) / kappa
                y += (math.cos(h) - math.cos(h2)) / kappa
                h = h2
            xs.append(x)
            ys.append(y)
    return np.column_stack([xs, ys])


def curvature_speed(
    path_pts: np.ndarray,
    closed: bool,
    v_max: float,
    a_lat: float,
    a_long: float,
    ds_out: float = 5.0,
) -> SpeedProfile:
    """Distance-keyed speed profile limited by lateral acceleration ``a_lat`` on curves and
    by ``a_long`` [m/s^2] when speeding up or slowing down (forward/backward pass)."""
    path = Path(path_pts, closed=closed)
    s_out = np.arange(0.0, path.length + ds_out, ds_out)
    pts = np.array([path.point_at(float(s)) for s in s_out])
    h = np.unwrap(np.arctan2(np.gradient(pts[:, 1]), np.gradient(pts[:, 0])))
    kappa = np.abs(np.gradient(h, s_out))
    kappa = np.convolve(kappa, np.ones(5) / 5, mode="same")
    v = np.minimum(v_max, np.sqrt(a_lat / np.maximum(kappa, 1e-6)))
    reps = 2 if closed else 1
    for _ in range(reps):
        for i in range(1, len(v)):
            v[i] = min(v[i], math.sqrt(v[i - 1] ** 2 + 2 * a_long * ds_out))
        for i in range(len(v) - 2, -1, -1):
            v[i] = min(v[i], math.sqrt(v[i + 1] ** 2 + 2 * a_long * ds_out))
        if closed:
            v[0] = v[-1] = min(v[0], v[-1])
    return SpeedProfile(
        tuple(zip(s_out.tolist(), v.tolist(), strict=True)),
        by="distance",
        period=path.length if closed else None,
    )


def _ramp_then_hold(v: float, t_ramp: float = 6.0) -> SpeedProfile:
    return SpeedProfile(((0.0, 0.0), (t_ramp, v)))


# ---------------------------------------------------------------- scenarios
def skidpad_circle(
    radius: float = 40.0,
    speed: float = 10.0,
    duration: float = 60.0,
    patches: Sequence[FrictionPatch] = (),
    base_mu: float = SURFACE_MU["dry"],
    ramp_to: float | None = None,
    ramp_time: float | None = None,
    clockwise: bool = False,
) -> Scenario:
    """Constant-radius circle on the dynamics pad, centred at (0, radius).

    Speed ramps from standstill to ``speed`` in 6 s; with ``ramp_to`` it then rises
    linearly to ``ramp_to`` over ``ramp_time`` (default: to the end), for limit tests.
    """
    cy = -radius if clockwise else radius
    pts = circle_points(
        0.0, cy, radius, ccw=not clockwise, start_angle=math.pi / 2 if clockwise else -math.pi / 2
    )
    prof: SpeedProfile = _ramp_then_hold(speed)
    if ramp_to is not None:
        tr = ramp_time if ramp_time is not None else max(duration - 8.0, 1.0)
        prof = SpeedProfile(((0.0, 0.0), (6.0, speed), (8.0, speed), (8.0 + tr, ramp_to)))
    return Scenario(
        "skidpad_circle",
        Path(pts, closed=True),
        prof,
        duration,
        tuple(patches),
        base_mu,
        initial_speed=0.0,
        description=f"circle R={radius:g} m at {speed:g} m/s on the dynamics pad",
    )


def slalom(
    spacing: float = 20.0,
    amplitude: float = 1.5,
    cones: int = 10,
    speed: float = 12.0,
    duration: float | None = None,
    patches: Sequence[FrictionPatch] = (),
    base_mu: float = SURFACE_MU["dry"],
) -> Scenario:
    """Sinusoidal slalom through ``cones`` gates ``spacing`` m apart, after a 120 m run-up."""
    run_up = 120.0
    xs = np.arange(0.0, run_up + (cones + 1) * spacing + 200.0, 0.5)
    ys = np.where(
        (xs > run_up) & (xs < run_up + (cones + 1) * spacing),
        amplitude * np.sin(math.pi * (xs - run_up) / spacing),
        0.0,
    )
    pts = np.column_stack([xs - 30.0, ys])
    length = float(xs[-1])
    dur = duration if duration is not None else 6.0 + length / max(speed, 1.0)
    return Scenario(
        "slalom",
        Path(pts),
        _ramp_then_hold(speed),
        dur,
        tuple(patches),
        base_mu,
        description=f"slalom {cones} gates, {spacing:g} m, at {speed:g} m/s",
    )


def figure_eight(
    size: float = 45.0,
    speed: float = 9.0,
    duration: float = 60.0,
    patches: Sequence[FrictionPatch] = (),
    base_mu: float = SURFACE_MU["dry"],
) -> Scenario:
    """Figure-eight (lemniscate of Bernoulli with half-width ``size`` m) on the pad."""
    t = np.linspace(0.0, 2 * math.pi, 1600, endpoint=False)
    den = 1.0 + np.sin(t) ** 2
    pts = np.column_stack([size * np.cos(t) / den, size * np.sin(t) * np.cos(t) / den])
    pts = pts[::-1]  # left-hand first loop
    return Scenario(
        "figure_eight",
        Path(pts, closed=True),
        _ramp_then_hold(speed),
        duration,
        tuple(patches),
        base_mu,
        description=f"figure-eight {2 * size:g} m wide at {speed:g} m/s",
    )


def accel_brake_strip(
    top_speed: float = 25.0,
    accel_time: float = 9.0,
    hold: float = 4.0,
    brake_decel: float = 8.0,
    duration: float = 25.0,
    patches: Sequence[FrictionPatch] = (),
    base_mu: float = SURFACE_MU["dry"],
) -> Scenario:
    """Straight strip: accelerate to ``top_speed`` in ``accel_time`` s, hold, then stop at
    ``brake_decel`` [m/s^2] (a hard stop that stays below the dry-road limit)."""
    pts = np.column_stack([np.arange(0.0, 1200.0, 1.0), np.zeros(1200)])
    t_brake = accel_time + hold
    prof = SpeedProfile(
        (
            (0.0, 0.0),
            (accel_time, top_speed),
            (t_brake, top_speed),
            (t_brake + top_speed / brake_decel, 0.0),
        )
    )
    sc = Scenario(
        "accel_brake_strip",
        Path(pts),
        prof,
        duration,
        tuple(patches),
        base_mu,
        description=f"acceleration to {top_speed:g} m/s and a hard stop",
    )
    return sc


def _loop_points() -> np.ndarray:
    half = [
        (200.0, 0.0),
        (47.1, 1 / 60),
        (31.4, -1 / 40),
        (55.0, 1 / 35),
        (80.0, 0.0),
        (125.7, 1 / 80),
        (60.0, 0.0),
    ]
    # make the half-lap turn exactly pi so two copies close the loop
    turn = sum(length * k for length, k in half)
    half[-2] = (half[-2][0] + (math.pi - turn) * 80.0, 1 / 80)
    return segments_points(half + half, ds=0.5)


def mixed_loop(
    laps: float = 1.0,
    duration: float | None = None,
    v_max: float = 22.0,
    a_lat: float = 4.0,
    patches: Sequence[FrictionPatch] = (),
    base_mu: float = SURFACE_MU["dry"],
) -> Scenario:
    """The ~1.2 km handling loop: straights, a left-right bend, tight and wide curves.

    Speed follows the curvature (lateral acceleration ``a_lat``, 2 m/s^2 longitudinal); the
    loop repeats, so ``duration`` (or ``laps``) can be 10-30 minutes.
    """
    pts = _loop_points()
    prof = curvature_speed(pts, True, v_max, a_lat, 2.0)
    path = Path(pts, closed=True)
    if duration is None:
        mean_v = float(np.mean([v for _, v in prof.points]))
        duration = 10.0 + laps * path.length / mean_v
    # start from rest: the profile is distance keyed, ramp via the driver's PI
    return Scenario(
        "mixed_loop",
        path,
        prof,
        duration,
        tuple(patches),
        base_mu,
        description="handling loop, curvature-limited speed",
    )


# scenarios with low-grip patches on by default
def circle_ice_patch(**kw: object) -> Scenario:
    """Skid-pad circle (R 40 m, 11 m/s) crossing a 12 m ice patch on its far side."""
    kw.setdefault("speed", 11.0)
    kw.setdefault("patches", (FrictionPatch.of("ice", "circle", 0.0, 80.0, radius=6.0),))
    sc = skidpad_circle(**kw)  # type: ignore[arg-type]
    return replace(sc, name="circle_ice_patch")


def circle_wet_patch(**kw: object) -> Scenario:
    """Skid-pad circle (R 40 m, 17 m/s, 0.74 g) crossing a wet quarter of the pad."""
    kw.setdefault("speed", 17.0)
    kw.setdefault(
        "patches", (FrictionPatch.of("wet", "rect", -40.0, 40.0, length=30.0, width=60.0),)
    )
    sc = skidpad_circle(**kw)  # type: ignore[arg-type]
    return replace(sc, name="circle_wet_patch")


def brake_on_ice(**kw: object) -> Scenario:
    """Acceleration strip whose braking zone is ice: the wheels lock."""
    kw.setdefault("top_speed", 20.0)
    kw.setdefault(
        "patches", (FrictionPatch.of("ice", "rect", 190.0, 0.0, length=50.0, width=8.0),)
    )
    sc = accel_brake_strip(**kw)  # type: ignore[arg-type]
    return replace(sc, name="brake_on_ice")


def launch_on_snow(**kw: object) -> Scenario:
    """Full-throttle start on a snow patch: the driven wheels spin up."""
    kw.setdefault("top_speed", 15.0)
    kw.setdefault("accel_time", 10.0)
    kw.setdefault("duration", 20.0)
    kw.setdefault(
        "patches", (FrictionPatch.of("snow", "rect", 40.0, 0.0, length=90.0, width=8.0),)
    )
    sc = accel_brake_strip(**kw)  # type: ignore[arg-type]
    return replace(sc, name="launch_on_snow")


def gentle_loop(
    v_low: float = 6.0, v_high: float = 8.8, cycle: float = 45.0, **kw: object
) -> Scenario:
    """The handling loop driven gently, the false-alarm reference drive: the speed swings
    between ``v_low`` and ``v_high`` [m/s] over ``cycle`` [s] (time keyed, so it does not
    drift onto the bends lap after lap as a distance-keyed profile can), which keeps
    |a_y| below about 0.3 g in the tightest (35 m) bend on a dry road; ``duration`` or
    ``laps`` repeat it (e.g. 30 minutes)."""
    sc = mixed_loop(**kw)  # type: ignore[arg-type]
    prof = SpeedProfile(
        ((0.0, v_low), (0.5 * cycle, v_high), (cycle, v_low)), by="time", period=cycle
    )
    return replace(sc, name="gentle_loop", speed=prof,
                   description=f"handling loop, gentle ({v_low:g}-{v_high:g} m/s)")


def loop_ice_bend(**kw: object) -> Scenario:
    """The gentle loop with an ice patch (radius 7 m) in the tight left-hand bend: the
    car corners into ice at 7-8 m/s and slides for a moment every lap."""
    kw.setdefault(
        "patches", (FrictionPatch.of("ice", "circle", 291.0, 36.0, radius=7.0),)
    )
    sc = gentle_loop(**kw)  # type: ignore[arg-type]
    return replace(sc, name="loop_ice_bend", description="gentle loop, ice in the tight bend")


def launch_on_ice(**kw: object) -> Scenario:
    """Hard acceleration from rest on an ice strip (first 60 m), then dry braking."""
    kw.setdefault("top_speed", 15.0)
    kw.setdefault("accel_time", 5.0)
    kw.setdefault("duration", 20.0)
    kw.setdefault(
        "patches", (FrictionPatch.of("ice", "rect", 30.0, 0.0, length=60.0, width=8.0),)
    )
    sc = accel_brake_strip(**kw)  # type: ignore[arg-type]
    return replace(sc, name="launch_on_ice")


SCENARIOS: dict[str, Callable[..., Scenario]] = {
    "skidpad_circle": skidpad_circle,
    "slalom": slalom,
    "figure_eight": figure_eight,
    "accel_brake_strip": accel_brake_strip,
    "mixed_loop": mixed_loop,
    "circle_ice_patch": circle_ice_patch,
    "circle_wet_patch": circle_wet_patch,
    "brake_on_ice": brake_on_ice,
    "launch_on_snow": launch_on_snow,
    "gentle_loop": gentle_loop,
    "loop_ice_bend": loop_ice_bend,
    "launch_on_ice": launch_on_ice,
}
