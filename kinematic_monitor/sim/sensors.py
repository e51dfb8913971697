"""Simulated sensors: sample a `TrueTrace` into the messages a test vehicle would record.

Pipeline (each step a plain function, no ROS import):

1. `sample_truth` - the true signals at each sensor's own rate (clean `SensorSeries`);
2. faults (``faults.py``) change values, reported covariances and which messages exist;
3. `add_noise` - white noise, biases, latency and random dropouts from a seeded
   ``numpy.random.Generator``;
4. `iter_records` - plain message records merged into arrival-time order, streamed.

Times: ``stamp_ns`` is the header stamp = simulated measurement time + ``epoch_ns``;
``arrival_ns`` = stamp + latency (what a recorder would log). Units and frames follow
REP 103 (SI, radians, body x forward / y left / z up, counter-clockwise positive) and
REP 105 (localisation pose in ``map``, twist in the child frame ``base_link``).
"""

from __future__ import annotations

import heapq
import math
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.sim.trace import TrueTrace

DEFAULT_EPOCH_NS = 1_800_000_000 * 1_000_000_000
"""Header-stamp clock at simulated time 0 [ns] (1 800 000 000 s after the Unix epoch)."""

STANDARD_GRAVITY = 9.80665
"""[m/s^2] standard acceleration of gravity (CGPM 1901 conventional value)."""

STEER_JOINTS = ("front_left_steer_joint", "front_right_steer_joint")
WHEEL_JOINTS = (
    "front_left_wheel_joint",
    "front_right_wheel_joint",
    "rear_left_wheel_joint",
    "rear_right_wheel_joint",
)
"""Default joint names (DESIGN.md section 1); wheel order matches ``TrueTrace.wheel_omega``."""

TOPIC_KEYS = ("joint_states", "odometry", "imu", "gnss")
"""Stream names used by faults, the bag writer and the command line."""

# WGS84 ellipsoid (NIMA TR8350.2): semi-major axis [m] and first eccentricity squared
WGS84_A = 6_378_137.0
WGS84_E2 = 6.69437999014e-3


# --------------------------------------------------------------------------- config


@dataclass
class JointStateConfig:
    """``sensor_msgs/JointState`` with road-wheel angles and wheel angular speeds."""

    rate_hz: float = 100.0  # [Hz] publication rate
    steer_std: float = 2.0e-4  # [rad] white noise on each road-wheel angle
    wheel_speed_std: float = 0.02  # [rad/s] white noise on each wheel angular speed
    latency: float = 0.002  # [s] fixed delay from measurement (stamp) to arrival
    jitter: float = 0.0005  # [s] mean of an extra exponential delay (0 = none)
    dropout: float = 0.0  # [-] probability that a message is lost
    steer_joints: tuple[str, str] = STEER_JOINTS
    wheel_joints: tuple[str, str, str, str] = WHEEL_JOINTS


@dataclass
class OdometryConfig:
    """``nav_msgs/Odometry`` from the localisation: CG pose in ``map``, twist in ``base_link``."""

    rate_hz: float = 50.0  # [Hz]
    position_std: float = 0.02  # [m] white noise on x and y (also the reported sigma)
    yaw_std: float = 0.003  # [rad] white noise on yaw (also the reported sigma)
    velocity_std: float = 0.02  # [m/s] white noise on body vx, vy
    yaw_rate_std: float = 0.003  # [rad/s] white noise on the twist yaw rate
    latency: float = 0.02  # [s]
    jitter: float = 0.002  # [s]
    dropout: float = 0.0  # [-]
    frame_id: str = "map"
    child_frame_id: str = "base_link"


@dataclass
class ImuConfig:
    """``sensor_msgs/Imu`` mounted at the CG, axes aligned with ``base_link``."""

    rate_hz: float = 200.0  # [Hz]
    gyro_std: float = 0.002  # [rad/s] white noise on each angular-velocity axis
    gyro_bias: float = 0.0  # [rad/s] constant bias on angular_velocity.z
    accel_std: float = 0.05  # [m/s^2] white noise on each linear-acceleration axis
    accel_bias_x: float = 0.0  # [m/s^2] constant bias on linear_acceleration.x
    accel_bias_y: float = 0.0  # [m/s^2] constant bias on linear_acceleration.y
    orientation_std: float = 0.005  # [rad] white noise on the reported yaw
    latency: float = 0.001  # [s]
    jitter: float = 0.0002  # [s]
    dropout: float = 0.0  # [-]
    frame_id: str = "base_link"


@dataclass
class GnssConfig:
    """``sensor_msgs/NavSatFix`` of the CG; ``rate_hz = 0`` switches the topic off.

    The local ``map`` frame is an east-north-up tangent plane at the invented proving
    ground origin (``origin_lat``, ``origin_lon`` [deg], ``origin_alt`` [m] WGS84).
    """

    rate_hz: float = 10.0  # [Hz], 0 = off
    horizontal_std: float = 0.3  # [m] white noise east/north
    vertical_std: float = 0.6  # [m] white noise on altitude
    latency: float = 0.05  # [s]
    jitter: float = 0.005  # [s]
    dropout: float = 0.0  # [-]
    origin_lat: float = 46.2180  # [deg] invented test-track origin
    origin_lon: float = 7.4425  # [deg]
    origin_alt: float = 512.0  # [m]
    frame_id: str = "gnss_link"


@dataclass
class SensorConfig:
    """All simulated sensors; every field has a unit in its class's comments."""

    epoch_ns: int = DEFAULT_EPOCH_NS  # [ns] header stamp at simulated time 0
    joint_states: JointStateConfig = field(default_factory=JointStateConfig)
    odometry: OdometryConfig = field(default_factory=OdometryConfig)
    imu: ImuConfig = field(default_factory=ImuConfig)
    gnss: GnssConfig = field(default_factory=GnssConfig)

    def validate(self) -> None:
        """Raise ``ValueError`` naming the first out-of-range setting."""
        if not isinstance(self.epoch_ns, int) or self.epoch_ns < 0:
            raise ValueError(f"epoch_ns={self.epoch_ns!r} must be a non-negative integer [ns]")
        for key in TOPIC_KEYS:
            cfg = getattr(self, key)
            for name, value in vars(cfg).items():
                if isinstance(value, str | tuple):
                    continue
                if not (isinstance(value, int | float) and math.isfinite(value) and value >= 0):
                    raise ValueError(
                        f"sensor setting {key}.{name}={value!r} must be finite and >= 0"
                    )
            if key != "gnss" and cfg.rate_hz <= 0:
                raise ValueError(f"sensor setting {key}.rate_hz={cfg.rate_hz!r} must be > 0")
            if cfg.rate_hz > 10_000:
                raise ValueError(f"sensor setting {key}.rate_hz={cfg.rate_hz!r} must be <= 10000")
            if cfg.dropout >= 1.0:
                raise ValueError(f"sensor setting {key}.dropout={cfg.dropout!r} must be < 1")

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly copy (tuples become lists)."""
        out: dict[str, Any] = {"epoch_ns": self.epoch_ns}
        for key in TOPIC_KEYS:
            out[key] = {
                k: (list(v) if isinstance(v, tuple) else v)
                for k, v in vars(getattr(self, key)).items()
            }
        return out


# --------------------------------------------------------------------------- series


@dataclass
class Series:
    """Samples of one topic, one row per message (struct of arrays).

    ``t_ns``: simulated measurement time [ns from sim start]; ``keep``: message exists;
    ``delay_ns``: arrival minus stamp [ns]. ``values``: named float arrays (see
    `sample_truth` for the names per topic).
    """

    key: str
    t_ns: np.ndarray
    values: dict[str, np.ndarray]
    keep: np.ndarray
    delay_ns: np.ndarray

    @property
    def t(self) -> np.ndarray:
        """Simulated time [s] of each sample."""
        return self.t_ns * 1e-9

    def __len__(self) -> int:
        return int(self.t_ns.shape[0])

    def window(self, start: float, end: float | None) -> np.ndarray:
        """Boolean mask of samples with start <= t < end (sim time [s], None = open end)."""
        t = self.t
        mask = t >= start
        if end is not None:
            mask &= t < end
        return mask


@dataclass
class SensorSeries:
    """Every topic's series plus the trace facts the faults need."""

    series: dict[str, Series]
    duration: float  # [s] simulated time covered
    wheel_radius: float  # [m] true effective rolling radius

    def __getitem__(self, key: str) -> Series:
        try:
            return self.series[key]
        except KeyError:
            raise KeyError(
                f"no simulated topic {key!r}; available: {', '.join(self.series)}"
            ) from None


def _sample_times_ns(t0: float, t1: float, rate_hz: float) -> np.ndarray:
    period_ns = int(round(1e9 / rate_hz))
    span_ns = int(round((t1 - t0) * 1e9))
    n = span_ns // period_ns + 1
    return int(round(t0 * 1e9)) + period_ns * np.arange(n, dtype=np.int64)


def _interp(t: np.ndarray, trace_t: np.ndarray, values: np.ndarray) -> np.ndarray:
    return np.interp(t, trace_t, values)


def local_to_geodetic(
    east: np.ndarray, north: np.ndarray, lat0: float, lon0: float
) -> tuple[np.ndarray, np.ndarray]:
    """Small-area tangent-plane offsets [m] to latitude/longitude [deg] (WGS84).

    Equirectangular approximation with the ellipsoid's radii of curvature at the
    origin: meridian M = a(1-e^2)/(1-e^2 sin^2 phi0)^1.5 and prime vertical
    N = a/sqrt(1-e^2 sin^2 phi0); lat = lat0 + north/M, lon = lon0 + east/(N cos phi0).
    Good to centimetres within a few kilometres of the origin.
    """
    phi0 = math.radians(lat0)
    w = 1.0 - WGS84_E2 * math.sin(phi0) ** 2
    m_radius = WGS84_A * (1.0 - WGS84_E2) / w**1.5
    n_radius = WGS84_A / math.sqrt(w)
    lat = lat0 + np.degrees(np.asarray(north) / m_radius)
    lon = lon0 + np.degrees(np.asarray(east) / (n_radius * math.cos(phi0)))
    return lat, lon


def sample_truth(trace: TrueTrace, config: SensorConfig) -> SensorSeries:
    """The true signals at each sensor's rate, no noise, latency = configured fixed delay.

    Value names: joint_states ``steer_left, steer_right, steer_rate_left,
    steer_rate_right`` [rad, rad/s], ``wheel_angle_{0..3}`` [rad], ``wheel_omega_{0..3}``
    [rad/s] (FL, FR, RL, RR); odometry ``x, y, yaw, vx, vy, yaw_rate, pos_sigma,
    yaw_sigma``; imu ``yaw, yaw_rate, ax, ay, az``; gnss ``east, north, up, lat, lon,
    alt, h_sigma``.
    """
    config.validate()
    if len(trace) < 2:
        raise ValueError(f"trace {trace.scenario!r} has {len(trace)} samples; need at least 2")
    tt = np.asarray(trace.t, dtype=float)
    t0, t1 = float(tt[0]), float(tt[-1])
    out: dict[str, Series] = {}

    def make(key: str, rate: float, latency: float, values_fn: Any) -> None:
        t_ns = _sample_times_ns(t0, t1, rate)
        t = t_ns * 1e-9
        n = t.shape[0]
        out[key] = Series(
            key=key,
            t_ns=t_ns,
            values=values_fn(t),
            keep=np.ones(n, dtype=bool),
            delay_ns=np.full(n, int(round(latency * 1e9)), dtype=np.int64),
        )

    # joint states: road-wheel angles, steering rates, wheel angles and speeds
    omega = np.asarray(trace.wheel_omega, dtype=float)
    # wheel rotation angle: trapezoidal integral of the true angular speed
    wheel_angle = np.zeros_like(omega)
    wheel_angle[1:] = np.cumsum(0.5 * (omega[1:] + omega[:-1]) * np.diff(tt)[:, None], axis=0)
    steer_rate_l = np.gradient(np.asarray(trace.steer_left, dtype=float), tt)
    steer_rate_r = np.gradient(np.asarray(trace.steer_right, dtype=float), tt)

    def js_values(t: np.ndarray) -> dict[str, np.ndarray]:
        v = {
            "steer_left": _interp(t, tt, trace.steer_left),
            "steer_right": _interp(t, tt, trace.steer_right),
            "steer_rate_left": _interp(t, tt, steer_rate_l),
            "steer_rate_right": _interp(t, tt, steer_rate_r),
        }
        for j in range(4):
            v[f"wheel_angle_{j}"] = _interp(t, tt, wheel_angle[:, j])
            v[f"wheel_omega_{j}"] = _interp(t, tt, omega[:, j])
        return v

    js = config.joint_states
    make("joint_states", js.rate_hz, js.latency, js_values)

    od = config.odometry

    def odom_values(t: np.ndarray) -> dict[str, np.ndarray]:
        n = t.shape[0]
        return {
            "x": _interp(t, tt, trace.x),
            "y": _interp(t, tt, trace.y),
            "yaw": _interp(t, tt, trace.yaw),
            "vx": _interp(t, tt, trace.vx),
            "vy": _interp(t, tt, trace.vy),
            "yaw_rate": _interp(t, tt, trace.yaw_rate),
            "pos_sigma": np.full(n, od.position_std),
            "yaw_sigma": np.full(n, od.yaw_std),
        }

    make("odometry", od.rate_hz, od.latency, odom_values)

    im = config.imu

    def imu_values(t: np.ndarray) -> dict[str, np.ndarray]:
        return {
            "yaw": _interp(t, tt, trace.yaw),
            "yaw_rate": _interp(t, tt, trace.yaw_rate),
            "ax": _interp(t, tt, trace.ax),
            "ay": _interp(t, tt, trace.ay),
            "az": np.full(t.shape[0], STANDARD_GRAVITY),
        }

    make("imu", im.rate_hz, im.latency, imu_values)

    gn = config.gnss
    if gn.rate_hz > 0:

        def gnss_values(t: np.ndarray) -> dict[str, np.ndarray]:
            east = _interp(t, tt, trace.x)
            north = _interp(t, tt, trace.y)
            return {
                "east": east,
                "north": north,
                "up": np.zeros(t.shape[0]),
                "h_sigma": np.full(t.shape[0], gn.horizontal_std),
            }

        make("gnss", gn.rate_hz, gn.latency, gnss_values)

    return SensorSeries(
        series=out, duration=t1 - t0, wheel_radius=float(trace.vehicle.wheel_radius)
    )


def add_noise(series: SensorSeries, config: SensorConfig, seed: int) -> None:
    """Add white noise, biases, latency jitter and dropouts in place; fills gnss lat/lon/alt.

    Each topic draws from its own stream (``numpy.random.SeedSequence(seed).spawn``), so
    switching one topic on or off does not change another topic's noise.
    """
    seqs = np.random.SeedSequence(seed).spawn(len(TOPIC_KEYS))
    rngs = {key: np.random.default_rng(s) for key, s in zip(TOPIC_KEYS, seqs, strict=True)}
    for key, s in series.series.items():
        rng = rngs[key]
        cfg = getattr(config, key)
        n = len(s)
        v = s.values

        def noise(std: float, rng: np.random.Generator = rng, n: int = n) -> np.ndarray:
            return rng.normal(0.0, std, n) if std > 0 else np.zeros(n)

        if key == "joint_states":
            v["steer_left"] = v["steer_left"] + noise(cfg.steer_std)
            v["steer_right"] = v["steer_right"] + noise(cfg.steer_std)
            for j in range(4):
                v[f"wheel_omega_{j}"] = v[f"wheel_omega_{j}"] + noise(cfg.wheel_speed_std)
        elif key == "odometry":
            v["x"] = v["x"] + noise(cfg.position_std)
            v["y"] = v["y"] + noise(cfg.position_std)
            v["yaw"] = v["yaw"] + noise(cfg.yaw_std)
            v["vx"] = v["vx"] + noise(cfg.velocity_std)
            v["vy"] = v["vy"] + noise(cfg.velocity_std)
            v["yaw_rate"] = v["yaw_rate"] + noise(cfg.yaw_rate_std)
        elif key == "imu":
            v["yaw"] = v["yaw"] + noise(cfg.orientation_std)
            v["yaw_rate"] = v["yaw_rate"] + cfg.gyro_bias + noise(cfg.gyro_std)
            v["gyro_x"] = noise(cfg.gyro_std)
            v["gyro_y"] = noise(cfg.gyro_std)
            v["ax"] = v["ax"] + cfg.accel_bias_x + noise(cfg.accel_std)
            v["ay"] = v["ay"] + cfg.accel_bias_y + noise(cfg.accel_std)
            v["az"] = v["az"] + noise(cfg.accel_std)
        elif key == "gnss":
            v["east"] = v["east"] + noise(cfg.horizontal_std)
            v["north"] = v["north"] + noise(cfg.horizontal_std)
            v["up"] = v["up"] + noise(cfg.vertical_std)
        if cfg.jitter > 0:
            extra = np.round(rng.exponential(cfg.jitter, n) * 1e9).astype(np.int64)
            s.delay_ns = s.delay_ns + extra
        if cfg.dropout > 0:
            s.keep &= rng.random(n) >= cfg.dropout
        # one topic arrives in order (FIFO transport): arrival never goes backwards
        arrival = np.maximum.accumulate(s.t_ns + s.delay_ns)
        s.delay_ns = arrival - s.t_ns
    _fill_geodetic(series, config)


def _fill_geodetic(series: SensorSeries, config: SensorConfig) -> None:
    if "gnss" not in series.series:
        return
    g = series.series["gnss"].values
    gn = config.gnss
    lat, lon = local_to_geodetic(g["east"], g["north"], gn.origin_lat, gn.origin_lon)
    g["lat"], g["lon"], g["alt"] = lat, lon, gn.origin_alt + g["up"]


# --------------------------------------------------------------------------- records


@dataclass(frozen=True, slots=True)
class JointStateRecord:
    """sensor_msgs/JointState content: positions [rad], velocities [rad/s]."""

    stamp_ns: int
    arrival_ns: int
    name: tuple[str, ...]
    position: tuple[float, ...]
    velocity: tuple[float, ...]
    key: str = "joint_states"


@dataclass(frozen=True, slots=True)
class OdometryRecord:
    """nav_msgs/Odometry content: pose [m, quaternion] in frame_id, twist in child frame.

    Covariances are row-major 6x6 over (x, y, z, roll, pitch, yaw) / (vx, vy, vz, wx, wy, wz).
    """

    stamp_ns: int
    arrival_ns: int
    frame_id: str
    child_frame_id: str
    position: tuple[float, float, float]
    orientation: tuple[float, float, float, float]  # (x, y, z, w)
    pose_covariance: tuple[float, ...]
    linear: tuple[float, float, float]
    angular: tuple[float, float, float]
    twist_covariance: tuple[float, ...]
    key: str = "odometry"


@dataclass(frozen=True, slots=True)
class ImuRecord:
    """sensor_msgs/Imu content in the body frame; covariances row-major 3x3."""

    stamp_ns: int
    arrival_ns: int
    frame_id: str
    orientation: tuple[float, float, float, float]  # (x, y, z, w)
    orientation_covariance: tuple[float, ...]
    angular_velocity: tuple[float, float, float]  # [rad/s]
    angular_velocity_covariance: tuple[float, ...]
    linear_acceleration: tuple[float, float, float]  # [m/s^2], includes +g on z
    linear_acceleration_covariance: tuple[float, ...]
    key: str = "imu"


@dataclass(frozen=True, slots=True)
class NavSatFixRecord:
    """sensor_msgs/NavSatFix content: WGS84 degrees, altitude [m], ENU covariance [m^2]."""

    stamp_ns: int
    arrival_ns: int
    frame_id: str
    latitude: float
    longitude: float
    altitude: float
    position_covariance: tuple[float, ...]
    status: int = 0  # NavSatStatus.STATUS_FIX
    service: int = 1  # NavSatStatus.SERVICE_GPS
    covariance_type: int = 2  # NavSatFix.COVARIANCE_TYPE_DIAGONAL_KNOWN
    key: str = "gnss"


Record = JointStateRecord | OdometryRecord | ImuRecord | NavSatFixRecord


def _diag(values: tuple[float, ...]) -> tuple[float, ...]:
    n = len(values)
    return tuple(values[i] if i == j else 0.0 for i in range(n) for j in range(n))


def _yaw_quat(yaw: float) -> tuple[float, float, float, float]:
    half = 0.5 * yaw
    return (0.0, 0.0, math.sin(half), math.cos(half))


def _wrap(a: float) -> float:
    return (a + math.pi) % (2.0 * math.pi) - math.pi


def _iter_topic(s: Series, config: SensorConfig) -> Iterator[Record]:
    epoch = config.epoch_ns
    idx = np.flatnonzero(s.keep)
    stamps = (s.t_ns[idx] + epoch).tolist()
    arrivals = (s.t_ns[idx] + s.delay_ns[idx] + epoch).tolist()
    cols = {k: v[idx].tolist() for k, v in s.values.items()}
    n = len(stamps)
    if s.key == "joint_states":
        cfg = config.joint_states
        names = tuple(cfg.steer_joints) + tuple(cfg.wheel_joints)
        sl, sr = cols["steer_left"], cols["steer_right"]
        rl, rr = cols["steer_rate_left"], cols["steer_rate_right"]
        wa = [cols[f"wheel_angle_{j}"] for j in range(4)]
        wo = [cols[f"wheel_omega_{j}"] for j in range(4)]
        for i in range(n):
            yield JointStateRecord(
                stamps[i],
                arrivals[i],
                names,
                (sl[i], sr[i], _wrap(wa[0][i]), _wrap(wa[1][i]), _wrap(wa[2][i]), _wrap(wa[3][i])),
                (rl[i], rr[i], wo[0][i], wo[1][i], wo[2][i], wo[3][i]),
            )
    elif s.key == "odometry":
        od = config.odometry
        twist_cov = _diag(
            (od.velocity_std**2, od.velocity_std**2, 1e-4, 1e-4, 1e-4, od.yaw_rate_std**2)
        )
        x, y, yaw = cols["x"], cols["y"], cols["yaw"]
        vx, vy, wz = cols["vx"], cols["vy"], cols["yaw_rate"]
        ps, ys = cols["pos_sigma"], cols["yaw_sigma"]
        for i in range(n):
            p2 = ps[i] * ps[i]
            yield OdometryRecord(
                stamps[i],
                arrivals[i],
                od.frame_id,
                od.child_frame_id,
                (x[i], y[i], 0.0),
                _yaw_quat(yaw[i]),
                # z, roll, pitch are not estimated by a planar localisation: small fixed values
                _diag((p2, p2, 1e-2, 1e-3, 1e-3, ys[i] * ys[i])),
                (vx[i], vy[i], 0.0),
                (0.0, 0.0, wz[i]),
                twist_cov,
            )
    elif s.key == "imu":
        im = config.imu
        o_cov = _diag((1e-3, 1e-3, im.orientation_std**2))
        g_cov = _diag((im.gyro_std**2,) * 3)
        a_cov = _diag((im.accel_std**2,) * 3)
        yaw, gx, gy, gz = cols["yaw"], cols["gyro_x"], cols["gyro_y"], cols["yaw_rate"]
        ax, ay, az = cols["ax"], cols["ay"], cols["az"]
        for i in range(n):
            yield ImuRecord(
                stamps[i],
                arrivals[i],
                im.frame_id,
                _yaw_quat(yaw[i]),
                o_cov,
                (gx[i], gy[i], gz[i]),
                g_cov,
                (ax[i], ay[i], az[i]),
                a_cov,
            )
    elif s.key == "gnss":
        gn = config.gnss
        v2 = gn.vertical_std**2
        lat, lon, alt, hs = cols["lat"], cols["lon"], cols["alt"], cols["h_sigma"]
        for i in range(n):
            h2 = hs[i] * hs[i]
            yield NavSatFixRecord(
                stamps[i],
                arrivals[i],
                gn.frame_id,
                lat[i],
                lon[i],
                alt[i],
                (h2, 0.0, 0.0, 0.0, h2, 0.0, 0.0, 0.0, v2),
            )
    else:  # pragma: no cover - keys come from sample_truth
        raise ValueError(f"unknown simulated topic {s.key!r}")


def count_records(series: SensorSeries) -> dict[str, int]:
    """Messages that `iter_records` will yield, per topic."""
    return {k: int(np.count_nonzero(s.keep)) for k, s in series.series.items()}


def iter_records(series: SensorSeries, config: SensorConfig) -> Iterator[Record]:
    """All kept messages, merged in arrival order (ties: topic order of `TOPIC_KEYS`).

    Requires `add_noise` to have run (it fills ``gyro_x/gyro_y`` and geodetic gnss).
    """
    if "imu" in series.series and "gyro_x" not in series["imu"].values:
        series["imu"].values["gyro_x"] = np.zeros(len(series["imu"]))
        series["imu"].values["gyro_y"] = np.zeros(len(series["imu"]))
    if "gnss" in series.series and "lat" not in series["gnss"].values:
        _fill_geodetic(series, config)
    streams = [_iter_topic(series.series[k], config) for k in TOPIC_KEYS if k in series.series]
    order = {k: i for i, k in enumerate(TOPIC_KEYS)}
    return heapq.merge(*streams, key=lambda r: (r.arrival_ns, order[r.key]))
