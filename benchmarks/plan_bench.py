"""Benchmark: planner time, re-plan time, coach cost per update, optimality vs brute force.

Targets (issue 6): ``make_plan`` <= 5 s; a re-plan <= 50 ms; the coach cheap
between re-plans (the whole pipeline targets <= 100 us median per event);
the plan within 0.3 % of the optimum.

Run: .venv/bin/python benchmarks/plan_bench.py [--repeat N] [--dp]
``--dp`` adds dynamic programming on the full example ride (about a minute).
"""

from __future__ import annotations

import argparse
import statistics
import time
import tomllib


def example_ride():
    from livecoach.cli.commands.init import example_ride_text
    from livecoach.config.ridefile import parse_ride_dict

    return parse_ride_dict(tomllib.loads(example_ride_text()), "example ride")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--dp", action="store_true", help="also brute-force the full example ride")
    args = ap.parse_args()

    from livecoach.coach import LiveCoach
    from livecoach.coach.predict import Replanner
    from livecoach.plan import build_run_model, make_plan, sensitivity_table, simulate

    ride = example_ride()
    times = []
    for _ in range(args.repeat):
        t0 = time.perf_counter()
        plan = make_plan(ride)
        times.append(time.perf_counter() - t0)
    print(f"make_plan (example ride, {len(plan.distance_m)} nodes): median {statistics.median(times) * 1e3:.1f} ms, "
          f"max {max(times) * 1e3:.1f} ms  -> trap speed {plan.trap_speed_mps:.4f} m/s")
    t0 = time.perf_counter()
    sensitivity_table(ride, plan)
    print(f"sensitivity table (8 re-optimised plans): {(time.perf_counter() - t0) * 1e3:.0f} ms")

    # Re-plans along a run ridden 5 % above the plan (W' spent early), warm-started as in the coach.
    model = build_run_model(ride)
    powers = [p * 1.05 for p in plan.power_w[:-1]]
    traj = simulate(model, start_speed_mps=0.0, start_balance_j=ride.rider.w_prime_j, powers_w=powers)
    rp = Replanner(ride)
    warm, cold = [], []
    prev = None
    for k in range(5, model.n_segments - 2, 2):
        args_ = (traj.distance_m[k] + 3.0, traj.speed_mps[k], traj.w_prime_balance_j[k], 0.0305, 0.0036)
        t0 = time.perf_counter()
        prev = rp.replan(*args_, prev)
        warm.append(time.perf_counter() - t0)
        if k % 20 == 5:
            t0 = time.perf_counter()
            rp.replan(*args_, None)
            cold.append(time.perf_counter() - t0)
    q = sorted(warm)
    print(f"re-plan warm ({len(warm)}): median {statistics.median(warm) * 1e3:.1f} ms, "
          f"p99 {q[int(0.99 * (len(q) - 1))] * 1e3:.1f} ms, max {max(warm) * 1e3:.1f} ms (target <= 50 ms)")
    print(f"re-plan cold ({len(cold)}): median {statistics.median(cold) * 1e3:.1f} ms, max {max(cold) * 1e3:.1f} ms")

    # Coach cost per update between re-plans, 4 Hz along the plan.
    coach = LiveCoach(ride, plan)
    between, replans = [], []
    t = 0.0
    import bisect
    while t < plan.time_s[-1]:
        k = min(bisect.bisect_right(plan.time_s, t) - 1, len(plan.time_s) - 2)
        f = (t - plan.time_s[k]) / (plan.time_s[k + 1] - plan.time_s[k])
        d = plan.distance_m[k] + f * (plan.distance_m[k + 1] - plan.distance_m[k])
        v = plan.speed_mps[k] + f * (plan.speed_mps[k + 1] - plan.speed_mps[k])
        t0 = time.perf_counter()
        out = coach.update(t, d, v, plan.power_w[k], plan.w_prime_balance_j[k], 0.03, 0.0035)
        el = time.perf_counter() - t0
        (replans if out.replanned else between).append(el)
        t += 0.25
    print(f"coach update between re-plans ({len(between)}): median {statistics.median(between) * 1e6:.1f} us; "
          f"with a re-plan ({len(replans)}): median {statistics.median(replans) * 1e3:.1f} ms")

    if args.dp:
        from livecoach.plan.reference import solve_dp

        t0 = time.perf_counter()
        dp = solve_dp(model, 0.0, model.w_prime_j, speed_range_mps=(0.0, 34.0), n_speed=341,
                      n_balance=31, n_below=8, n_above=24)
        dp_speed = ride.course.trap_m / dp.trap_time_s
        print(f"dynamic programming, full example ride: {time.perf_counter() - t0:.0f} s, "
              f"trap speed {dp_speed:.4f} m/s; plan/DP = {plan.trap_speed_mps / dp_speed:.5f}")


if __name__ == "__main__":
    main()
