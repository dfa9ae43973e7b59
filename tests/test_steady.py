"""Steady speed <-> steady power: round trips, monotonicity, closed forms, bad input."""

from __future__ import annotations

import math

import pytest
from hypothesis import assume, example, given, settings
from hypothesis import strategies as st

from livecoach.errors import NoSolutionError, PhysicsError
from livecoach.physics.atmosphere import air_density_kgpm3, isa_pressure_pa
from livecoach.physics.power_balance import GRAVITY_MPS2, VehicleModel
from livecoach.physics.steady import steady_power_w, steady_speed_mps

# Invented demo vehicle (a faired speed bike): not a measurement.
FAIRED = VehicleModel(mass_kg=98.0, cda_m2=0.030, crr=0.0035, drivetrain_efficiency=0.975,
                      wheel_inertia_kgm2=0.08, wheel_radius_m=1.47 / (2 * math.pi))

vehicles = st.builds(
    VehicleModel,
    mass_kg=st.floats(40.0, 200.0),
    cda_m2=st.floats(0.015, 0.5),
    crr=st.floats(0.001, 0.012),
    drivetrain_efficiency=st.floats(0.8, 1.0),
    bearing_loss=st.booleans(),
)
grades = st.floats(-0.06, 0.08)
densities = st.floats(0.7, 1.3)
winds = st.floats(-6.0, 6.0)


def test_closed_form_on_flat_without_rolling():
    # Martin et al. (1998) with Crr = 0, no grade, still air: E P = 1/2 rho CdA v^3.
    v = VehicleModel(mass_kg=90.0, cda_m2=0.25, crr=0.0, drivetrain_efficiency=0.97)
    speed = steady_speed_mps(300.0, 0.0, 1.2, v)
    assert speed == pytest.approx((2 * 0.97 * 300.0 / (1.2 * 0.25)) ** (1 / 3), rel=1e-9)


def test_terminal_coasting_speed_on_a_descent():
    # Martin et al. (1998) with P = 0: 1/2 rho CdA v^2 = -m g (sin(theta) + Crr cos(theta)).
    grade = -0.03
    theta = math.atan(grade)
    expected = math.sqrt(-2 * 98.0 * GRAVITY_MPS2 * (math.sin(theta) + 0.0035 * math.cos(theta))
                         / (1.0 * 0.030))
    assert steady_speed_mps(0.0, grade, 1.0, FAIRED) == pytest.approx(expected, rel=1e-9)


def test_thinner_air_at_altitude_gives_more_speed():
    # Common practice: speed trials are often held high up because thinner air gives more
    # speed for the same power. Standard-atmosphere pressure at 0 m and 2000 m, 20 deg C.
    rho_low = air_density_kgpm3(isa_pressure_pa(0.0), 20.0, 30.0)
    rho_high = air_density_kgpm3(isa_pressure_pa(2000.0), 20.0, 30.0)
    assert rho_high < rho_low
    v_low = steady_speed_mps(400.0, 0.0, rho_low, FAIRED)
    v_high = steady_speed_mps(400.0, 0.0, rho_high, FAIRED)
    assert v_high > v_low + 1.0  # well over a metre per second more


@settings(max_examples=150, deadline=None)
@given(vehicle=vehicles, power_w=st.floats(1.0, 1500.0), grade=grades, rho=densities, wind=winds)
# Regression (found by hypothesis): a coasting speed of ~135 m/s was rejected
# because the bracket doubled from 128 to 256 m/s, past the 200 m/s limit.
@example(vehicle=VehicleModel(mass_kg=178.0, cda_m2=0.015, crr=0.00390625, drivetrain_efficiency=1.0),
         power_w=1.0, grade=-0.0546875, rho=0.71875, wind=0.0)
def test_power_to_speed_to_power_round_trip(vehicle, power_w, grade, rho, wind):
    v = steady_speed_mps(power_w, grade, rho, vehicle, wind)
    assert v > 0.0
    assert steady_power_w(v, grade, rho, vehicle, wind) == pytest.approx(power_w, rel=1e-6, abs=1e-6)


@settings(max_examples=150, deadline=None)
@given(vehicle=vehicles, speed_mps=st.floats(0.5, 40.0), grade=grades, rho=densities)
def test_speed_to_power_to_speed_round_trip(vehicle, speed_mps, grade, rho):
    # Round trip on the stable branch, where the power to hold a speed rises with speed
    # (always so for positive power; braking on a descent is stable only above the speed
    # where braking power peaks).
    p = steady_power_w(speed_mps, grade, rho, vehicle)
    assume(steady_power_w(speed_mps * 1.0001, grade, rho, vehicle) > p)
    assert steady_speed_mps(p, grade, rho, vehicle) == pytest.approx(speed_mps, rel=1e-6)


@settings(max_examples=100, deadline=None)
@given(
    vehicle=vehicles,
    speed_mps=st.floats(1.0, 35.0),
    grade=grades,
    rho=densities,
    factor=st.floats(1.01, 2.0),
)
def test_steady_power_monotonic_in_cda_crr_density_grade(vehicle, speed_mps, grade, rho, factor):
    # Martin et al. (1998): every resistive term grows with its coefficient.
    base = steady_power_w(speed_mps, grade, rho, vehicle)
    assert steady_power_w(speed_mps, grade, rho, vehicle.with_(cda_m2=vehicle.cda_m2 * factor)) > base
    assert steady_power_w(speed_mps, grade, rho, vehicle.with_(crr=vehicle.crr * factor)) > base
    assert steady_power_w(speed_mps, grade, rho * factor, vehicle) > base
    assert steady_power_w(speed_mps, grade + 0.01 * factor, rho, vehicle) > base


@settings(max_examples=100, deadline=None)
@given(vehicle=vehicles, power_w=st.floats(20.0, 1200.0), grade=st.floats(-0.05, 0.05),
       rho=densities, factor=st.floats(1.01, 2.0))
def test_steady_speed_falls_with_cda_crr_density_grade(vehicle, power_w, grade, rho, factor):
    base = steady_speed_mps(power_w, grade, rho, vehicle)
    assert steady_speed_mps(power_w, grade, rho, vehicle.with_(cda_m2=vehicle.cda_m2 * factor)) < base
    assert steady_speed_mps(power_w, grade, rho, vehicle.with_(crr=vehicle.crr * factor)) < base
    assert steady_speed_mps(power_w, grade, rho * factor, vehicle) < base
    assert steady_speed_mps(power_w, grade + 0.01 * factor, rho, vehicle) < base


def test_braking_on_a_steep_descent_gives_the_stable_speed():
    # Still air, P = v F(v) with F = c + k v^2 (Martin et al. 1998, dv/dt = 0): braking power
    # -P peaks at v_m = v_coast / sqrt(3); holding a constant braking power is stable above
    # v_m (a little faster -> more drag -> slows back) and unstable below it.
    grade = -0.08
    v_coast = steady_speed_mps(0.0, grade, 1.0, FAIRED)
    v_m = v_coast / math.sqrt(3.0)
    p_fast = steady_power_w(55.0, grade, 1.0, FAIRED)
    assert p_fast < 0.0 and 55.0 > v_m
    assert steady_speed_mps(p_fast, grade, 1.0, FAIRED) == pytest.approx(55.0, rel=1e-8)
    # The same braking power also balances at a slower, unstable speed: the stable one is given.
    p_slow = steady_power_w(15.0, grade, 1.0, FAIRED)
    v = steady_speed_mps(p_slow, grade, 1.0, FAIRED)
    assert v_m < v < v_coast
    assert steady_power_w(v, grade, 1.0, FAIRED) == pytest.approx(p_slow, rel=1e-8)


def test_no_solution_is_reported_not_returned_as_nan():
    with pytest.raises(NoSolutionError, match="no steady forward speed"):
        steady_speed_mps(0.0, 0.02, 1.0, FAIRED)
    with pytest.raises(NoSolutionError, match="braking"):
        steady_speed_mps(-5000.0, -0.01, 1.0, FAIRED)


@pytest.mark.parametrize(
    "call, word",
    [
        (lambda: steady_speed_mps(math.nan, 0.0, 1.0, FAIRED), "crank_power_w"),
        (lambda: steady_speed_mps(300.0, math.nan, 1.0, FAIRED), "grade"),
        (lambda: steady_speed_mps(300.0, 0.0, 0.0, FAIRED), "air_density_kgpm3"),
        (lambda: steady_speed_mps(300.0, 0.0, 1.0, FAIRED, math.inf), "headwind_mps"),
        (lambda: steady_speed_mps(300.0, 0.0, 1.0, FAIRED.with_(cda_m2=0.0)), "cda_m2"),
        (lambda: steady_power_w(-1.0, 0.0, 1.0, FAIRED), "speed_mps"),
        (lambda: steady_power_w(math.nan, 0.0, 1.0, FAIRED), "speed_mps"),
        (lambda: steady_power_w(10.0, 0.0, math.nan, FAIRED), "air_density_kgpm3"),
    ],
)
def test_bad_inputs_raise_naming_the_argument(call, word):
    with pytest.raises(PhysicsError, match=word):
        call()
