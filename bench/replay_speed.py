"""Replay speed, measured side by side in one run on a simulated 10-minute drive.

Prints: bare rosbags read + deserialise of every message; our bag reader alone
(``bag.iter_samples``); the one decoder per type (``io.decode``) beside rosbags'
deserialiser per message type; the whole ``kinematic-monitor replay --no-report`` command as a
subprocess (start-up included), by default (read-ahead on a machine with two or more
cores) and with ``--read-ahead off``; the report generation alone; and the ratios against
the targets (replay <= 2x the bare read, >= 100x real time, report <= 5 s).

Usage: python bench/replay_speed.py [--bag DIR] [--duration S] [--storage sqlite3|mcap]
                                   [--repeat N] [--baseline SRC_DIR]
``--baseline`` also times the replay command of another copy of the package (a folder
holding ``kinematic_monitor/``, e.g. an earlier checkout) in the same run, for a
before/after comparison measured side by side.
Without --bag a drive is simulated into a temporary folder (JointState 100 Hz, Imu 200 Hz,
Odometry 50 Hz, NavSatFix 10 Hz: about 216 000 messages for 600 s).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

RUN_REPLAY = (  # the package's command line, in today's layout or an earlier flat one
    "import sys\n"
    "try:\n"
    "    from kinematic_monitor.apps import cli\n"
    "except ImportError:\n"
    "    from kinematic_monitor import cli\n"
    "sys.exit(cli.main(sys.argv[1:]))\n"
)


def simulate(out: Path, duration: float, storage: str) -> Path:
    from kinematic_monitor.sim.bagout import write_simulation
    from kinematic_monitor.sim.scenarios import SCENARIOS, simulate

    trace = simulate(SCENARIOS["mixed_loop"](duration=duration), duration=duration, seed=11)
    write_simulation(out, trace, seed=11, storage=storage)
    return out


def bare_read(bag: Path) -> tuple[float, float, int]:
    """rosbags Reader + typestore deserialise of every message: (wall, cpu, count)."""
    from rosbags.rosbag2 import Reader
    from rosbags.typesys import Stores, get_typestore

    store = get_typestore(Stores.ROS2_JAZZY)
    t, c = time.perf_counter(), time.process_time()
    n = 0
    with Reader(bag) as reader:
        for conn, _ts, raw in reader.messages():
            store.deserialize_cdr(raw, conn.msgtype)
            n += 1
    return time.perf_counter() - t, time.process_time() - c, n


def our_reader(bag: Path, params: Path) -> tuple[float, float, int]:
    """kinematic_monitor.io.bag: read, decode the used fields, convert, order by stamp."""
    from kinematic_monitor.config.files import load_config
    from kinematic_monitor.io.bag import open_bag

    cfg = load_config(params)
    t, c = time.perf_counter(), time.process_time()
    n = 0
    with open_bag(bag, cfg) as src:
        for _ in src.iter_samples():
            n += 1
    return time.perf_counter() - t, time.process_time() - c, n


def decode_compare(bag: Path, params: Path, reps: int = 3) -> list[tuple[str, int, float, float]]:
    """Per message type: (type, count, µs rosbags deserialise, µs io.decode).

    Both run on the same in-memory CDR bytes, alternating, best of ``reps``.
    """
    from rosbags.rosbag2 import Reader
    from rosbags.typesys import Stores, get_typestore

    from kinematic_monitor.config.files import load_config
    from kinematic_monitor.io import convert, decode
    from kinematic_monitor.io.bag import inputs_from_config

    store = get_typestore(Stores.ROS2_JAZZY)
    inp = inputs_from_config(load_config(params))
    jmap = convert.JointMap(inp.steering_joints, inp.front_wheel_joints, inp.rear_wheel_joints)
    data: dict[str, list[bytes]] = {}
    with Reader(bag) as reader:
        for conn, _ts, raw in reader.messages():
            if conn.msgtype in decode.DECODED_TYPES:
                data.setdefault(conn.msgtype, []).append(bytes(raw))
    out = []
    for t, bufs in data.items():
        new = decode.decoder_for(t, jmap, inp.max_steer)

        def ref(b: bytes, t: str = t) -> object:
            return store.deserialize_cdr(b, t)

        best = {"ref": math.inf, "new": math.inf}
        for _ in range(reps):
            for name, fn in (("ref", ref), ("new", new)):
                c = time.process_time()
                for b in bufs:
                    fn(b)
                best[name] = min(best[name], time.process_time() - c)
        out.append((t, len(bufs), 1e6 * best["ref"] / len(bufs), 1e6 * best["new"] / len(bufs)))
    return out


def core_only(bag: Path, params: Path) -> tuple[float, float]:
    """Bag reader + Monitor.process on every sample, in-process, no outputs at all."""
    from kinematic_monitor.config.files import load_config
    from kinematic_monitor.core.monitor import Monitor
    from kinematic_monitor.io.bag import open_bag

    cfg = load_config(params)
    mon = Monitor(cfg)
    t, c = time.perf_counter(), time.process_time()
    last = float("nan")
    with open_bag(bag, cfg) as src:
        for s in src.iter_samples():
            mon.process(s)
            last = s.stamp
    mon.flush(last)
    return time.perf_counter() - t, time.process_time() - c


def replay_command(bag: Path, params: Path, out: Path,
                   src: Path | None = None, extra: tuple[str, ...] = ()
                   ) -> tuple[float, float, str]:
    """The whole command in a fresh interpreter: (wall, child cpu, summary line).

    ``src``: run the package found in this folder instead of the installed one;
    ``extra``: more command-line options. CPU counts every process (the read-ahead too).
    """
    env = {**os.environ, "CI": "true"}
    if src is not None:
        env["PYTHONPATH"] = os.pathsep.join([str(src), env.get("PYTHONPATH", "")]).rstrip(
            os.pathsep)
    before = os.times()
    t = time.perf_counter()
    r = subprocess.run([sys.executable, "-c", RUN_REPLAY, "replay", str(bag), "--params",
                        str(params), "--out", str(out), "--no-report", "--json-summary",
                        "--force", *extra],
                       capture_output=True, text=True, env=env, timeout=3600,
                       cwd=src)  # `python -c` puts the working folder first on sys.path
    wall = time.perf_counter() - t
    after = os.times()
    if r.returncode not in (0, 1):
        raise SystemExit(f"replay failed ({r.returncode}): {r.stderr[-2000:]}")
    cpu = (after.children_user - before.children_user) + (
        after.children_system - before.children_system)
    return wall, cpu, r.stdout.strip().splitlines()[-1]


def report_time(out: Path, bag: Path) -> tuple[float, float, int]:
    """Report rendering from the replay's outputs (in-process, matplotlib imported first)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot  # noqa: F401 - import cost is not the report's

    from kinematic_monitor.apps.report import ReportData, render_report
    from kinematic_monitor.io.timeseries import read_timeseries

    t, c = time.perf_counter(), time.process_time()
    series = read_timeseries(out / "timeseries.csv")
    events = json.loads((out / "events.json").read_text())["events"]
    html = render_report(ReportData(source=str(bag), series=series, events=events))
    return time.perf_counter() - t, time.process_time() - c, len(html)


def read_ahead_used(messages: int) -> bool:
    """Whether the default ``--read-ahead auto`` reads ahead on this machine and bag."""
    from kinematic_monitor.io import readahead

    return readahead.wanted("auto", messages)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--bag", type=Path, help="existing simulated bag folder (with params.yaml)")
    ap.add_argument("--params", type=Path, help="parameter file (default: BAG/params.yaml)")
    ap.add_argument("--duration", type=float, default=600.0, help="simulated drive [s]")
    ap.add_argument("--storage", choices=("sqlite3", "mcap"), default="sqlite3")
    ap.add_argument("--repeat", type=int, default=3,
                    help="rounds of bare read + replay, alternated (default 3)")
    ap.add_argument("--baseline", type=Path,
                    help="folder holding another kinematic_monitor/ to time side by side")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="km_bench_") as tmp:
        tmpdir = Path(tmp)
        bag = args.bag
        if bag is None:
            t = time.perf_counter()
            bag = simulate(tmpdir / "drive", args.duration, args.storage)
            print(f"simulated {args.duration:.0f} s drive into {bag} "
                  f"in {time.perf_counter() - t:.1f} s")
        params = args.params or bag / "params.yaml"

        ours_w, ours_c, ns = our_reader(bag, params)
        core_w, core_c = core_only(bag, params)
        # the target pair, alternated --repeat times: each round's ratio is measured side
        # by side; the figures printed below are those of the median round
        rounds = []
        for _ in range(max(1, args.repeat)):
            bare_w, bare_c, n = bare_read(bag)
            rep_w, rep_c, summary_line = replay_command(bag, params, tmpdir / "out")
            one_w, one_c, one_line = replay_command(bag, params, tmpdir / "out_one",
                                                    extra=("--read-ahead", "off"))
            if json.loads(one_line)["events"] != json.loads(summary_line)["events"]:
                raise SystemExit("--read-ahead off gives other events than the default")
            rounds.append((rep_w / bare_w, bare_w, bare_c, n, rep_w, rep_c, summary_line,
                           one_w, one_c))
        ratios = sorted(r[0] for r in rounds)
        median = sorted(rounds, key=lambda r: r[0])[len(rounds) // 2]
        _, bare_w, bare_c, n, rep_w, rep_c, summary_line, one_w, one_c = median
        base = None
        if args.baseline is not None:
            base = replay_command(bag, params, tmpdir / "out_baseline", args.baseline)
        rpt_w, rpt_c, size = report_time(tmpdir / "out", bag)
        decode = decode_compare(bag, params)
        summary = json.loads(summary_line)
        duration = float(summary["duration_s"])

    print(f"messages: {n}, samples: {ns}, drive: {duration:.1f} s, "
          f"events: {summary['events']['total']}")
    print(f"{'what':44s} {'wall s':>8s} {'cpu s':>8s}")
    print(f"{'bare rosbags read + deserialise':44s} {bare_w:8.2f} {bare_c:8.2f}")
    print(f"{'bag.iter_samples (read, decode, order)':44s} {ours_w:8.2f} {ours_c:8.2f}")
    print(f"{'bag + Monitor.process only (in-process)':44s} {core_w:8.2f} {core_c:8.2f}")
    print(f"{'replay --no-report (subprocess, start-up)':44s} {rep_w:8.2f} {rep_c:8.2f}")
    print(f"{'  the same, --read-ahead off (one process)':44s} {one_w:8.2f} {one_c:8.2f}")
    print(f"{f'report rendering (html {size / 1024:.0f} kB)':44s} {rpt_w:8.2f} "
          f"{rpt_c:8.2f}")
    if base is not None:
        print(f"{'replay --no-report, baseline ' + args.baseline.name:44s} {base[0]:8.2f} "
              f"{base[1]:8.2f}")
        same = json.loads(base[2])["events"] == summary["events"]
        print(f"baseline / this: {base[0] / rep_w:.2f}x wall, "
              f"{base[1] / max(rep_c, 1e-9):.2f}x cpu; event counts "
              f"{'identical' if same else 'DIFFER'}")
    print("decode per message (cpu, same bytes in memory):")
    for kind, count, two, new in decode:
        print(f"  {kind:30s} n={count:6d}  rosbags {two:5.2f} us  io.decode {new:5.2f} us  "
              f"({two / max(new, 1e-9):.1f}x)")
    per = 1e6 / max(n, 1)
    print(f"per message (cpu): bare {bare_c * per:.1f} us, reader {ours_c * per:.1f} us, "
          f"reader + monitor {core_c * per:.1f} us, replay command {rep_c * per:.1f} us")
    print(f"replay / bare read, wall, per round: {', '.join(f'{r:.2f}' for r in ratios)} "
          f"(median round shown below)")
    ratio_w, ratio_c = rep_w / bare_w, rep_c / max(bare_c, 1e-9)
    print(f"replay / bare read: {ratio_w:.2f}x wall, {ratio_c:.2f}x cpu (target <= 2x wall; "
          f"read-ahead: {'yes' if read_ahead_used(n) else 'no'})")
    print(f"replay --read-ahead off / bare read: {one_w / bare_w:.2f}x wall, "
          f"{one_c / max(bare_c, 1e-9):.2f}x cpu")
    print(f"replay / core alone: {rep_w / core_w:.2f}x wall (outputs, time series, start-up)")
    print(f"replay speed: {duration / rep_w:.0f}x real time wall, "
          f"{duration / max(rep_c, 1e-9):.0f}x cpu (target >= 100x)")
    print(f"report: {rpt_w:.2f} s wall, {rpt_c:.2f} s cpu (target <= 5 s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
