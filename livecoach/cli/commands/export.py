"""``livecoach export RECORDING --csv OUT``: a recording as a plain CSV ride.

The recording is replayed through the pipeline and one row is written per
state update, in the CSV form ``livecoach replay ride.csv --config`` reads
(SI units), followed by the pipeline's outputs (phase, cue, target power,
predictions, CdA, Crr). An existing OUT is kept unless ``--force``.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from livecoach.cli.common import description_from_doc, print_json

NAME = "export"
HELP = "write a recording as a plain CSV ride (one row per pipeline state update)"
DESCRIPTION = description_from_doc(__doc__, HELP)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recording", metavar="RECORDING", help="a recording (.lcrec)")
    p.add_argument("--csv", required=True, metavar="OUT.csv", help="the CSV file to write")
    p.add_argument("--config", "-c", metavar="RIDE.toml",
                   help="replay with this ride file instead of the recorded one")
    p.add_argument("--force", action="store_true", help="overwrite OUT if it exists")
    p.add_argument("--strict", action="store_true", help="stop at the first damaged record")
    p.add_argument("--json", action="store_true", help="print what was written as JSON")


def run(args: argparse.Namespace) -> int:
    from livecoach.config.ridefile import load_ride_file
    from livecoach.io.csv_export import export_recording_csv

    src, out = Path(args.recording), Path(args.csv)
    if not src.exists():
        print(f"livecoach export: '{src}' not found", file=sys.stderr)
        return 2
    if out.exists() and not args.force:
        print(f"livecoach export: '{out}' exists already; use --force to overwrite it", file=sys.stderr)
        return 2
    if out.resolve() == src.resolve():
        print("livecoach export: the CSV output would overwrite the recording", file=sys.stderr)
        return 2
    ride = load_ride_file(args.config) if args.config else None
    info = export_recording_csv(src, out, ride=ride, strict=args.strict)
    if args.json:
        print_json(info)
    else:
        print(f"wrote {out}: {info['rows']} rows from {info['events']} events"
              + (f" ({info['skipped']} updates before power and speed were known not written)"
                 if info["skipped"] else ""))
        for w in info["warnings"]:
            print(f"  warning: {w}", file=sys.stderr)
    return 0
