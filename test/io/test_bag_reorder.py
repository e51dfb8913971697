"""A bag whose header stamps jump back: replay must order and reset exactly as the node.

The live node pushes every decoded message, in arrival order, through the reorder buffer
``core.ordering.input_buffer(config)`` and hands the monitor what it releases: samples in
stamp order and a ``TimeReset`` marker where the stamps jump back by more than the reset
threshold (the buffer's contract, module docstring of core/ordering.py). A bag is that
arrival order written down (log time = arrival), so the bag reader must give the very same
stream. The drive is simulated (invented proving-ground loop); after 6 s of it the
simulated clock restarts 60 s earlier, as a recorder restarted on a test bench would show;
both rosbag2 storages are checked.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

from kinematic_monitor.config.validation import MonitorConfig, validate
from kinematic_monitor.core import ordering
from kinematic_monitor.core.monitor import Monitor
from kinematic_monitor.core.ordering import TimeReset
from kinematic_monitor.io import decode
from kinematic_monitor.io.bag import open_bag
from kinematic_monitor.io.convert import JointMap, Rejected
from kinematic_monitor.sim.bagout import DEFAULT_TOPICS, record_cdr, vehicle_params, write_bag
from kinematic_monitor.sim.scenarios import SCENARIOS, simulate
from kinematic_monitor.sim.sensors import SensorConfig, add_noise, iter_records, sample_truth

JUMP_AT = 6.0  # [s] of the drive at which the clock restarts
JUMP_BACK = 60_000_000_000  # [ns] how far it goes back (far beyond the reset threshold)


def _records_with_jump() -> tuple[list[object], MonitorConfig]:
    trace = simulate(SCENARIOS["gentle_loop"](), duration=12.0, seed=4)
    cfg = SensorConfig()
    series = sample_truth(trace, cfg)
    add_noise(series, cfg, 4)
    records = list(iter_records(series, cfg))
    cut = cfg.epoch_ns + int(JUMP_AT * 1e9)
    out = []
    for r in records:
        if r.arrival_ns >= cut:  # arrival (log) time runs on; the stamps start again earlier
            r = dataclasses.replace(r, stamp_ns=r.stamp_ns - JUMP_BACK)
        out.append(r)
    config = validate(vehicle_params(trace.vehicle))
    return out, config


@pytest.fixture(scope="module")
def drive() -> tuple[list[object], MonitorConfig]:
    return _records_with_jump()


def _live_stream(records: list[object], config: MonitorConfig) -> list[object]:
    """What the node would hand the monitor: each message's bytes decoded, in arrival
    order, through the node's reorder buffer (GNSS places drives on maps offline only: the
    node does not take it)."""
    js = config.inputs.joint_states
    jmap = JointMap(js.steering_joints, js.front_wheel_joints, js.rear_wheel_joints,
                    steering_ratio=config.vehicle.steering_ratio)
    decoders = {"joint_states": decode.joint_state_decoder(jmap,
                                                           config.vehicle.max_road_wheel_angle),
                "odometry": decode.odometry, "imu": decode.imu}
    names = {"joint_states": "joint_states", "odometry": "localization", "imu": "imu"}
    buf = ordering.input_buffer(config)
    out: list[object] = []
    for r in sorted(records, key=lambda r: r.arrival_ns):  # type: ignore[attr-defined]
        if r.key == "gnss":  # type: ignore[attr-defined]
            continue
        got = decoders[r.key](record_cdr(r))  # type: ignore[attr-defined]
        if not isinstance(got, Rejected):
            out.extend(buf.push(got, names[r.key]))  # type: ignore[attr-defined]
    out.extend(buf.flush())
    return out


@pytest.mark.parametrize("storage", ["sqlite3", "mcap"])
def test_backward_clock_jump_resets_the_monitor_as_live(
        drive: tuple[list[object], MonitorConfig], storage: str, tmp_path: Path) -> None:
    records, config = drive
    bag = tmp_path / "jump"
    write_bag(bag, records, storage=storage, topics=DEFAULT_TOPICS)
    with open_bag(bag, config) as src:
        replayed = list(src.iter_samples())
        jumps = src.time_jumps
        late = {t: st.rejected["out_of_order"] for t, st in src.stats.items()
                if st.rejected["out_of_order"]}
    live = _live_stream(records, config)
    resets = [x for x in replayed if isinstance(x, TimeReset)]
    # one new timeline, announced to the consumer where it starts
    assert len(resets) == 1 and jumps == 1
    assert resets[0].previous - resets[0].stamp > JUMP_BACK * 1e-9 - JUMP_AT - 1.0
    # the very stream the node gives (same samples, same order, same marker)
    assert replayed == live
    # only GNSS (50 ms simulated latency, more than the 50 ms reorder window, and no say in
    # the watermark) comes too late for stamp order, as it does live
    assert set(late) <= {"/gnss/fix"}
    # and the monitor, reset at the jump, takes every later sample (none out of order)
    mon = Monitor(config)
    for item in replayed:
        mon.process(item)
    assert mon.counters["time_resets"] == 1
    assert mon.counters.get("rejected_out_of_order", 0) == 0
