"""Closed loop on the simulator: the simulated rider follows the live coach.

The coach here is given the simulator's true distance, speed, power and W′
balance (perfect measurements), so the test judges the pacing itself; the
full sensor-to-coach loop through the pipeline is measured by
benchmarks/pacing_bench.py. The optimum is the plan made with the true
vehicle, rider and air (sim.scenario.truth_ride); the simulator integrates
its own physics (RK4 at 100 Hz) with rider lag, power wobble, gusts and
survey error, so it is an outside check of the planner's discrete model.
"""

from __future__ import annotations

import copy
import tomllib
import types

import pytest

from livecoach.coach import LiveCoach
from livecoach.plan import constant_power_strategy, make_plan

pytestmark = pytest.mark.slow


def _scenario(patch):
    from sim.scenario import SCENARIO_DIR, parse_scenario_dict

    data = tomllib.loads((SCENARIO_DIR / "default.toml").read_text(encoding="utf-8"))
    for section, values in patch.items():
        target = data.setdefault(section, {})
        for k, v in values.items():
            if isinstance(v, dict):
                target.setdefault(k, {}).update(copy.deepcopy(v))
            else:
                target[k] = copy.deepcopy(v)
    return parse_scenario_dict(data, "closed-loop test", SCENARIO_DIR)


class _TruthFedCoach:
    """A controller for the simulator: the live coach fed with the simulator's true state."""

    def __init__(self, ride, plan, cda_m2, crr):
        self.coach = LiveCoach(ride, plan)
        self.cda_m2, self.crr = cda_m2, crr
        self.sim = None
        self.cues = []

    def feed(self, ev):
        st = self.sim.state
        out = self.coach.update(ev.t_s, st.distance_m, st.speed_mps, self.sim.rider._response_w,
                                self.sim.rider.w_bal_j, self.cda_m2, self.crr)
        self.cues += [n.data["cue"] for n in out.notices if n.kind == "cue"]
        return types.SimpleNamespace(state=types.SimpleNamespace(target_power_w=out.target_power_w))


def _run(sc, controller=None):
    from sim.engine import Simulation

    sim = Simulation(sc, None, controller, keep_truth=False)
    if controller is not None:
        controller.sim = sim
    for _ in sim.events():
        pass
    return sim.summary


def test_coach_paces_close_to_the_optimum_and_beats_constant_power():
    from sim.scenario import truth_ride

    patch = {"ride_patch": {"vehicle": {"cda_m2": 0.0285, "crr": 0.0032}}}
    sc = _scenario(patch)
    optimum = make_plan(truth_ride(sc)).trap_speed_mps
    ctrl = _TruthFedCoach(sc.ride, make_plan(sc.ride), 0.0285, 0.0032)
    coached = _run(sc, ctrl).trap_speed_mps
    # Issue 6 floor is 99.5 % (a bench mean, benchmarks/pacing_bench.py); this
    # simulated rider wobbles 3 % rms around the target (each swing above CP costs
    # W' that the Skiba 2015 recovery barely returns). Measured here: 99.51 %.
    assert coached >= 0.994 * optimum
    assert ctrl.cues[-3:] == ["go", "trap", "done"]
    steady_w = constant_power_strategy(truth_ride(sc)).power_w
    steady = _run(_scenario({**patch, "rider": {"mode": "scripted", "profile": [[0, steady_w]]}}))
    assert coached > steady.trap_speed_mps * 1.03


def test_coach_with_a_steady_rider_reaches_the_issue_floor():
    # The same run with a rider who holds the target without wobble (1 s lag kept):
    # issue 6's floor of 99.5 % of the optimum.
    from sim.scenario import truth_ride

    sc = _scenario({"ride_patch": {"vehicle": {"cda_m2": 0.0285, "crr": 0.0032}},
                    "rider": {"noise_pct": 0.0}})
    optimum = make_plan(truth_ride(sc)).trap_speed_mps
    coached = _run(sc, _TruthFedCoach(sc.ride, make_plan(sc.ride), 0.0285, 0.0032)).trap_speed_mps
    assert coached >= 0.995 * optimum


def test_prior_15_percent_off_without_estimates_still_within_one_percent():
    # Worst case for the prior: the ride file's CdA is 15 % above the truth and the
    # coach never learns better (no estimator in the loop); issue 6 floor: 99 %.
    from sim.scenario import truth_ride

    sc = _scenario({"ride_patch": {"vehicle": {"cda_m2": 0.0328, "crr": 0.0032}},
                    "truth": {"cda_m2": 0.0285, "crr": 0.0032}, "rider": {"noise_pct": 0.0}})
    optimum = make_plan(truth_ride(sc)).trap_speed_mps
    coached = _run(sc, _TruthFedCoach(sc.ride, make_plan(sc.ride), 0.0328, 0.0032)).trap_speed_mps
    assert coached >= 0.99 * optimum


def test_aiming_under_cp_in_the_hold_pays_for_a_wobbly_rider():
    # Same seed, same wobble: holding 1.5 % under CP (the default) against following
    # the plan's CP exactly. The rider's 3 % wobble spends less W' before the closing
    # effort, so the trap speed is higher (measured +0.06 %: 99.45 % -> 99.51 %).
    from livecoach.coach import CoachConfig
    from sim.scenario import truth_ride

    sc = _scenario({"ride_patch": {"vehicle": {"cda_m2": 0.0285, "crr": 0.0032}}})
    optimum = make_plan(truth_ride(sc)).trap_speed_mps
    speeds = {}
    for hold_pct in (0.0, 1.5):
        ctrl = _TruthFedCoach(sc.ride, make_plan(sc.ride), 0.0285, 0.0032)
        ctrl.coach.config = CoachConfig(hold_under_cp_pct=hold_pct)
        speeds[hold_pct] = _run(sc, ctrl).trap_speed_mps / optimum
    assert speeds[1.5] > speeds[0.0] + 0.0003
