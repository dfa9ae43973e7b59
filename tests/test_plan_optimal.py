"""The optimiser against brute force (dynamic programming) and a reference optimiser."""

from __future__ import annotations

import pytest

from livecoach.errors import ConfigError, PlanError
from livecoach.plan import all_out_strategy, build_run_model, constant_power_strategy, make_plan
from livecoach.plan.optimise import final_effort_search, optimise_run
from tests.plan_helpers import example_ride, short_ride


def _trap_speed(ride, trap_time_s):
    return ride.course.trap_m / trap_time_s


CASES = [
    # (label, ride patch, start speed, start W' fraction, DP speed range)
    ("flying start", {}, 24.0, 1.0, (18.0, 36.0)),
    ("W' part spent", {}, 24.0, 0.25, (14.0, 36.0)),
    ("late rise, head wind", {"course": {"elevation": [[0, 100.0], [1500, 92.0], [1800, 95.0], [2200, 94.0]]},
                              "air": {"headwind_mps": 1.0}}, 24.0, 1.0, (12.0, 36.0)),
]


@pytest.mark.slow
@pytest.mark.parametrize("label,patch,v0,w_frac,v_range", CASES, ids=[c[0] for c in CASES])
def test_optimiser_within_0p3_percent_of_dynamic_programming(label, patch, v0, w_frac, v_range):
    # Brute force: Bellman dynamic programming on a (speed, W' balance) grid with 33
    # power levels per segment (livecoach.plan.reference); its forward pass is a
    # feasible plan of the same discrete problem. The floor: within 0.3 %.
    from livecoach.plan.reference import solve_dp

    ride = short_ride(**patch)
    model = build_run_model(ride)
    w0 = w_frac * model.w_prime_j
    run = optimise_run(model, v0, w0)
    dp = solve_dp(model, v0, w0, speed_range_mps=v_range, n_speed=220, n_balance=31)
    ours = _trap_speed(ride, run.trap_time_s)
    brute = _trap_speed(ride, dp.trap_time_s)
    assert ours >= brute * (1.0 - 0.003)
    # In practice the two agree to far better than the floor.
    assert ours == pytest.approx(brute, rel=5e-4)
    # The DP's own estimate is consistent with its forward pass (the grid is fine enough).
    assert dp.value_s == pytest.approx(dp.trap_time_s, rel=2e-3)


def test_optimiser_matches_scipy_lbfgsb():
    # Reference optimiser: scipy.optimize.minimize(method="L-BFGS-B") on the same
    # objective and exact gradient, from several starts; ours must be as good.
    import numpy as np
    from scipy.optimize import minimize

    from livecoach.plan.model import objective_and_gradient
    from livecoach.plan.optimise import RUNUP_WEIGHT, trap_time_of

    ride = example_ride()
    model = build_run_model(ride)
    n = model.n_segments
    ours = optimise_run(model, 0.0, model.w_prime_j)

    def fg(x):
        f, ga, gb, _ = objective_and_gradient(model, list(x[:n]), list(x[n:]), 0.0, model.w_prime_j,
                                              RUNUP_WEIGHT)
        return f, np.array(ga + gb)

    best = float("inf")
    for go in (n - 30, n - 60, n - 120):
        x0 = np.array([0.0] * go + [1.0] * (n - go) + [0.0] * n)
        res = minimize(fg, x0, jac=True, method="L-BFGS-B", bounds=[(0.0, 1.0)] * (2 * n),
                       options={"maxiter": 500, "ftol": 1e-14, "gtol": 1e-10})
        powers = objective_and_gradient(model, list(res.x[:n]), list(res.x[n:]), 0.0,
                                        model.w_prime_j, 0.0, True)[3]
        from livecoach.plan.model import simulate
        tr = simulate(model, start_speed_mps=0.0, start_balance_j=model.w_prime_j, powers_w=powers)
        best = min(best, trap_time_of(model, tr))
    assert ours.trap_time_s <= best * (1.0 + 1e-6)


def test_plan_beats_simple_strategies_and_has_the_expected_shape():
    ride = example_ride()
    plan = make_plan(ride)
    steady = constant_power_strategy(ride)
    all_out = all_out_strategy(ride)
    assert plan.trap_speed_mps > steady.trap_speed_mps > all_out.trap_speed_mps
    # Hold CP, then one closing effort into and through the trap (common practice:
    # the bang-bang shape of time-trial optimal control, Gordon 2005 / de Jong et al. 2017).
    cp = ride.rider.cp_w
    before = [p for d, p in zip(plan.distance_m, plan.power_w) if d < plan.final_effort_m]
    after = [p for d, p in zip(plan.distance_m, plan.power_w) if d >= plan.final_effort_m]
    assert all(abs(p - cp) < 1.0 for p in before)
    assert all(p > cp for p in after)
    assert 0.0 < plan.w_prime_left_j < ride.rider.w_prime_j
    assert ride.course.trap_entry_m - 3000.0 < plan.final_effort_m < ride.course.trap_entry_m
    # The constant-power strategy is at the budget's edge: a little more is clipped.
    assert steady.power_w > cp


def test_plan_arrays_and_lookups():
    ride = example_ride()
    plan = make_plan(ride)
    d = plan.distance_m
    assert d[0] == 0.0 and d[-1] == pytest.approx(ride.course.trap_exit_m)
    assert max(b - a for a, b in zip(d[:-1], d[1:])) <= 25.0 + 1e-9
    assert len(plan.power_w) == len(plan.speed_mps) == len(plan.time_s) == len(d)
    assert plan.trap_time_s == pytest.approx(ride.course.trap_m / plan.trap_speed_mps)
    assert plan.runup_time_s == pytest.approx(plan.time_at_m(ride.course.trap_entry_m))
    pt = plan.at(6000.0)
    assert pt.final_effort and pt.target_power_w > ride.rider.cp_w
    assert plan.at(-5.0).distance_m == 0.0
    assert plan.at(1e6).planned_speed_mps == plan.speed_mps[-1]


def test_lower_drag_plans_faster():
    ride = example_ride()
    base = make_plan(ride)
    slick = make_plan(ride, cda_m2=0.027)
    assert slick.trap_speed_mps > base.trap_speed_mps
    assert slick.basis.cda_m2 == 0.027


def test_final_effort_search_is_a_good_start():
    ride = short_ride()
    model = build_run_model(ride)
    k, obj = final_effort_search(model, 24.0, model.w_prime_j)
    assert 0 < k < model.n_segments
    run = optimise_run(model, 24.0, model.w_prime_j)
    assert run.objective_s <= obj + 1e-9


def test_progress_callback_reaches_one():
    seen = []
    make_plan(short_ride(), progress=seen.append)
    assert seen and seen[-1] == 1.0 and all(0.0 <= f <= 1.0 for f in seen)


# ------------------------------------------------------------------ bad input
def test_unclimbable_runup_is_a_clear_error():
    # A 25 % wall in the run-up: at CP the vehicle would crawl over it at walking pace.
    ride = example_ride(course={"elevation": [[0, 1405.0], [1000, 1400.0], [1600, 1550.0], [6700, 1520.0]]})
    with pytest.raises(PlanError, match="cannot reach the trap within the budget.*1[0-9]{3} m"):
        make_plan(ride)
    # The same rise, gentle enough to ride over, plans normally.
    ride = example_ride(course={"elevation": [[0, 1405.0], [1000, 1400.0], [1600, 1406.0], [6700, 1385.0]]})
    assert make_plan(ride).trap_speed_mps > 20.0


def test_rider_and_course_errors_from_the_ride_file():
    with pytest.raises(ConfigError, match="pmax_w"):
        example_ride(rider={"cp_w": 400.0, "pmax_w": 350.0})
    with pytest.raises(ConfigError, match="w_prime_j"):
        example_ride(rider={"w_prime_j": 0.0})
    with pytest.raises(ConfigError, match="must cover 0..6700"):
        example_ride(course={"elevation": [[0, 100.0], [6600, 90.0]]})


def test_planner_rejects_inconsistent_objects_it_is_given():
    # Objects built in code (not from a file) are checked by the planner too.
    import dataclasses

    ride = example_ride()
    bad_rider = dataclasses.replace  # RiderConfig validates itself; bypass for the check
    rider = object.__new__(type(ride.rider))
    for f in dataclasses.fields(ride.rider):
        object.__setattr__(rider, f.name, getattr(ride.rider, f.name))
    object.__setattr__(rider, "pmax_w", 300.0)
    with pytest.raises(PlanError, match="pmax_w"):
        make_plan(dataclasses.replace(ride, rider=rider))
    assert bad_rider is dataclasses.replace
    short_course = object.__new__(type(ride.course))
    for f in dataclasses.fields(ride.course):
        object.__setattr__(short_course, f.name, getattr(ride.course, f.name))
    object.__setattr__(short_course, "distances_m", (0.0, 5000.0))
    object.__setattr__(short_course, "elevations_m", (100.0, 90.0))
    with pytest.raises(PlanError, match="shorter than run-up plus trap"):
        make_plan(dataclasses.replace(ride, course=short_course))
