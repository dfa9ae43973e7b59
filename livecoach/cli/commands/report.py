"""``livecoach report``: the post-ride report, one self-contained HTML page.

Replays a recording (``*.lcrec``, with the ride file and plan it carries) or
a CSV ride (needs ``--config RIDE.toml``) and writes ``DIR/report.html``:
speed against distance with the plan, power and target, W' balance, CdA and
Crr convergence with their +-2 sigma bands and the batch fit, power-balance
residuals and change alarms, the trap result, sensor gaps, every cue and
warning, and the ride file used. Figures are PNG images inside the page;
it loads nothing from anywhere else.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from livecoach.cli.common import description_from_doc, print_json

NAME = "report"
HELP = "write the post-ride report (one HTML page with figures) for a recording or a CSV ride"
DESCRIPTION = description_from_doc(__doc__, HELP)


def _positive(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not 0.0 < x <= 60.0:
        raise argparse.ArgumentTypeError(f"{text!r}: expected a spacing in (0, 60] s")
    return x


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("input", metavar="RECORDING", help="a recording (.lcrec) or a CSV ride (.csv, needs --config)")
    p.add_argument("--out", "-o", metavar="DIR", required=True, help="folder for report.html (created if needed)")
    p.add_argument("--config", "-c", metavar="RIDE.toml",
                   help="ride file: required for a CSV ride; for a recording it replaces the recorded one")
    p.add_argument("--plan", metavar="PLAN.csv", help="run-up plan to compare with (default: the recorded one)")
    p.add_argument("--every-s", type=_positive, default=0.5, metavar="S",
                   help="keep one state every S seconds for the figures (default 0.5)")
    p.add_argument("--json", action="store_true", help="print where the report went and its headline numbers as JSON")


def run(args: argparse.Namespace) -> int:
    from livecoach.config.ridefile import load_ride_file
    from livecoach.errors import ConfigError, RecordingError
    from livecoach.recording.reader import is_recording
    from livecoach.report.replay import report_from_csv, report_from_recording

    path = Path(args.input)
    if not path.exists():
        raise ConfigError(f"'{path}' not found")
    if path.is_dir():
        raise ConfigError(f"'{path}' is a folder, not a recording or a CSV ride")
    ride = load_ride_file(args.config) if args.config else None
    plan = None
    if args.plan:
        from livecoach.plan.plan import load_plan

        plan = load_plan(args.plan, ride)
    if is_recording(path):
        outcome = report_from_recording(path, args.out, ride=ride, plan=plan, every_s=args.every_s)
    elif path.suffix.lower() == ".csv":
        if ride is None:
            raise ConfigError(f"{path}: a CSV ride needs the ride file: add --config RIDE.toml")
        outcome = report_from_csv(path, ride, args.out, plan=plan, every_s=args.every_s)
    else:
        raise RecordingError(f"{path}: neither a livecoach recording nor a .csv ride")
    s = outcome.summary
    if args.json:
        print_json({
            "report": str(outcome.path),
            "states": outcome.states,
            "notices": outcome.notices,
            "trap_speed_mps": s.get("trap_speed_mps"),
            "trap_entry_t_s": s.get("trap_entry_t_s"),
            "trap_exit_t_s": s.get("trap_exit_t_s"),
            "cda_m2": s.get("cda_m2"),
            "batch_cda_m2": s.get("batch_cda_m2"),
            "crr": s.get("crr"),
            "batch_crr": s.get("batch_crr"),
            "warnings": s.get("warnings", []),
        })
    else:
        trap = s.get("trap_speed_mps")
        trap_text = f"trap {trap:.3f} m/s ({trap * 3.6:.2f} km/h)" if trap else "no trap result"
        print(f"wrote {outcome.path} ({outcome.states} states, {outcome.notices} notices; {trap_text})")
    return 0
