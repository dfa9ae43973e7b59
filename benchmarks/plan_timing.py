"""Benchmark: planning before the ride and re-planning during it.

* plan: :func:`livecoach.plan.make_plan` on the example ride file (what
  ``livecoach ride`` does at start without ``--plan``), median of a few runs;
* re-plan: :class:`livecoach.coach.predict.Replanner` as the live coach calls
  it once per ``[coach] replan_interval_s`` -- from the planned state every
  ``--step-m`` metres along the run-up, warm-started from the previous
  re-plan, with the live CdA 5 % off the plan's (a typical early estimate).

The live coach re-plans inside the pipeline's event handling, so a re-plan
is also the longest single event (see pipeline_cost.py).

Run: .venv/bin/python benchmarks/plan_timing.py [--json]
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import benchlib  # noqa: E402


def run(step_m: float = 100.0, plan_repeats: int = 3) -> dict:
    import tomllib

    from livecoach.cli.commands.init import example_ride_text
    from livecoach.coach.live import _coach_config
    from livecoach.coach.predict import Replanner
    from livecoach.config.ridefile import parse_ride_dict
    from livecoach.plan import make_plan

    ride = parse_ride_dict(tomllib.loads(example_ride_text()), "example ride")
    plan_s = []
    plan = None
    for _ in range(plan_repeats):
        t0 = time.perf_counter()
        plan = make_plan(ride)
        plan_s.append(time.perf_counter() - t0)
    cfg = _coach_config(ride)
    rp = Replanner(ride, cfg.replan_max_evaluations)
    cda = ride.vehicle.cda_m2 * 1.05
    crr = ride.vehicle.crr
    times = []
    previous = None
    d = 50.0
    while d < ride.course.trap_exit_m - 5.0:
        pt = plan.at(d)
        t0 = time.perf_counter()
        previous = rp.replan(d, pt.planned_speed_mps, pt.planned_w_prime_balance_j, cda, crr, previous)
        times.append(time.perf_counter() - t0)
        d += step_m
    ts = sorted(times)
    return {
        "plan_s": {"median": statistics.median(plan_s), "all": plan_s},
        "replan_ms": {"n": len(ts), "median": 1e3 * statistics.median(ts),
                      "p90": 1e3 * benchlib.quantile(ts, 0.9), "max": 1e3 * ts[-1],
                      "mean": 1e3 * sum(ts) / len(ts)},
        "replan_interval_s": cfg.replan_interval_s,
        "replan_max_evaluations": cfg.replan_max_evaluations,
    }


def print_report(r: dict) -> None:
    rp = r["replan_ms"]
    print(f"plan (make_plan, example ride): {r['plan_s']['median'] * 1e3:.0f} ms")
    print(f"re-plan ({rp['n']} states along the run-up, budget {r['replan_max_evaluations']} evaluations): "
          f"median {rp['median']:.1f} ms, p90 {rp['p90']:.1f} ms, max {rp['max']:.1f} ms "
          f"(one every {r['replan_interval_s']:g} s of ride)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--step-m", type=float, default=100.0)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    r = run(args.step_m)
    benchlib.write_results("plan_timing", r)
    if args.json:
        print(json.dumps(r, indent=2, sort_keys=True))
    else:
        print_report(r)


if __name__ == "__main__":
    main()
