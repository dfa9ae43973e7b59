"""``livecoach replay``: feed a recording (or a CSV ride) through the pipeline again.

A recording (``*.lcrec``) carries its own ride file; replay rebuilds the
pipeline from it, feeds every recorded event in order (as fast as possible,
or at ``--speed N`` times real time), checks that the outputs stored in the
recording come out again, and prints the summary. A CSV ride needs
``--config RIDE.toml``. ``--json`` prints one JSON object with stable keys;
replaying twice prints the same bytes.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from livecoach.cli.common import description_from_doc, print_json

NAME = "replay"
HELP = "replay a recording (or a CSV ride with --config) through the pipeline; print the summary"
DESCRIPTION = description_from_doc(__doc__, HELP)


def _positive(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not x > 0.0 or x == float("inf"):
        raise argparse.ArgumentTypeError(f"{text!r}: expected a positive factor, e.g. 1 or 10")
    return x


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("input", metavar="RECORDING", help="a recording (.lcrec) or a CSV ride (.csv, needs --config)")
    p.add_argument("--config", "-c", metavar="RIDE.toml",
                   help="ride file: required for a CSV ride; for a recording it replaces the recorded one")
    p.add_argument("--plan", metavar="PLAN.csv", help="run-up plan to coach with (default: the recorded one, if any)")
    p.add_argument("--speed", type=_positive, metavar="N",
                   help="replay at N times real time (default: as fast as possible)")
    p.add_argument("--strict", action="store_true",
                   help="stop with an error at the first damaged record instead of skipping it")
    p.add_argument("--json", action="store_true", help="print the summary as one JSON object")


def run(args: argparse.Namespace) -> int:
    from livecoach.config.ridefile import load_ride_file
    from livecoach.errors import ConfigError
    from livecoach.recording.reader import is_recording

    path = Path(args.input)
    if not path.exists():
        print(f"livecoach replay: '{path}' not found", file=sys.stderr)
        return 2
    ride = load_ride_file(args.config) if args.config else None
    plan = None
    if args.plan:
        from livecoach.plan.plan import load_plan

        plan = load_plan(args.plan, ride)
    if is_recording(path):
        from livecoach.recording.replay import replay_recording

        result = replay_recording(path, ride=ride, plan=plan, speed=args.speed, strict=args.strict)
        summary = result.summary
        if ride is not None:
            summary["warnings"].append(f"ride file {args.config} used instead of the one in the recording")
        if args.json:
            print_json(summary)
        else:
            _print_text(path, summary, f"{result.events} events",
                        f"outputs: {result.output_check}"
                        + (f" ({result.outputs_compared} compared)" if result.outputs_compared else ""))
        if result.output_check == "differs":
            print(f"livecoach replay: {path}: the replay does not reproduce the recorded outputs "
                  f"({result.output_mismatches} difference(s)){_version_note(result.header)}", file=sys.stderr)
            return 1
        return 0
    if ride is None:
        if path.suffix.lower() == ".csv":
            raise ConfigError(f"{path}: a CSV ride needs the ride file: add --config RIDE.toml")
        from livecoach.recording.reader import RecordingReader

        RecordingReader(path)   # raises the reader's clear "not a recording" error
        return 1  # pragma: no cover
    from livecoach.recording.replay import replay_csv

    if args.speed is not None:
        print("livecoach replay: --speed applies to recordings; the CSV ride is replayed at full speed",
              file=sys.stderr)
    summary, csv_ride = replay_csv(path, ride, plan=plan)
    if args.json:
        print_json(summary)
    else:
        _print_text(path, summary, f"{csv_ride.rows_used} of {csv_ride.rows} rows", None)
    return 0


def _fmt(value, spec: str, unit: str = "") -> str:
    if value is None:
        return "-"
    return f"{value:{spec}}{unit}"


def _print_text(path: Path, s: dict, what: str, outputs: str | None) -> None:
    print(f"replayed {path}: {what}, {s.get('samples', 0)} samples, "
          f"{_fmt(s.get('duration_s'), '.1f', ' s')}, {_fmt(s.get('distance_m'), '.1f', ' m')}")
    print(f"  CdA {_fmt(s.get('cda_m2'), '.4f')} +- {_fmt(s.get('cda_sd_m2'), '.4f')} m^2   "
          f"Crr {_fmt(s.get('crr'), '.5f')} +- {_fmt(s.get('crr_sd'), '.5f')}   "
          f"(batch fit: CdA {_fmt(s.get('batch_cda_m2'), '.4f')} m^2, Crr {_fmt(s.get('batch_crr'), '.5f')})")
    print(f"  trap speed {_fmt(s.get('trap_speed_mps'), '.3f', ' m/s')}   "
          f"max speed {_fmt(s.get('max_speed_mps'), '.3f', ' m/s')}   "
          f"rejected samples {s.get('rejected_samples', 0)}")
    gaps = s.get("sensor_gaps") or {}
    if gaps:
        parts = []
        for name, g in sorted(gaps.items()):
            if isinstance(g, dict):
                parts.append(f"{name} {g.get('count', 0)} (longest {_fmt(g.get('longest_s'), '.1f', ' s')})")
            else:
                parts.append(f"{name} {g}")
        print("  sensor gaps: " + ", ".join(parts))
    if outputs:
        print(f"  {outputs}")
    warnings = s.get("warnings") or []
    if warnings:
        print(f"  warnings ({len(warnings)}):")
        for w in warnings:
            print(f"    - {w}")


def _version_note(header) -> str:
    """Why outputs may differ when another livecoach version made the recording ("" if the same)."""
    from livecoach import __version__

    recorded = header.software_version if header is not None else ""
    if recorded == __version__:
        return ""
    return (f"; it was recorded by livecoach {recorded or 'of unknown version'} and this is "
            f"{__version__}: coaching or estimation changed in between, so differences are expected")
