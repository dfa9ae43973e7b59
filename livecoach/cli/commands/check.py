"""``livecoach check``: the pre-run go/no-go check on the start line.

Exit code 0 only on go; 1 on no-go; 2 when the ride file itself is invalid
(the table is printed in every case).
"""

from __future__ import annotations

import argparse

from livecoach.cli.common import add_config_argument, print_json

NAME = "check"
HELP = "pre-run go/no-go check: Bluetooth, sensors, serial devices, GPS fix, space, clock, ride file, plan"
DESCRIPTION = (
    "Checks everything a run depends on and prints a go/no-go table: the Bluetooth adapter, "
    "each configured sensor found and sending plausible values, the serial devices, a GPS fix, "
    "free space for the recording, the clocks, the ride file and the run-up plan. Exit code 0 "
    "only on go. A go is not a safety inspection: the event's scrutineering and rules decide "
    "whether a vehicle may run."
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    add_config_argument(p)
    p.add_argument("--plan", metavar="PLAN.csv",
                   help="the run-up plan (default: [check] plan in the ride file, next to it)")
    p.add_argument("--listen-s", type=float, metavar="S",
                   help="seconds to listen to the sensors (default: [check] listen_s)")
    p.add_argument("--no-listen", action="store_true",
                   help="do not connect to the sensors (their rows are no-go: 'not probed')")
    p.add_argument("--simulate", metavar="SCENARIO",
                   help="let the bench simulator stand in for the sensors (a shipped scenario "
                        "name such as 'default', or a scenario file)")
    p.add_argument("--set-clock-from-gps", action="store_true",
                   help="when the wall clock disagrees with GPS time, step it to GPS time (needs root)")
    p.add_argument("--json", action="store_true", help="print JSON instead of the table")


def run(args: argparse.Namespace) -> int:
    import math
    from pathlib import Path

    from livecoach.errors import ConfigError
    from livecoach.setup_check.gather import gather_facts
    from livecoach.setup_check.report import format_table, to_json
    from livecoach.setup_check.result import is_go

    if args.listen_s is not None and not (math.isfinite(args.listen_s) and 0.5 <= args.listen_s <= 300.0):
        raise ConfigError(f"--listen-s {args.listen_s:g}: expected seconds in [0.5, 300]")
    outcome = gather_facts(
        Path(args.config),
        plan_path=Path(args.plan) if args.plan else None,
        listen_s=args.listen_s,
        listen=not args.no_listen,
        simulate=args.simulate,
        set_clock_from_gps=args.set_clock_from_gps,
    )
    results = outcome.results
    if args.json:
        out = to_json(results)
        out["notes"] = list(outcome.notes)
        print_json(out)
    else:
        for note in outcome.notes:
            print(note)
        print(format_table(results))
    if outcome.facts.ride.ride is None:
        return 2
    return 0 if is_go(results) else 1
