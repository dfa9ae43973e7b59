"""The planner's discrete model: physics, integration accuracy, gradient, grid."""

from __future__ import annotations

import math
import random

import pytest

from livecoach.physics.power_balance import acceleration_mps2
from livecoach.physics.steady import steady_speed_mps
from livecoach.plan.model import (
    build_run_model,
    grid_nodes_m,
    objective_and_gradient,
    segment_step,
    simulate,
)
from tests.plan_helpers import example_ride, short_ride


def test_grid_spacing_and_trap_nodes():
    nodes = grid_nodes_m(6500.0, 200.0, 25.0, 0.0)
    gaps = [b - a for a, b in zip(nodes[:-1], nodes[1:])]
    assert max(gaps) <= 25.0 + 1e-9
    assert nodes[0] == 0.0 and nodes[-1] == pytest.approx(6700.0)
    assert 6500.0 in nodes
    assert gaps[0] == 1.0  # short first steps for a standing start
    flying = grid_nodes_m(2000.0, 200.0, 25.0, 24.0)
    assert flying[1] == pytest.approx(25.0)


def test_acceleration_matches_physics_core():
    # The model's force balance is the physics core's (Martin et al. 1998).
    ride = example_ride(air={"headwind_mps": 1.3})
    model = build_run_model(ride)
    vm = ride.vehicle_model()
    k = 300 - 40  # a 25 m segment on the run-up
    grade = model.seg_grade[k]
    for v in (0.3, 5.0, 17.0, 29.0):
        for p in (0.0, 330.0, 800.0):
            # One Euler step of dE/ds = a over a tiny segment reproduces a.
            a_core = acceleration_mps2(p, v, grade, model.air_density_kgpm3, vm, 1.3)
            va = v + 1.3
            a_model = (vm.drivetrain_efficiency * p / max(v, 1.0) - model.air_coef_kgpm * va * abs(va)
                       - model.seg_force_n[k]) / vm.effective_mass_kg
            assert a_model == pytest.approx(a_core, rel=1e-12, abs=1e-12)


def test_holding_power_converges_to_physics_steady_speed():
    # On a constant grade the simulated speed at constant power tends to the
    # physics core's steady speed (Martin et al. 1998 balance with dv/dt = 0).
    ride = example_ride(course={"runup_m": 19800.0, "elevation": [[0, 1405.0], [20000, 1305.0]]})
    model = build_run_model(ride)
    tr = simulate(model, start_speed_mps=0.0, start_balance_j=model.w_prime_j,
                  powers_w=[330.0] * model.n_segments)
    v_ss = steady_speed_mps(330.0, model.seg_grade[-1], model.air_density_kgpm3, ride.vehicle_model())
    assert tr.speed_mps[-1] == pytest.approx(v_ss, rel=1e-4)


def test_time_integration_agrees_with_scipy_ode_solver():
    # Reference: scipy.integrate.solve_ivp (a general-purpose ODE library) on
    # dv/dt = a(P, v), dx/dt = v with the physics core's acceleration, in time.
    from scipy.integrate import solve_ivp

    ride = short_ride()
    model = build_run_model(ride)
    vm = ride.vehicle_model()
    rho = model.air_density_kgpm3
    n = model.n_segments
    powers = [330.0 if k < 40 else 450.0 for k in range(n)]  # never above the W' ceiling
    tr = simulate(model, start_speed_mps=24.0, start_balance_j=model.w_prime_j, powers_w=powers)

    def power_at(x):
        k = min(int(x // 25.0), n - 1)
        return powers[k], model.seg_grade[k]

    def rhs(t, y):
        p, g = power_at(y[0])
        return [y[1], acceleration_mps2(p, y[1], g, rho, vm)]

    def reach(x_end):
        def ev(t, y):
            return y[0] - x_end
        ev.terminal = True
        return ev

    sol = solve_ivp(rhs, (0.0, 200.0), [0.0, 24.0], events=[reach(2000.0), reach(2200.0)],
                    rtol=1e-10, atol=1e-10, max_step=0.05, dense_output=True)
    t_entry = sol.t_events[0][0]
    sol2 = solve_ivp(rhs, (0.0, 200.0), [0.0, 24.0], events=[reach(2200.0)],
                     rtol=1e-10, atol=1e-10, max_step=0.05)
    t_exit = sol2.t_events[0][0]
    assert all(abs(p - q) < 1e-9 for p, q in zip(tr.power_w, powers))
    assert tr.time_at_m(2000.0) == pytest.approx(t_entry, rel=1e-5)
    assert tr.time_s[-1] - tr.time_at_m(2000.0) == pytest.approx(t_exit - t_entry, rel=1e-4)


def test_grid_refinement_changes_little():
    # The 25 m grid is fine enough: 5 m spacing changes the trap time < 0.05 %.
    from livecoach.plan.optimise import trap_time_of

    ride = example_ride()
    coarse = build_run_model(ride)
    fine = build_run_model(ride, spacing_m=5.0)

    def trap_time(model):
        powers = [330.0 if d < 5300.0 else 700.0 for d in model.nodes_m[:-1]]
        return trap_time_of(model, simulate(model, start_speed_mps=0.0,
                                            start_balance_j=model.w_prime_j, powers_w=powers))

    assert trap_time(coarse) == pytest.approx(trap_time(fine), rel=5e-4)


def test_gradient_matches_finite_differences():
    ride = short_ride(air={"headwind_mps": 0.8})
    model = build_run_model(ride)
    n = model.n_segments
    rng = random.Random(11)
    spend = [rng.uniform(0.05, 0.4) for _ in range(n)]
    ease = [rng.uniform(0.02, 0.3) for _ in range(n)]
    f, gs, ge, _ = objective_and_gradient(model, spend, ease, 24.0, 15000.0, 1e-3)
    h = 1e-6
    for k in (0, 7, 40, 80, n - 1):
        for which, grad in ((spend, gs), (ease, ge)):
            up = list(which)
            dn = list(which)
            up[k] += h
            dn[k] -= h
            args_up = (up, ease) if which is spend else (spend, up)
            args_dn = (dn, ease) if which is spend else (spend, dn)
            fd = (objective_and_gradient(model, *args_up, 24.0, 15000.0, 1e-3)[0]
                  - objective_and_gradient(model, *args_dn, 24.0, 15000.0, 1e-3)[0]) / (2 * h)
            assert grad[k] == pytest.approx(fd, rel=1e-4, abs=1e-9)


def test_objective_forward_equals_simulate():
    ride = short_ride()
    model = build_run_model(ride)
    n = model.n_segments
    spend = [0.0] * 50 + [1.0] * (n - 50)
    f, _, _, powers = objective_and_gradient(model, spend, [0.0] * n, 24.0, model.w_prime_j, 0.0, True)
    tr = simulate(model, start_speed_mps=24.0, start_balance_j=model.w_prime_j, powers_w=powers)
    assert f == pytest.approx(tr.time_s[-1] - tr.time_at_m(2000.0), rel=1e-12)


def test_tail_model_continues_the_run():
    ride = example_ride()
    model = build_run_model(ride)
    powers = [330.0 if d < 5300.0 else 650.0 for d in model.nodes_m[:-1]]
    full = simulate(model, start_speed_mps=0.0, start_balance_j=model.w_prime_j, powers_w=powers)
    k = 200
    tail = model.tail(model.nodes_m[k])
    rest = simulate(tail, start_speed_mps=full.speed_mps[k], start_balance_j=full.w_prime_balance_j[k],
                    start_time_s=full.time_s[k], powers_w=powers[k:])
    assert rest.time_s[-1] == pytest.approx(full.time_s[-1], rel=1e-12)
    # From a point between nodes the first segment is a fragment with the right grade.
    mid = model.tail(model.nodes_m[k] + 10.0)
    assert mid.nodes_m[0] == pytest.approx(model.nodes_m[k] + 10.0)
    assert mid.seg_ds_m[0] == pytest.approx(model.nodes_m[k + 1] - model.nodes_m[k] - 10.0)
    assert mid.seg_grade[0] == pytest.approx(model.seg_grade[k])


def test_standing_start_is_finite_and_moves():
    ride = example_ride()
    model = build_run_model(ride)
    tr = simulate(model, start_speed_mps=0.0, start_balance_j=model.w_prime_j,
                  powers_w=[330.0] * model.n_segments)
    assert tr.stalled_at_m is None
    assert all(math.isfinite(t) for t in tr.time_s)
    v1, *_ = segment_step(model, 0, 0.0, 0.0, model.w_prime_j, 330.0)
    assert 0.5 < v1 < 5.0
