"""Benchmark: closed-loop pacing on the simulator (issue 6, item 5).

The simulated rider follows the live coach's target power (through the whole
pipeline: sensor bytes -> decode -> estimator -> W' balance -> coach), and
the trap speed is compared with the optimum: the plan made with the true
vehicle, rider and air (``sim.scenario.truth_ride``). Targets: >= 99.5 % of
the optimum when the ride file's model is right; >= 99 % when the prior CdA
is 15 % off; better than a rider holding the best constant power.

Run: .venv/bin/python benchmarks/pacing_bench.py [--seeds N]
"""

from __future__ import annotations

import argparse
import copy
import statistics
import time
import tomllib


def scenario(name: str, patch: dict | None = None):
    from sim.scenario import SCENARIO_DIR, parse_scenario_dict

    data = tomllib.loads((SCENARIO_DIR / f"{name}.toml").read_text(encoding="utf-8"))
    for section, values in (patch or {}).items():
        if isinstance(values, dict) and isinstance(data.get(section), dict):
            for k, v in values.items():
                if isinstance(v, dict):
                    data[section].setdefault(k, {}).update(v)
                else:
                    data[section][k] = v
        else:
            data[section] = copy.deepcopy(values)
    return parse_scenario_dict(data, f"{name} (bench)", SCENARIO_DIR)


def cases():
    """(label, scenario, coached?) for the bench."""
    from livecoach.plan import constant_power_strategy
    from sim.scenario import truth_ride

    right = scenario("default", {"ride_patch": {"vehicle": {"cda_m2": 0.0285, "crr": 0.0032}}})
    steady_w = constant_power_strategy(truth_ride(right)).power_w
    steady = scenario("default", {"ride_patch": {"vehicle": {"cda_m2": 0.0285, "crr": 0.0032}},
                                  "rider": {"mode": "scripted", "profile": [[0, steady_w]]}})
    return [
        ("model right", right, True),
        ("prior CdA +15 %", scenario("prior_off"), True),
        (f"constant {steady_w:.0f} W, no coach", steady, False),
    ]


def run_case(sc, seed: int, coached: bool) -> tuple[float, float]:
    """(trap speed m/s, optimum m/s) of one closed-loop run."""
    from livecoach.pipeline.processor import Pipeline
    from livecoach.plan import make_plan
    from sim.run import simulate
    from sim.scenario import truth_ride

    optimum = make_plan(truth_ride(sc)).trap_speed_mps
    controller = Pipeline(sc.ride, make_plan(sc.ride), keep_for_batch=False) if coached else None
    result = simulate(sc, seed=seed, controller=controller, keep_truth=False)
    speed = result.summary.trap_speed_mps
    return (float("nan") if speed is None else speed), optimum


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=3)
    args = ap.parse_args()
    for label, sc, coached in cases():
        ratios = []
        t0 = time.perf_counter()
        for i in range(args.seeds):
            speed, optimum = run_case(sc, sc.seed + i, coached)
            ratios.append(speed / optimum)
        print(f"{label:<28} trap speed / optimum: mean {statistics.mean(ratios) * 100:6.2f} %, "
              f"min {min(ratios) * 100:6.2f} % over {args.seeds} seeds "
              f"(optimum {optimum:.3f} m/s; {time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
