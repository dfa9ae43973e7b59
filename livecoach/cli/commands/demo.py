"""``livecoach demo``: the built-in demo, no hardware needed.

The default bench scenario (an invented team, vehicle and course) runs in
closed loop through the live loop at accelerated time: the simulated rider
follows the coach, the rider's display shows the run (on a terminal), the
recorder keeps every byte; then the recording is replayed (it must
reproduce the live outputs) and the post-ride report is written.
"""

from __future__ import annotations

import argparse

NAME = "demo"
HELP = "run the built-in demo: a simulated run-up in closed loop, a recording and a report (no hardware)"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", default="demo-output", help="folder for the plan, recording and report "
                   "(default demo-output)")
    p.add_argument("--scenario", default="default", help="scenario name or path (default: default)")
    p.add_argument("--seed", type=int, default=None, help="seed (default: the scenario's)")
    p.add_argument("--speed", type=float, default=40.0,
                   help="simulated seconds per wall second (default 40; the module's own work may hold it back)")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--display", dest="display", action="store_true", default=None,
                   help="show the rider's display even when stdout is not a terminal")
    g.add_argument("--no-display", dest="display", action="store_false",
                   help="print status lines instead of the display")
    p.add_argument("--no-report", action="store_true", help="skip the replay and the report")
    p.add_argument("--json", action="store_true", help="print the outcome as JSON at the end")


def run(args: argparse.Namespace) -> int:
    from livecoach.cli.common import print_json
    from livecoach.errors import ConfigError
    from sim.demo import run_demo

    if not args.speed > 0.0:
        raise ConfigError(f"--speed {args.speed}: must be > 0")
    say = (lambda text: None) if args.json else (lambda text: print(text, flush=True))
    res = run_demo(args.out, scenario=args.scenario, seed=args.seed, speed=args.speed,
                   display=False if args.json else args.display, report=not args.no_report, say=say)
    out = {
        "plan": str(res.plan_path) if res.plan_path else None,
        "recording": str(res.recording_path) if res.recording_path else None,
        "report": str(res.report_path) if res.report_path else None,
        "truth_trap_speed_mps": res.truth_trap_speed_mps,
        "module_trap_speed_mps": res.module_trap_speed_mps,
        "planned_trap_speed_mps": res.planned_trap_speed_mps,
        "cda_m2": res.cda_m2,
        "true_cda_m2": res.true_cda_m2,
        "output_check": res.output_check or None,
        "events": res.events,
        "wall_s": res.wall_s,
        "notes": res.notes,
    }
    if args.json:
        print_json(out)
    else:
        def kmh(x):
            return "--" if x is None else f"{x * 3.6:.2f} km/h"

        print(f"trap speed: {kmh(res.truth_trap_speed_mps)} (simulated truth), {kmh(res.module_trap_speed_mps)} "
              f"(measured by the module), plan {kmh(res.planned_trap_speed_mps)}")
        if res.cda_m2 is not None:
            print(f"CdA estimate {res.cda_m2:.4f} m^2 (truth {res.true_cda_m2:.4f} m^2)")
        print(f"plan:      {res.plan_path}")
        print(f"recording: {res.recording_path}  ({res.events} events)")
        if res.report_path:
            print(f"report:    {res.report_path}")
            print(f"replay of the recording: {res.output_check}")
        for note in res.notes:
            print(f"note: {note}")
        print(f"demo took {res.wall_s:.1f} s")
    ok = not res.output_check or res.output_check.startswith(("reproduced", "none stored"))
    return 0 if ok else 1
