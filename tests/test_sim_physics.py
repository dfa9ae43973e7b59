"""The simulator's physics against the shared core and published results.

Checks: steady speed at constant power equals the core's root
(``steady_speed_mps``); the energy bookkeeping of a run closes; a coast-down
follows the closed-form solution of m dv/dt = -(A + B v^2); the rider's W'
balance reproduces the Skiba (2015) worked check; the gusts have the
Ornstein-Uhlenbeck statistics.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from livecoach.physics import GRAVITY_MPS2, steady_speed_mps
from sim.engine import Simulation
from sim.randomness import Normals, OrnsteinUhlenbeck
from sim.rider import Rider
from sim.run import simulate
from sim.scenario import parse_scenario_dict


def flat_ride(start_speed_mps: float = 0.0, runup_m: float = 45000.0, drop_m: float = 0.0) -> dict:
    """A ride table on a straight course falling ``drop_m`` over its length (invented values)."""
    return {
        "vehicle": {
            "mass_kg": 98.0, "wheel_circumference_m": 1.47, "wheel_inertia_kgm2": 0.08,
            "drivetrain_efficiency": 0.975, "cda_m2": 0.030, "cda_sd_m2": 0.006,
            "crr": 0.0035, "crr_sd": 0.001,
        },
        "rider": {"cp_w": 330.0, "w_prime_j": 18000.0, "pmax_w": 950.0},
        "course": {
            "runup_m": runup_m, "trap_m": 200.0, "start_speed_mps": start_speed_mps,
            "elevation": [[0.0, 1000.0], [runup_m + 200.0, 1000.0 - drop_m]],
        },
        "air": {"temperature_c": 15.0, "pressure_pa": 90000.0, "relative_humidity_pct": 20.0},
    }


def quiet_scenario(ride: dict, power_w: float, **sections) -> dict:
    """A scenario with constant scripted power and no rider wobble, no gusts."""
    data = {
        "scenario": {"name": "test", "seed": 7, "step_hz": 20.0, "max_time_s": 1200.0},
        "ride_inline": ride,
        "truth": {"cda_m2": 0.0285, "crr": 0.0032},
        "weather": {"gust_rms_mps": 0.0},
        "rider": {"profile": [[0.0, power_w]], "noise_pct": 0.0, "lag_s": 0.0},
        "heart_rate": {"enabled": False},
    }
    for k, v in sections.items():
        data.setdefault(k, {}).update(v)
    return data


def test_steady_speed_matches_the_core_root():
    # Constant 300 W on the flat from 10 m/s: after 1200 s (about 15 time
    # constants of the speed response) the simulated speed must equal the root
    # of the steady power balance that livecoach.physics.steady_speed_mps finds.
    sc = parse_scenario_dict(quiet_scenario(flat_ride(10.0), 300.0), "steady test")
    sim = Simulation(sc, keep_truth=False)
    for _ in sim.events():
        pass
    model = sc.ride.vehicle.model(0.0285, 0.0032).with_(mass_kg=98.0)
    v_core = steady_speed_mps(300.0, 0.0, sim.air.density0_kgpm3, model)
    assert sim.summary.end_reason == "time limit"
    assert sim.state.speed_mps == pytest.approx(v_core, rel=1e-6)
    assert v_core > 15.0      # far from the 10 m/s start


def test_steady_speed_on_a_descent_with_head_wind_matches_the_core_root():
    ride = flat_ride(12.0, runup_m=45000.0, drop_m=135.6)   # grade -0.003
    ride["air"]["headwind_mps"] = 1.5
    sc = parse_scenario_dict(quiet_scenario(ride, 250.0), "steady descent test")
    sim = Simulation(sc, keep_truth=False)
    for _ in sim.events():
        pass
    grade = sim.course.grade(sim.state.distance_m)
    assert grade == pytest.approx(-135.6 / 45200.0)
    model = sc.ride.vehicle.model(0.0285, 0.0032)
    v_core = steady_speed_mps(250.0, grade, sim.air.density0_kgpm3, model, 1.5)
    assert sim.state.speed_mps == pytest.approx(v_core, rel=1e-6)


def _energy_residual(run, i0: int, i1: int) -> tuple[float, float]:
    """(crank work * efficiency, sum of the parts) between truth rows i0 and i1, J."""
    sc = run.scenario
    t = run.truth
    eff = sc.true_efficiency
    m = sc.true_mass_kg
    crank = (t["crank_work_j"][i1] - t["crank_work_j"][i0]) * eff
    d_kinetic = t["kinetic_energy_j"][i1] - t["kinetic_energy_j"][i0]
    d_potential = m * GRAVITY_MPS2 * (t["elevation_m"][i1] - t["elevation_m"][i0])
    aero = t["aero_work_j"][i1] - t["aero_work_j"][i0]
    rolling = t["rolling_work_j"][i1] - t["rolling_work_j"][i0]
    bearing = t["bearing_work_j"][i1] - t["bearing_work_j"][i0]
    return crank, d_kinetic + d_potential + aero + rolling + bearing


@pytest.fixture(scope="module")
def default_run():
    return simulate("default")


def test_energy_bookkeeping_of_the_default_run_closes(default_run):
    # Work-energy theorem (common practice): crank work x drivetrain efficiency
    # = delta kinetic + delta potential (m g delta h from the true elevation)
    # + aero + rolling (+ bearing) work. The default run has gusts, survey
    # error in the grade, a rider wobble and the power limits.
    run = default_run
    speed = np.asarray(run.truth["speed_mps"])
    # From the first row above the standing-start propulsion floor (1 m/s,
    # where the core caps the propulsive force) to the end.
    i0 = int(np.argmax(speed > 1.0))
    i1 = len(speed) - 1
    crank, parts = _energy_residual(run, i0, i1)
    assert crank > 50_000.0
    assert abs(crank - parts) / crank < 1e-3      # the bar: 0.1 %
    assert abs(crank - parts) / crank < 1e-5      # what RK4 actually achieves


def test_energy_bookkeeping_with_a_drag_step_and_coasting_closes():
    run = simulate("coastdown")
    i1 = len(run.truth) - 1
    speed = np.asarray(run.truth["speed_mps"])
    i0 = int(np.argmax(speed > 1.0))
    crank, parts = _energy_residual(run, i0, i1)
    assert abs(crank - parts) / crank < 1e-3
    run = simulate("drag_step")
    speed = np.asarray(run.truth["speed_mps"])
    i0 = int(np.argmax(speed > 1.0))
    crank, parts = _energy_residual(run, i0, len(speed) - 1)
    assert abs(crank - parts) / crank < 1e-3
    cda = np.asarray(run.truth["cda_m2"])
    assert len(set(cda.tolist())) == 2            # the step really happened


def test_coast_down_follows_the_closed_form_solution():
    # Coasting on the flat, m_eff dv/dt = -(A + B v^2) with A = Crr m g and
    # B = rho CdA / 2 (the model behind coast-down tests, e.g. White & Korst
    # 1972, SAE 720099 -- from memory), has the closed form
    # v(t) = sqrt(A/B) tan(atan(v0 sqrt(B/A)) - sqrt(A B) t / m_eff)
    # (standard integral of 1/(a^2 + v^2)).
    ride = flat_ride(20.0, runup_m=20000.0)
    sc = parse_scenario_dict(quiet_scenario(ride, 0.0), "coast test")
    run = simulate(sc)
    t = np.asarray(run.truth["t_s"])
    v = np.asarray(run.truth["speed_mps"])
    rho = run.truth["air_density_kgpm3"][0]
    m = 98.0
    m_eff = m + 0.08 / (1.47 / (2 * math.pi)) ** 2
    a_n = 0.0032 * m * GRAVITY_MPS2
    b_kgpm = 0.5 * rho * 0.0285
    phase = math.atan(20.0 * math.sqrt(b_kgpm / a_n)) - math.sqrt(a_n * b_kgpm) * t / m_eff
    moving = phase > 0.02
    v_closed = math.sqrt(a_n / b_kgpm) * np.tan(phase[moving])
    assert run.summary.end_reason == "stopped"
    assert moving.sum() > 5_000      # 20 Hz rows over more than 4 minutes
    np.testing.assert_allclose(v[moving], v_closed, rtol=1e-7, atol=1e-7)
    # the distance is the integral of that speed (trapezoid on the 20 Hz grid)
    x = np.asarray(run.truth["distance_m"])
    x_int = np.concatenate([[0.0], np.cumsum(0.5 * (v_closed[1:] + v_closed[:-1]) * np.diff(t[moving]))])
    assert x[moving][-1] == pytest.approx(x_int[-1], rel=1e-5)


def test_rider_w_prime_balance_reproduces_the_skiba_2015_worked_check():
    # Worked check of the differential W' balance (Skiba et al. 2015, as
    # given in the project's design notes): CP 250 W, W' 20 kJ; 60 s at 350 W
    # leaves 14,000 J; 60 s at 0 W after that brings it back to about 17,166 J.
    data = quiet_scenario(flat_ride(), 350.0, rider={"cp_w": 250.0, "w_prime_j": 20000.0, "pmax_w": 1500.0})
    sc = parse_scenario_dict(data, "skiba test")
    rider = Rider(sc, 1)
    for _ in range(6000):
        assert rider.power_for_step(350.0, 0.01) == pytest.approx(350.0)
    assert rider.w_bal_j == pytest.approx(14000.0, abs=1e-6)
    for _ in range(6000):
        rider.power_for_step(0.0, 0.01)
    expected = 20000.0 - 6000.0 * math.exp(-250.0 * 60.0 / 20000.0)
    assert rider.w_bal_j == pytest.approx(expected, rel=1e-9)
    assert rider.w_bal_j == pytest.approx(17166.0, abs=1.0)


def test_rider_never_exceeds_the_3_parameter_limit(default_run):
    # Morton (1996): P <= CP + (Pmax - CP) W'bal / W' at every step.
    run = default_run
    sc = run.scenario
    p = np.asarray(run.truth["power_w"])
    w = np.asarray(run.truth["w_prime_balance_j"])
    cp, wp, pmax = sc.true_cp_w, sc.true_w_prime_j, sc.true_pmax_w
    assert np.all(p <= cp + (pmax - cp) * np.maximum(w, 0.0) / wp + 1e-9)
    assert np.all(p >= 0.0)
    assert run.summary.rider_limited_steps > 0     # the limit was reached in this run


def test_ornstein_uhlenbeck_gusts_have_the_published_statistics():
    # Exact OU update (Gillespie 1996, Phys. Rev. E 54, 2084): stationary sd
    # sigma and lag autocorrelation exp(-lag / T).
    ou = OrnsteinUhlenbeck(0.3, 5.0, Normals(11, "test"))
    dt = 0.1
    xs = np.array([ou.step(dt) for _ in range(400_000)])
    assert xs.std() == pytest.approx(0.3, rel=0.03)
    for lag_s in (0.1, 1.0, 5.0):
        k = int(round(lag_s / dt))
        r = np.corrcoef(xs[:-k], xs[k:])[0, 1]
        assert r == pytest.approx(math.exp(-lag_s / 5.0), abs=0.02)
