"""Bag reading speed, measured side by side in one run (compare the ratios, not the seconds).

Usage: python bench/bag_read.py [--minutes 10] [--keep DIR] [BAG ...]

Without BAG arguments it writes a bag with JointState 100 Hz (6 joints), Imu 200 Hz and
Odometry 50 Hz (10 minutes: 210 000 messages) in both storages, then prints for each:
raw records only; raw + rosbags typestore deserialise; raw + our decoders (io.decode);
kinematic_monitor.io.bag.iter_samples() (decode + validate + samples + stamp ordering).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from rosbags.rosbag2 import Reader, StoragePlugin, Writer  # noqa: E402
from rosbags.typesys import Stores, get_typestore  # noqa: E402

from kinematic_monitor.io import decode  # noqa: E402
from kinematic_monitor.io.bag import open_bag  # noqa: E402
from kinematic_monitor.io.convert import JointMap  # noqa: E402

TS = get_typestore(Stores.ROS2_HUMBLE)
TOPICS = {
    "/joint_states": "sensor_msgs/msg/JointState",
    "/imu/data": "sensor_msgs/msg/Imu",
    "/localization/odom": "nav_msgs/msg/Odometry",
}


def write(path: Path, storage: StoragePlugin, minutes: float) -> None:
    """Invented test-track drive: steady 9 m/s with a slow steering sine."""
    import math

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "test"))
    from test_bag import imu, joint_state, odometry  # message builders of the tests

    t0 = 1_800_000_000
    n = int(minutes * 60 * 200)
    with Writer(path, version=9, storage_plugin=storage) as w:
        conns = {t: w.add_connection(t, m, typestore=TS) for t, m in TOPICS.items()}
        for i in range(n):  # 200 Hz base tick
            t = t0 + i * 0.005
            ns = int(round(t * 1e9))
            w.write(conns["/imu/data"], ns + 500_000, imu(t))
            if i % 2 == 0:
                steer = 0.1 * math.sin(0.2 * t)
                w.write(conns["/joint_states"], ns + 200_000, joint_state(t, steer=steer))
            if i % 4 == 0:
                w.write(conns["/localization/odom"], ns + 20_000_000, odometry(t, 9.0 * i * 0.005))


def raw_only(path: Path) -> int:
    n = 0
    with Reader(path) as r:
        for _ in r.messages():
            n += 1
    return n


def raw_deserialise(path: Path) -> int:
    n = 0
    with Reader(path) as r:
        for conn, _, data in r.messages():
            TS.deserialize_cdr(data, conn.msgtype)
            n += 1
    return n


def raw_decode(path: Path) -> int:
    from kinematic_monitor.io.bag import inputs_from_config

    inp = inputs_from_config(None)
    jmap = JointMap(inp.steering_joints, inp.front_wheel_joints, inp.rear_wheel_joints)
    decoders = {t: decode.decoder_for(t, jmap) for t in decode.DECODED_TYPES}
    n = 0
    with Reader(path) as r:
        for conn, _, data in r.messages():
            decoders[conn.msgtype](data)
            n += 1
    return n


def ours(path: Path) -> int:
    n = 0
    with open_bag(path, {"inputs.gnss.topic": ""}) as src:
        for _ in src.iter_samples():
            n += 1
    return n


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("bags", nargs="*", type=Path)
    ap.add_argument("--minutes", type=float, default=10.0)
    ap.add_argument("--keep", type=Path, help="write the bags here (default: temporary)")
    ap.add_argument("--repeat", type=int, default=2, help="best of N per method")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        bags = list(args.bags)
        if not bags:
            root = args.keep or Path(tmp)
            for storage in (StoragePlugin.SQLITE3, StoragePlugin.MCAP):
                path = root / f"bench_{storage.name.lower()}"
                if not path.exists():
                    t = time.perf_counter()
                    write(path, storage, args.minutes)
                    print(f"wrote {path} in {time.perf_counter() - t:.1f} s")
                bags.append(path)
        for path in bags:
            with Reader(path) as r:
                total = r.message_count
            print(f"\n{path.name}: {total} messages")
            best: dict[str, float] = {}
            for _ in range(args.repeat):  # interleaved, so drifts hit every method alike
                for name, fn in (
                    ("raw read", raw_only),
                    ("raw + rosbags deserialise", raw_deserialise),
                    ("raw + kinematic_monitor.io.decode", raw_decode),
                    ("kinematic_monitor iter_samples", ours),
                ):
                    t = time.perf_counter()
                    fn(path)
                    dt = time.perf_counter() - t
                    best[name] = min(best.get(name, dt), dt)
            base = best["raw read"]
            for name, dt in best.items():
                print(
                    f"  {name:32s} {dt:7.2f} s {dt / total * 1e6:6.1f} us/msg"
                    f"  x{dt / base:4.2f} of raw read"
                )
            ratio = best["raw + rosbags deserialise"] / best["kinematic_monitor iter_samples"]
            print(f"  iter_samples is {ratio:.2f}x faster than raw + rosbags deserialise")


if __name__ == "__main__":
    main()
