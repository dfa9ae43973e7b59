"""The simulation loop: closed-loop control, and properties over random inputs."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

from livecoach.physics import acceleration_mps2
from sim.engine import Simulation
from sim.run import simulate
from sim.scenario import parse_scenario_dict


def _ride(start_speed_mps: float, grade: float, headwind_mps: float) -> dict:
    runup = 3000.0
    return {
        "vehicle": {
            "mass_kg": 98.0, "wheel_circumference_m": 1.47, "wheel_inertia_kgm2": 0.08,
            "drivetrain_efficiency": 0.975, "cda_m2": 0.030, "cda_sd_m2": 0.006,
            "crr": 0.0035, "crr_sd": 0.001,
        },
        "rider": {"cp_w": 330.0, "w_prime_j": 18000.0, "pmax_w": 950.0},
        "course": {
            "runup_m": runup, "trap_m": 200.0, "start_speed_mps": start_speed_mps,
            "elevation": [[0.0, 1000.0], [runup + 200.0, 1000.0 + grade * (runup + 200.0)]],
        },
        "air": {"temperature_c": 20.0, "pressure_pa": 85000.0, "relative_humidity_pct": 40.0,
                "headwind_mps": headwind_mps},
    }


class StepController:
    """A controller that asks for ``high_w`` from ``at_s`` on (and nothing before)."""

    def __init__(self, at_s: float, high_w: float) -> None:
        self.at_s, self.high_w = at_s, high_w
        self.fed = 0

    def feed(self, event):
        self.fed += 1
        target = self.high_w if event.t_s >= self.at_s else None
        return SimpleNamespace(state=SimpleNamespace(target_power_w=target), notices=())


def test_the_rider_follows_the_controllers_target_with_the_human_lag():
    data = {
        "scenario": {"seed": 3, "max_time_s": 40.0},
        "ride_inline": _ride(8.0, 0.0, 0.0),
        "rider": {"mode": "coach", "profile": [[0.0, 200.0]], "noise_pct": 0.0, "lag_s": 1.5},
        "weather": {"gust_rms_mps": 0.0},
    }
    sc = parse_scenario_dict(data, "closed loop test")
    step_ctrl = StepController(20.0, 400.0)
    run = simulate(sc, controller=step_ctrl)
    assert step_ctrl.fed == len(run.events)
    t = np.asarray(run.truth["t_s"])
    target = np.asarray(run.truth["target_power_w"])
    power = np.asarray(run.truth["power_w"])
    # Before the controller speaks the rider holds the scripted fallback.
    assert np.all(target[t < 20.0] == 200.0)
    # The first event at or after 20 s switches the target within one step.
    switch = t[np.argmax(target == 400.0)]
    assert 20.0 <= switch < 20.3
    # First-order lag with a 1.5 s time constant: 200 + 200 (1 - exp(-dt / 1.5)).
    for after_s in (0.5, 1.5, 4.5):
        i = int(np.searchsorted(t, switch + after_s))
        expected = 200.0 + 200.0 * (1.0 - math.exp(-(t[i] - switch + 0.01) / 1.5))
        assert power[i] == pytest.approx(expected, rel=0.01)


def test_in_coach_mode_the_rider_starts_on_the_modules_start_target():
    class StartLine:
        """Says 310 W from the very first event (as the coach's standby output does)."""

        def __init__(self) -> None:
            self.events = []

        def feed(self, event):
            self.events.append(event)
            return SimpleNamespace(state=SimpleNamespace(target_power_w=310.0), notices=())

    data = {
        "scenario": {"seed": 5, "max_time_s": 6.0},
        "ride_inline": _ride(0.0, 0.0, 0.0),
        "rider": {"mode": "coach", "profile": [[0.0, 620.0]], "noise_pct": 0.0, "lag_s": 1.0},
        "weather": {"gust_rms_mps": 0.0},
    }
    ctrl = StartLine()
    run = simulate(parse_scenario_dict(data, "start line test"), controller=ctrl)
    first = ctrl.events[0]
    assert first.t_s == 0.0 and first.channel == "tick" and run.events[0] == first
    target = np.asarray(run.truth["target_power_w"])
    power = np.asarray(run.truth["power_w"])
    assert np.all(target[:-1] == 310.0)        # the scripted 620 W is never used (last row: the end state)
    assert power[0] == pytest.approx(310.0)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow],
          phases=[Phase.explicit, Phase.reuse, Phase.generate])     # no slow shrinking
@given(
    power_w=st.floats(0.0, 900.0),
    start_speed_mps=st.floats(2.0, 25.0),
    grade=st.floats(-0.01, 0.01),
    headwind_mps=st.floats(-3.0, 3.0),
    gust_rms_mps=st.floats(0.0, 0.5),
)
def test_every_step_follows_the_core_and_the_energy_closes(power_w, start_speed_mps, grade,
                                                           headwind_mps, gust_rms_mps):
    data = {
        "scenario": {"seed": 9, "max_time_s": 20.0, "step_hz": 50.0},
        "ride_inline": _ride(start_speed_mps, grade, headwind_mps),
        "rider": {"profile": [[0.0, power_w]], "noise_pct": 0.0, "lag_s": 0.0, "pmax_w": 2000.0,
                  "cp_w": 1000.0},
        "weather": {"gust_rms_mps": gust_rms_mps},
        "truth": {"cda_m2": 0.027, "crr": 0.004},
    }
    sc = parse_scenario_dict(data, "property test")
    sim = Simulation(sc)
    for _ in sim.events():
        pass
    tr = sim.truth.as_numpy()
    v = tr["speed_mps"]
    if np.any(v[:-1] <= 1.0):
        return          # stopped (the propulsion floor and static friction take over)
    # Each step's speed change is what the core's acceleration says (RK4, 50 Hz).
    dt = np.diff(tr["t_s"])
    model = sc.ride.vehicle.model(0.027, 0.004)
    for i in range(0, len(v) - 1, 97):
        a0 = acceleration_mps2(tr["power_w"][i], v[i], tr["grade"][i], tr["air_density_kgpm3"][i],
                               model, tr["headwind_mps"][i])
        assert (v[i + 1] - v[i]) / dt[i] == pytest.approx(a0, abs=0.02 + 0.05 * abs(a0))
    # Work-energy theorem (common practice) over the whole run.
    eff = 0.975
    crank = tr["crank_work_j"][-1] * eff
    parts = (tr["kinetic_energy_j"][-1] - tr["kinetic_energy_j"][0]
             + 98.0 * 9.80665 * (tr["elevation_m"][-1] - tr["elevation_m"][0])
             + tr["aero_work_j"][-1] + tr["rolling_work_j"][-1] + tr["bearing_work_j"][-1])
    d_potential = 98.0 * 9.80665 * abs(tr["elevation_m"][-1] - tr["elevation_m"][0])
    scale = max(abs(crank), tr["aero_work_j"][-1] + tr["rolling_work_j"][-1], d_potential, 1.0)
    # The core's grade term is m g sin(atan G) v while m g dh counts rise over
    # distance G: they differ by G^2/2 of the potential term (<= 5e-5 at 1 %).
    assert abs(crank - parts) / scale < 1e-4
