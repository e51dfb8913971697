"""``kinematic-monitor calibrate``: estimate the vehicle calibration from recorded drives.

Thin adapter: reads the bags with :mod:`kinematic_monitor.io.bag`, runs
:func:`kinematic_monitor.core.calibration.calibrate` and writes a parameter file in the node's
schema (each calibrated value commented with its uncertainty and the data used) plus, with
``--report``, a text report and a JSON file of all figures. Estimates that have no parameter
yet (gyro bias and its drift, IMU yaw misalignment, per-wheel and front-axle wheel-speed
scales) are reported with their standard errors and listed in the parameter file's header
as comments; only declared parameters are written, so the node loads the file. Exit 2
(with a message naming the problem) for bad parameters, unreadable bags or too little
usable driving.

The fleet sweep (:mod:`kinematic_monitor.apps.sweep`) reads a file named
``calibrated_params.yaml`` in the bag folder or the bag's output folder: pass that as
``--out`` to have a sweep use the calibration (the default is whatever ``--out`` says).
A steering ratio correction is reported as new ratio = current ratio x fitted factor (the
converters divide steering-wheel angles by the ratio; see ``vehicle.steering_ratio``).
"""

from __future__ import annotations

import argparse
import json
import math
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from kinematic_monitor.apps.cli import EXIT_OK, UsageError, make_parent_folders

HELP = ("estimate steering offset, wheel-speed scales, geometry, understeer, gyro bias and IMU "
        "yaw from recorded drives")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of the ``calibrate`` subcommand."""
    parser.add_argument("bags", nargs="+", metavar="BAG", help="rosbag2 folder(s)")
    parser.add_argument("--params", required=True, metavar="FILE",
                        help="current parameter file (vehicle geometry and topics)")
    parser.add_argument("--out", required=True, metavar="NEW_PARAMS.yaml",
                        help="parameter file to write (refused if it exists, unless --force); "
                        "name it calibrated_params.yaml in the bag folder or the bag's "
                        "output folder for the fleet sweep to pick it up")
    parser.add_argument("--report", metavar="DIR", help="write calibration_report.txt and "
                        "calibration.json into DIR (created)")
    parser.add_argument("--events", action="append", default=[], metavar="EVENTS.json",
                        help="events.json of a replay: its event windows (+-1 s) are not "
                        "used (repeatable)")
    parser.add_argument("--min-usable", type=float, default=60.0, metavar="S",
                        help="least usable driving in seconds (default: 60)")
    parser.add_argument("--seed", type=int, default=0, help="bootstrap seed (default: 0)")
    parser.add_argument("--force", action="store_true", help="overwrite --out")


def _event_windows(paths: list[str]) -> list[tuple[float, float]]:
    out: list[tuple[float, float]] = []
    for p in paths:
        try:
            doc = json.loads(Path(p).read_text(encoding="utf-8"))
            for ev in doc["events"]:
                start, end = float(ev["start"]), ev.get("end")
                end_f = float(end) if end is not None else math.inf
                out.append((start - 1.0, end_f + 1.0))
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise UsageError(f"--events {p}: not a readable events.json ({exc})") from None
    return out


def _stream(path: str, config: Any) -> Iterator[Any]:
    """The bag's samples in stamp order (the calibration needs no TimeReset markers)."""
    from kinematic_monitor.core.ordering import TimeReset
    from kinematic_monitor.io.bag import open_bag

    with open_bag(path, config) as src:
        for s in src.iter_samples():
            if not isinstance(s, TimeReset):
                yield s


#: units shown also in degrees: unit -> (factor from rad, unit text)
_DEGREES = {"rad": (1.0, "deg"), "rad/s": (1.0, "deg/s"), "rad/s^2": (60.0, "deg/s per minute")}


def _fmt(x: float, unit: str, digits: int, sign: str = "") -> str:
    """``x`` in ``unit`` (none for '-') to ``digits`` significant digits, plus degrees for
    angles and angular rates (at most 4 digits)."""
    text = f"{x:{sign}.{digits}g}" + ("" if unit == "-" else f" {unit}")
    if unit in _DEGREES:
        factor, deg = _DEGREES[unit]
        text += f" ({math.degrees(x) * factor:{sign}.{min(digits, 4)}g} {deg})"
    return text


def _unc(e: Any) -> str:
    u = e.uncertainty
    if e.unit == "rad":
        return f"+-{u:.2g} rad ({math.degrees(u):.3f} deg)"
    return f"+-{u:.2g} {e.unit}"


def report_only_lines(result: Any, wheel_radius: float) -> list[str]:
    """One line per observable report-only estimate: value, derived units, 1 sigma."""
    lines = []
    for e in result.report_only():
        if not e.observable:
            continue
        value, sigma = _fmt(e.value, e.unit, 6, "+"), _fmt(e.uncertainty, e.unit, 2)
        text = f"{e.name:30s} {value} +-{sigma}"
        if e.name.endswith("wheel_speed_scale") and math.isfinite(wheel_radius):
            text += f"; effective radius {wheel_radius * e.value:.5f} m"
        lines.append("  " + text)
    return lines


def comments(result: Any, written: dict[str, Any]) -> dict[str, str]:
    """Per-parameter notes for the YAML: uncertainty and data used, or why not fitted."""
    from kinematic_monitor.core import calibration as cal

    notes: dict[str, str] = {}
    data = (f"{result.usable_seconds:.0f} s usable driving in {result.n_segments} segments")
    for e in result.estimates.values():
        if e.name not in written:
            continue
        extra = ""
        if e.name == "vehicle.understeer_gradient":
            extra = f" = {cal.per_g_degrees(e.fitted):.2f} deg/g" if e.observable else ""
        elif e.name == "vehicle.steering_ratio" and e.prior:
            extra = f" = {e.prior:.6g} x {e.value / e.prior:.5f}" if e.observable else ""
        if e.observable:
            notes[e.name] = (f"calibrated{extra} {_unc(e)} (1 sigma; fit {e.se_fit:.2g}, "
                             f"bootstrap {e.se_boot:.2g}) from {data}; was {e.prior:.6g}")
        else:
            notes[e.name] = f"not observable, kept: {e.reason}"
    k = result.estimates.get("vehicle.understeer_gradient")
    if k is not None and "vehicle.understeer_gradient" not in written:
        text = (f"understeer gradient K = {k.fitted:.5f} rad/(m/s^2) "
                f"({cal.per_g_degrees(k.fitted):.2f} deg/g) {_unc(k)}"
                if k.observable else f"understeer gradient not observable: {k.reason}")
        notes["vehicle"] = text
    f = result.estimates.get("front_wheel_speed_scale")
    if f is not None and "vehicle.wheel_speed_scale" in notes:
        notes["vehicle.wheel_speed_scale"] += (f"; rear axle (front axle {f.fitted:.5f} "
                                               f"{_unc(f)})")
    return notes


def report_text(result: Any, sources: list[str], wheel_radius: float = math.nan) -> str:
    """Plain-text report: estimates, residuals before/after, data used and rejected.

    ``wheel_radius`` [m] (``vehicle.wheel_radius``) turns wheel-speed scales into radii.
    """
    from kinematic_monitor.core import calibration as cal

    lines = ["kinematic-monitor calibration report", "", "data: " + ", ".join(sources),
             f"  {result.total_seconds:.0f} s of localisation, {result.usable_seconds:.0f} s "
             f"usable (gentle, steady), {result.k_usable_seconds:.0f} s for the understeer fit,"
             f" {result.n_segments} segments; yaw rate from {result.yaw_rate_source}; "
             f"steering input: {result.steering_input.replace('_', '-')} angle",
             f"  {result.imu_seconds:.0f} s of IMU with localisation for the IMU estimates", "",
             "rejected (first failing rule) [s]:"]
    for k, s in sorted(result.rejected_seconds.items(), key=lambda kv: -kv[1]):
        lines.append(f"  {k:40s} {s:8.1f}")
    lines += ["", f"{'parameter':28s} {'input':>12s} {'estimate':>30s}  "
              f"{'1-sigma (fit / bootstrap)':>28s}  status"]
    for e in result.estimates.values():
        status = "written" if e.observable and e.name.startswith("vehicle.") else (
            "report only" if e.observable else f"NOT OBSERVABLE ({e.reason})")
        val = e.fitted if math.isfinite(e.fitted) else e.value
        lines.append(f"{e.name:28s} {e.prior:12.6g} {val:30.6g}  "
                     f"{e.se_fit:13.2g} / {e.se_boot:<12.2g}  {status}")
    k = result.estimates.get("vehicle.understeer_gradient")
    if k is not None and math.isfinite(k.fitted):
        lines.append(f"  understeer gradient = {cal.per_g_degrees(k.fitted):.2f} deg/g "
                     "(delta = L/R + K a_y, Gillespie 1992 ch. 6; ISO 4138 steady state)")
    extra = report_only_lines(result, wheel_radius)
    if extra:
        lines += ["", "report-only estimates (no parameter yet; the monitor does not apply "
                  "them):", *extra]
    lines += ["", "residuals over the usable samples (mean / rms):"]
    for r in result.residuals:
        lines.append(f"  {r.name:40s} before {r.mean_before:+.4f} / {r.rms_before:.4f}  "
                     f"after {r.mean_after:+.4f} / {r.rms_after:.4f} {r.unit}")
    if result.notes:
        lines += ["", "notes:"] + [f"  - {n}" for n in result.notes]
    lines += ["", "Standard errors (1 sigma) come from the residuals: noise and the model error "
              "left in them (tyre transients) count; a model error that is the same in every "
              "sample (e.g. a mounting error) does not, so check the residuals too."]
    return "\n".join(lines) + "\n"


def result_json(result: Any) -> dict[str, Any]:
    """All figures as plain data."""
    def num(x: float) -> float | None:
        return float(x) if math.isfinite(x) else None

    return {
        "schema": "kinematic_monitor.calibration/1",
        "usable_seconds": result.usable_seconds,
        "k_usable_seconds": result.k_usable_seconds,
        "total_seconds": result.total_seconds,
        "segments": result.n_segments,
        "rejected_seconds": result.rejected_seconds,
        "steering_input": result.steering_input,
        "yaw_rate_source": result.yaw_rate_source,
        "imu_seconds": result.imu_seconds,
        "estimates": {e.name: {"unit": e.unit, "input": num(e.prior), "value": num(e.value),
                               "fitted": num(e.fitted), "se_fit": num(e.se_fit),
                               "se_bootstrap": num(e.se_boot), "observable": e.observable,
                               "reason": e.reason, "parameter": e.is_parameter}
                      for e in result.estimates.values()},
        "residuals": [vars(r) for r in result.residuals],
        "notes": result.notes,
    }


def run(args: argparse.Namespace) -> int:
    """Run ``calibrate``; returns the exit code (UsageError -> 2 via the CLI)."""
    from kinematic_monitor.config import files, schema, validation
    from kinematic_monitor.core import calibration as cal
    from kinematic_monitor.io.bag import BagError

    out = Path(args.out)
    if out.exists() and not args.force:
        raise UsageError(f"--out {out} exists already (use --force to overwrite)")
    if not (math.isfinite(args.min_usable) and args.min_usable > 0):
        raise UsageError(f"--min-usable {args.min_usable!r} must be a positive number of s")
    try:
        values = files.load_params_file(args.params)
        config = validation.validate(values)
    except schema.ParamError as exc:
        raise UsageError(f"--params {args.params}: {exc}") from None
    for b in args.bags:
        if not Path(b).exists():
            raise UsageError(f"bag {b} does not exist")
    exclude = _event_windows(args.events)
    rules = cal.SelectionRules(min_usable=args.min_usable)
    try:
        result = cal.calibrate([_stream(b, config) for b in args.bags], config, rules,
                               exclude=exclude, seed=args.seed)
    except BagError as exc:
        raise UsageError(str(exc)) from None
    except cal.CalibrationError as exc:
        raise UsageError(str(exc)) from None
    updates = result.parameter_updates()
    if "vehicle.understeer_gradient" not in schema.SPEC_BY_NAME:
        updates.pop("vehicle.understeer_gradient", None)
    new_values = {**values, **updates}
    try:
        validation.validate(new_values)
    except schema.ParamError as exc:
        raise UsageError(f"calibrated parameters are out of range, not written: {exc}") from None
    notes = comments(result, new_values)
    header = [
        "# written by kinematic-monitor calibrate from: " + ", ".join(args.bags),
        f"# input parameters: {args.params}; {result.usable_seconds:.0f} s usable of "
        f"{result.total_seconds:.0f} s; uncertainties are 1 sigma",
    ]
    wheel_radius = config.vehicle.wheel_radius
    only = report_only_lines(result, wheel_radius)
    if only:
        header += ["# report only (no parameter yet, not applied by the monitor):",
                   *("#" + line for line in only)]
    body = files.dumps_params_yaml(new_values, notes)
    make_parent_folders(out, "--out")
    out.write_text("\n".join(header) + "\n" + body, encoding="utf-8")
    text = report_text(result, list(args.bags), wheel_radius)
    if args.report:
        rep = Path(args.report)
        try:
            rep.mkdir(parents=True, exist_ok=True)
            (rep / "calibration_report.txt").write_text(text, encoding="utf-8")
            (rep / "calibration.json").write_text(
                json.dumps(result_json(result), indent=2, allow_nan=False) + "\n",
                encoding="utf-8")
        except OSError as exc:
            raise UsageError(f"--report {rep}: cannot write ({exc.strerror})") from None
    print(text, end="")
    print(f"wrote {out}")
    return EXIT_OK
