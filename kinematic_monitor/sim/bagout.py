"""Write simulated sensor records into a rosbag2 folder, plus ``truth.json`` and params.

Uses ``rosbags`` (pure Python, no ROS install): rosbag2 format version 9, storage
``sqlite3`` or ``mcap``, message definitions from the ROS 2 Jazzy typestore (the four
message types used here are identical in Humble, Jazzy and Kilted); message bytes from
the project's one CDR encoder, :mod:`kinematic_monitor.io.encode`. Each message is
logged at its arrival time (stamp + simulated latency), as a recorder would.

Folder layout written by `write_simulation` (``OUT`` is the bag folder itself)::

    OUT/metadata.yaml, OUT/OUT.db3 or OUT/OUT.mcap   the rosbag2 bag
    OUT/truth.json                                   what was simulated and injected
    OUT/params.yaml                                  vehicle geometry in the node's schema
"""

from __future__ import annotations

import dataclasses
import json
import math
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

import numpy as np

from kinematic_monitor.io import encode
from kinematic_monitor.sim.faults import Fault, TruthInterval, apply_faults
from kinematic_monitor.sim.sensors import (
    ImuRecord,
    JointStateRecord,
    NavSatFixRecord,
    OdometryRecord,
    Record,
    SensorConfig,
    add_noise,
    count_records,
    iter_records,
    sample_truth,
)

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.sim.trace import TrueTrace

STORAGES = ("sqlite3", "mcap")
BAG_VERSION: Literal[9] = 9
TRUTH_SCHEMA = "kinematic_monitor.sim_truth/1"

DEFAULT_TOPICS: dict[str, tuple[str, str]] = {
    "joint_states": ("/joint_states", "sensor_msgs/msg/JointState"),
    "odometry": ("/localization/odom", "nav_msgs/msg/Odometry"),
    "imu": ("/imu/data", "sensor_msgs/msg/Imu"),
    "gnss": ("/gnss/fix", "sensor_msgs/msg/NavSatFix"),
}
"""Record key -> (topic, message type), DESIGN.md section 1 defaults."""


def _typestore() -> Any:
    from rosbags.typesys import Stores, get_typestore

    return get_typestore(Stores.ROS2_JAZZY)


_NS = 1_000_000_000


def record_cdr(r: Record) -> bytes:
    """CDR bytes of one record, as the message type its topic carries (``io.encode``)."""
    sec, nanosec = divmod(r.stamp_ns, _NS)
    if isinstance(r, JointStateRecord):
        return encode.joint_state(sec, nanosec, "", r.name, r.position, r.velocity)
    if isinstance(r, OdometryRecord):
        return encode.odometry(sec, nanosec, r.frame_id, r.child_frame_id, r.position,
                               r.orientation, r.pose_covariance, r.linear, r.angular,
                               r.twist_covariance)
    if isinstance(r, ImuRecord):
        return encode.imu(sec, nanosec, r.frame_id, r.orientation, r.orientation_covariance,
                          r.angular_velocity, r.angular_velocity_covariance,
                          r.linear_acceleration, r.linear_acceleration_covariance)
    if isinstance(r, NavSatFixRecord):
        return encode.navsatfix(sec, nanosec, r.frame_id, r.status, r.service, r.latitude,
                                r.longitude, r.altitude, r.position_covariance,
                                r.covariance_type)
    raise TypeError(f"cannot serialise record of type {type(r).__name__}")


def write_bag(
    path: str | Path,
    records: Iterable[Record],
    *,
    storage: str = "sqlite3",
    topics: Mapping[str, tuple[str, str]] = DEFAULT_TOPICS,
    only: Iterable[str] | None = None,
    on_message: Callable[[], None] | None = None,
) -> dict[str, int]:
    """Stream ``records`` (arrival-ordered) into a new rosbag2 folder at ``path``.

    ``only``: record keys to register as topics (default: all in ``topics``); a record
    with another key raises ``ValueError``. Log time = ``arrival_ns``. Returns message
    counts per record key. A failed write leaves no half-written bag behind.
    """
    from rosbags.rosbag2 import StoragePlugin, Writer

    if storage not in STORAGES:
        raise ValueError(f"storage {storage!r} is not one of {', '.join(STORAGES)}")
    plugin = StoragePlugin.SQLITE3 if storage == "sqlite3" else StoragePlugin.MCAP
    path = Path(path)
    if path.exists():
        raise FileExistsError(f"bag output {path} exists already")
    keys = list(only) if only is not None else list(topics)
    store = _typestore()
    counts = {k: 0 for k in keys}
    writer = Writer(path, version=BAG_VERSION, storage_plugin=plugin)
    writer.open()
    try:
        conns = {}
        for key in keys:
            topic, msgtype = topics[key]
            conns[key] = writer.add_connection(topic, msgtype, typestore=store)
        for r in records:
            try:
                conn = conns[r.key]
            except KeyError:
                raise ValueError(f"record for topic key {r.key!r} not among {keys}") from None
            writer.write(conn, r.arrival_ns, record_cdr(r))
            counts[r.key] += 1
            if on_message is not None:
                on_message()
    except BaseException:
        writer.abort()
        _remove_tree(path)
        raise
    writer.close()
    return counts


def _remove_tree(path: Path) -> None:
    if not path.exists():
        return
    for child in sorted(path.rglob("*"), key=lambda p: len(p.parts), reverse=True):
        if child.is_dir():
            child.rmdir()
        else:
            child.unlink()
    path.rmdir()


def _jsonable(value: Any) -> Any:
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {k: _jsonable(v) for k, v in dataclasses.asdict(value).items()}
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return _jsonable(value.tolist())
    if isinstance(value, np.generic):
        return _jsonable(value.item())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def interval_to_dict(iv: TruthInterval, epoch_ns: int) -> dict[str, Any]:
    """A truth interval with absolute header-stamp times [s] and simulated times [s]."""
    epoch = epoch_ns * 1e-9
    return {
        "kind": iv.kind,
        "start": epoch + float(iv.start),
        "end": epoch + float(iv.end),
        "sim_start": float(iv.start),
        "sim_end": float(iv.end),
        "detail": _jsonable(iv.detail),
    }


def vehicle_params(vehicle: Any) -> dict[str, float]:
    """``vehicle.*`` parameters (DESIGN.md section 2) from a simulated vehicle."""
    out = {
        "vehicle.wheelbase": float(vehicle.wheelbase),
        "vehicle.cg_to_rear_axle": float(vehicle.cg_to_rear_axle),
        "vehicle.wheel_radius": float(vehicle.wheel_radius),
        "vehicle.track_width": float(vehicle.track_width),
    }
    max_angle = getattr(vehicle, "max_road_wheel_angle", None)
    max_steer = getattr(vehicle, "max_steer", None)
    if max_angle is None and max_steer is not None and 0.0 < max_steer < 1.5:
        # the inner road wheel turns further than the bicycle angle (Ackermann geometry:
        # tan(delta_in) = L / (L / tan(delta) - w/2)); allow it plus 0.05 rad margin
        L, half = float(vehicle.wheelbase), 0.5 * float(vehicle.track_width)
        r = L / math.tan(float(max_steer)) - half
        if r > 0:
            max_angle = math.ceil((math.atan(L / r) + 0.05) * 100.0) / 100.0
    if max_angle is not None:
        out["vehicle.max_road_wheel_angle"] = float(max_angle)
    understeer = getattr(vehicle, "understeer_gradient", None)
    if callable(understeer):
        # as `kinematic-monitor calibrate` would estimate it from a steady-state drive
        out["vehicle.understeer_gradient"] = round(float(understeer()), 6)
    return out


def write_params_yaml(path: str | Path, vehicle: Any) -> None:
    """The node's parameter file with the simulated vehicle's true geometry."""
    from kinematic_monitor.config.files import dump_params_yaml

    dump_params_yaml(
        vehicle_params(vehicle),
        path,
        comments={"vehicle": "true geometry of the simulated vehicle"},
    )


def write_truth_json(
    path: str | Path,
    *,
    scenario: str,
    seed: int,
    duration: float,
    config: SensorConfig,
    vehicle: Any,
    faults: Iterable[Fault],
    intervals: Iterable[TruthInterval],
    counts: Mapping[str, int],
    storage: str,
    topics: Mapping[str, tuple[str, str]] = DEFAULT_TOPICS,
) -> None:
    """What was simulated: scenario, seed, epoch, vehicle, sensors, faults, truth windows.

    Interval ``start``/``end`` are header-stamp seconds (epoch + simulated time).
    """
    doc = {
        "schema": TRUTH_SCHEMA,
        "scenario": scenario,
        "seed": seed,
        "duration": duration,
        "epoch": config.epoch_ns * 1e-9,
        "epoch_ns": config.epoch_ns,
        "storage": storage,
        "vehicle": _jsonable(vehicle),
        "sensors": config.to_dict(),
        "topics": {
            k: {"topic": topics[k][0], "type": topics[k][1], "count": n} for k, n in counts.items()
        },
        "faults": [f.to_dict() for f in faults],
        "truth": [interval_to_dict(iv, config.epoch_ns) for iv in intervals],
    }
    Path(path).write_text(json.dumps(_jsonable(doc), indent=2) + "\n", encoding="utf-8")


@dataclasses.dataclass
class SimulationOutput:
    """Where `write_simulation` put things, and what it wrote."""

    bag: Path
    truth: Path
    params: Path
    counts: dict[str, int]
    intervals: list[TruthInterval]


def write_simulation(
    out: str | Path,
    trace: TrueTrace,
    *,
    seed: int = 0,
    storage: str = "sqlite3",
    config: SensorConfig | None = None,
    faults: Iterable[Fault] = (),
    scenario_truth: Iterable[TruthInterval] = (),
    progress: Callable[[int], Callable[[], None] | None] | None = None,
) -> SimulationOutput:
    """Sensors + faults + bag + truth.json + params.yaml for one simulated drive.

    ``scenario_truth``: the drive's own truth windows (e.g. slip), simulated time [s].
    ``progress(total)`` may return a per-message callback (e.g. a progress bar update).
    """
    config = config if config is not None else SensorConfig()
    faults = list(faults)
    out = Path(out)
    series = sample_truth(trace, config)
    fault_truth = apply_faults(series, faults)
    add_noise(series, config, seed)
    expected = count_records(series)
    tick = progress(sum(expected.values())) if progress is not None else None
    counts = write_bag(
        out,
        iter_records(series, config),
        storage=storage,
        only=list(series.series),
        on_message=tick,
    )
    intervals = sorted(
        [*scenario_truth, *fault_truth], key=lambda iv: (float(iv.start), str(iv.kind))
    )
    truth_path = out / "truth.json"
    params_path = out / "params.yaml"
    write_truth_json(
        truth_path,
        scenario=trace.scenario,
        seed=seed,
        duration=series.duration,
        config=config,
        vehicle=trace.vehicle,
        faults=faults,
        intervals=intervals,
        counts=counts,
        storage=storage,
    )
    write_params_yaml(params_path, trace.vehicle)
    return SimulationOutput(out, truth_path, params_path, counts, intervals)
