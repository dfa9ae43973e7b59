"""``livecoach plan``: the optimal run-up plan for a ride file (power, speed, W′ over distance)."""

from __future__ import annotations

import argparse

from livecoach.cli.common import add_config_argument, print_json

NAME = "plan"
HELP = "optimise the run-up power plan for the best trap speed (CSV / JSON / table)"
DESCRIPTION = (
    "Optimise the power over the run-up that maximises the mean speed through the trap, "
    "for the ride file's vehicle, course, air and rider (critical power, W', Pmax). "
    "Prints the plan's headline numbers, simple strategies for comparison, a sensitivity "
    "table and the course checks; --out saves the plan as CSV for the live coach. "
    "Pacing advice is advisory: the event's safety rules and officials come first."
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    add_config_argument(p)
    p.add_argument("--out", metavar="PLAN.csv", help="write the plan as CSV (distance_m, power_w, "
                   "speed_mps, time_s, w_prime_balance_j)")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.add_argument("--cda-m2", type=float, help="plan with this CdA instead of the ride file's prior")
    p.add_argument("--crr", type=float, help="plan with this Crr instead of the ride file's prior")
    p.add_argument("--check", metavar="PLAN.csv", help="check a saved plan against the ride file "
                   "instead of planning (exit 1 if it does not fit)")
    p.add_argument("--no-sensitivity", action="store_true", help="skip the sensitivity table")


class _DelayedBar:
    """A rich progress bar on stderr that appears only once the work has taken > 1 s."""

    def __init__(self, label: str) -> None:
        import time

        self._clock = time.monotonic
        self._start = self._clock()
        self._label = label
        self._progress = None
        self._task = None
        self._base = 0.0
        self._span = 1.0

    def stage(self, base: float, span: float) -> "_DelayedBar":
        self._base, self._span = base, span
        return self

    def __call__(self, fraction: float) -> None:
        done = self._base + self._span * min(max(fraction, 0.0), 1.0)
        if self._progress is None:
            if self._clock() - self._start <= 1.0:
                return
            from rich.console import Console
            from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

            self._progress = Progress(TextColumn("{task.description}"), BarColumn(),
                                      TextColumn("{task.percentage:>3.0f}%"), TimeElapsedColumn(),
                                      console=Console(stderr=True), transient=True)
            self._progress.start()
            self._task = self._progress.add_task(self._label, total=1.0)
        self._progress.update(self._task, completed=done)

    def close(self) -> None:
        if self._progress is not None:
            self._progress.stop()


def _check_saved(args, ride) -> int:
    from livecoach.errors import PlanError
    from livecoach.plan.plan import check_plan, load_plan

    plan = load_plan(args.check)
    errors, warnings = check_plan(plan, ride)
    if args.json:
        print_json({"plan": args.check, "fits": not errors, "errors": errors, "warnings": warnings,
                    **plan.summary()})
    else:
        for e in errors:
            print(f"does not fit: {e}")
        for w in warnings:
            print(f"warning: {w}")
        if not errors:
            print(f"{args.check} fits {ride.source}: planned trap speed {plan.trap_speed_mps:.2f} m/s")
    if errors:
        raise PlanError(f"{args.check} does not fit {ride.source}: " + "; ".join(errors))
    return 0


def run(args: argparse.Namespace) -> int:
    from livecoach.config.ridefile import load_ride_file
    from livecoach.plan.checks import RULES_NOTE, run_checks
    from livecoach.plan.model import build_run_model
    from livecoach.plan.plan import save_plan
    from livecoach.plan.planner import (
        all_out_strategy,
        constant_power_strategy,
        make_plan,
        sensitivity_table,
    )

    ride = load_ride_file(args.config)
    if args.check:
        return _check_saved(args, ride)
    bar = _DelayedBar("planning the run-up")
    try:
        plan = make_plan(ride, cda_m2=args.cda_m2, crr=args.crr, progress=bar.stage(0.0, 0.5))
        model = build_run_model(ride, cda_m2=plan.basis.cda_m2, crr=plan.basis.crr)
        steady = constant_power_strategy(ride, model)
        all_out = all_out_strategy(ride, model)
        sens = [] if args.no_sensitivity else sensitivity_table(ride, plan, progress=bar.stage(0.5, 0.5))
    finally:
        bar.close()
    checks = run_checks(ride)
    if args.out:
        save_plan(plan, args.out)
    summary = plan.summary()
    out = {
        **summary,
        "cda_m2": plan.basis.cda_m2,
        "crr": plan.basis.crr,
        "air_density_kgpm3": plan.basis.air_density_kgpm3,
        "headwind_mps": plan.basis.headwind_mps,
        "strategies": {
            "optimal": {"trap_speed_mps": plan.trap_speed_mps},
            "constant_power": {"power_w": steady.power_w, "trap_speed_mps": steady.trap_speed_mps,
                               "w_prime_left_j": steady.w_prime_left_j},
            "all_out": {"trap_speed_mps": all_out.trap_speed_mps, "w_prime_left_j": all_out.w_prime_left_j},
        },
        "sensitivity": sens,
        "checks": [{"check": f.check, "ok": f.ok, "text": f.text} for f in checks],
        "checks_note": RULES_NOTE,
        "plan_file": args.out,
    }
    if args.json:
        print_json(out)
        return 0
    v = plan.trap_speed_mps
    print(f"Plan for {ride.source}  (CdA {plan.basis.cda_m2:.4f} m^2, Crr {plan.basis.crr:.5f}, "
          f"air {plan.basis.air_density_kgpm3:.4f} kg/m^3, head wind {plan.basis.headwind_mps:+.1f} m/s)")
    print(f"  trap speed     {v:7.3f} m/s  ({v * 3.6:.2f} km/h), trap time {plan.trap_time_s:.3f} s")
    print(f"  run-up time    {plan.runup_time_s:7.1f} s")
    print(f"  closing effort from {plan.final_effort_m:.0f} m "
          f"({ride.course.trap_entry_m - plan.final_effort_m:.0f} m before the trap)")
    print(f"  W' left at the trap exit {plan.w_prime_left_j:.0f} J")
    print("Compared with:")
    print(f"  constant {steady.power_w:.0f} W throughout   {steady.trap_speed_mps:7.3f} m/s "
          f"({(steady.trap_speed_mps / v - 1) * 100:+.2f} %)")
    print(f"  all-out from the start         {all_out.trap_speed_mps:7.3f} m/s "
          f"({(all_out.trap_speed_mps / v - 1) * 100:+.2f} %)")
    if sens:
        print("Sensitivity (trap speed re-optimised; same plan ridden):")
        for r in sens:
            print(f"  {r['parameter']:<18} {r['change']:>7}  {r['trap_speed_mps']:7.3f} m/s "
                  f"({r['delta_mps']:+.3f})  same plan {r['same_plan_trap_speed_mps']:7.3f} m/s")
    print("Course checks (" + RULES_NOTE + "):")
    for f in checks:
        print(f"  {'ok  ' if f.ok else 'WARN'} {f.text}")
    if args.out:
        print(f"wrote {args.out}")
    return 0
