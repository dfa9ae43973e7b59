"""The longitudinal power balance against Martin et al. (1998) and facts of the trade."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.errors import PhysicsError
from livecoach.physics.power_balance import (
    GRAVITY_MPS2,
    VehicleModel,
    acceleration_mps2,
    crank_power_w,
    power_terms,
    resistive_force_n,
)

# ---------------------------------------------------------------- Martin et al. (1998)
# Source: Martin, Milliken, Cobb, McFadden & Coggan (1998), "Validation of a mathematical
# model for road cycling power", J. Appl. Biomech. 14:276-291, worked example (inputs and
# results from memory, as quoted in the project's design notes): m 90 kg; V_g 8.36 m/s,
# from 8.28 to 8.45 m/s over 56.42 s; wind 2.94 m/s from 310 deg, heading 340 deg;
# G 0.003; CdA 0.9 * 0.285 m^2 plus F_w 0.0044 m^2; I 0.14 kg m^2; r 0.311 m; Crr 0.0032;
# E_c 0.976; rho about 1.224 kg/m^3. Published terms: aero 158.8 W, rolling 23.6 W,
# bearings 1.4 W, potential 22.1 W, kinetic 2.3 W; total 213.3 W at the crank.
MARTIN = VehicleModel(
    mass_kg=90.0,
    cda_m2=0.9 * 0.285 + 0.0044,  # F_w folded into CdA, as our model does
    crr=0.0032,
    drivetrain_efficiency=0.976,
    wheel_inertia_kgm2=0.14,
    wheel_radius_m=0.311,
    bearing_loss=True,
)
MARTIN_V_MPS = 8.36
MARTIN_ACCEL_MPS2 = (8.45 - 8.28) / 56.42
MARTIN_WIND_MPS = 2.94 * math.cos(math.radians(310.0 - 340.0))  # tangential component
MARTIN_RHO = 1.224


def _martin_terms():
    return power_terms(MARTIN_V_MPS, MARTIN_ACCEL_MPS2, 0.003, MARTIN_RHO, MARTIN,
                       headwind_mps=MARTIN_WIND_MPS)


def test_martin_1998_terms():
    t = _martin_terms()
    # Martin et al. (1998) worked example, published to 0.1 W (values from memory); their
    # rho is given to 4 digits and g = 9.81 (from memory), hence the small allowances.
    assert t.aero_w == pytest.approx(158.8, abs=0.3)
    assert t.rolling_w == pytest.approx(23.6, abs=0.1)
    assert t.bearing_w == pytest.approx(1.4, abs=0.05)
    assert t.grade_w == pytest.approx(22.1, abs=0.1)
    assert t.kinetic_w == pytest.approx(2.3, abs=0.05)


def test_martin_1998_total_at_crank():
    # Martin et al. (1998): total 213.3 W at the crank (from memory).
    p = crank_power_w(MARTIN_V_MPS, MARTIN_ACCEL_MPS2, 0.003, MARTIN_RHO, MARTIN,
                      headwind_mps=MARTIN_WIND_MPS)
    assert p == pytest.approx(213.3, abs=0.5)
    assert p == pytest.approx(_martin_terms().wheel_w / 0.976, rel=1e-12)


def test_measured_airspeed_replaces_ground_speed_plus_wind():
    # Martin et al. (1998): the aero term uses the air speed tangent to the direction of travel.
    with_wind = power_terms(MARTIN_V_MPS, 0.0, 0.0, MARTIN_RHO, MARTIN, headwind_mps=MARTIN_WIND_MPS)
    with_probe = power_terms(MARTIN_V_MPS, 0.0, 0.0, MARTIN_RHO, MARTIN,
                             headwind_mps=99.0, airspeed_mps=MARTIN_V_MPS + MARTIN_WIND_MPS)
    assert with_probe.aero_w == pytest.approx(with_wind.aero_w, rel=1e-12)


def test_effective_mass_includes_wheel_inertia():
    # Martin et al. (1998): kinetic term uses m + I / r^2.
    assert MARTIN.effective_mass_kg == pytest.approx(90.0 + 0.14 / 0.311**2, rel=1e-12)


# ---------------------------------------------------------------- common practice
UPRIGHT_BIKE = VehicleModel(
    # Common practice (typical values, from memory): a racing bicycle and rider on the drops,
    # CdA about 0.30 m^2, Crr about 0.004 on good tarmac, 80 kg all up, chain ~97.5 %.
    mass_kg=80.0, cda_m2=0.30, crr=0.004, drivetrain_efficiency=0.975,
)


def test_cube_law_three_times_speed_takes_27_times_aero_power():
    # Common practice: in still air aerodynamic power grows with the cube of speed.
    p1 = power_terms(5.0, 0.0, 0.0, 1.2, UPRIGHT_BIKE).aero_w
    p3 = power_terms(15.0, 0.0, 0.0, 1.2, UPRIGHT_BIKE).aero_w
    assert p3 / p1 == pytest.approx(27.0, rel=1e-12)


def test_upright_bike_at_45_kmh_spends_about_90_percent_on_air():
    # Common practice: an upright racing bicycle at about 45 km/h on the flat spends roughly
    # 90 % of the rider's power on air drag (typical values above; sea-level air 1.2 kg/m^3).
    t = power_terms(45.0 / 3.6, 0.0, 0.0, 1.2, UPRIGHT_BIKE)
    share = t.aero_w / t.wheel_w
    assert 0.85 <= share <= 0.95


def test_grade_and_rolling_terms_follow_the_road_angle():
    # Martin et al. (1998): rolling Crr m g cos(atan G) v, potential m g sin(atan G) v.
    g = 0.08
    t = power_terms(4.0, 0.0, g, 1.2, UPRIGHT_BIKE)
    theta = math.atan(g)
    assert t.rolling_w == pytest.approx(0.004 * 80.0 * GRAVITY_MPS2 * math.cos(theta) * 4.0)
    assert t.grade_w == pytest.approx(80.0 * GRAVITY_MPS2 * math.sin(theta) * 4.0)


def test_tailwind_faster_than_vehicle_pushes():
    # Common practice: drag acts against the relative wind, so a tailwind faster than the
    # vehicle pushes it (negative aero power).
    assert power_terms(3.0, 0.0, 0.0, 1.2, UPRIGHT_BIKE, headwind_mps=-5.0).aero_w < 0.0


# ---------------------------------------------------------------- both directions agree
vehicles = st.builds(
    VehicleModel,
    mass_kg=st.floats(40.0, 200.0),
    cda_m2=st.floats(0.01, 0.5),
    crr=st.floats(0.001, 0.012),
    drivetrain_efficiency=st.floats(0.8, 1.0),
    wheel_inertia_kgm2=st.floats(0.0, 0.3),
    wheel_radius_m=st.floats(0.15, 0.35),
    bearing_loss=st.booleans(),
)


@settings(max_examples=150, deadline=None)
@given(
    vehicle=vehicles,
    power_w=st.floats(-500.0, 1500.0),
    speed_mps=st.floats(1.0, 40.0),
    grade=st.floats(-0.1, 0.1),
    rho=st.floats(0.7, 1.3),
    wind=st.floats(-8.0, 8.0),
)
def test_acceleration_inverts_crank_power(vehicle, power_w, speed_mps, grade, rho, wind):
    # Martin et al. (1998) power balance solved both ways must agree (above the
    # standing-start propulsion floor of 1 m/s).
    a = acceleration_mps2(power_w, speed_mps, grade, rho, vehicle, headwind_mps=wind)
    back = crank_power_w(speed_mps, a, grade, rho, vehicle, headwind_mps=wind)
    assert back == pytest.approx(power_w, abs=1e-6 * max(1.0, abs(power_w)))


def test_vehicle_at_rest_is_held_by_static_rolling_resistance():
    # Common practice: a vehicle at rest with too little net force stays at rest.
    assert acceleration_mps2(0.0, 0.0, 0.001, 1.2, UPRIGHT_BIKE) == 0.0
    assert acceleration_mps2(0.0, 0.0, -0.001, 1.2, UPRIGHT_BIKE) == 0.0
    # Steep enough: it rolls (downhill forward, uphill back).
    assert acceleration_mps2(0.0, 0.0, -0.05, 1.2, UPRIGHT_BIKE) > 0.0
    assert acceleration_mps2(0.0, 0.0, 0.05, 1.2, UPRIGHT_BIKE) < 0.0
    # Pedalling from rest on the flat moves it forward, finitely.
    a = acceleration_mps2(400.0, 0.0, 0.0, 1.2, UPRIGHT_BIKE)
    assert 0.0 < a < 10.0


def test_rolling_resistance_opposes_backward_motion():
    # Common practice: friction opposes the direction of travel.
    f_fwd = resistive_force_n(2.0, 0.0, 0.0, UPRIGHT_BIKE)
    f_back = resistive_force_n(-2.0, 0.0, 0.0, UPRIGHT_BIKE)
    assert f_fwd > 0.0 and f_back == pytest.approx(-f_fwd)
    assert resistive_force_n(0.0, 0.0, 1.2, UPRIGHT_BIKE) == 0.0


# ---------------------------------------------------------------- bad input
@pytest.mark.parametrize(
    "changes, word",
    [
        ({"mass_kg": -80.0}, "mass_kg"),
        ({"mass_kg": 0.0}, "mass_kg"),
        ({"mass_kg": math.nan}, "mass_kg"),
        ({"drivetrain_efficiency": 0.0}, "drivetrain_efficiency"),
        ({"drivetrain_efficiency": 1.01}, "drivetrain_efficiency"),
        ({"cda_m2": -0.1}, "cda_m2"),
        ({"crr": math.inf}, "crr"),
        ({"wheel_radius_m": 0.0}, "wheel_radius_m"),
        ({"wheel_inertia_kgm2": -1.0}, "wheel_inertia_kgm2"),
        ({"mass_kg": "80"}, "mass_kg"),
        ({"bearing_loss": 1}, "bearing_loss"),
    ],
)
def test_bad_vehicle_rejected_naming_the_field(changes, word):
    base = {"mass_kg": 80.0, "cda_m2": 0.3, "crr": 0.004}
    base.update(changes)
    with pytest.raises(PhysicsError, match=word):
        VehicleModel(**base)


@pytest.mark.parametrize(
    "kwargs, word",
    [
        ({"speed_mps": math.nan}, "speed_mps"),
        ({"accel_mps2": math.inf}, "accel_mps2"),
        ({"grade": math.nan}, "grade"),
        ({"air_density_kgpm3": -1.0}, "air_density_kgpm3"),
        ({"air_density_kgpm3": math.nan}, "air_density_kgpm3"),
        ({"headwind_mps": math.nan}, "headwind_mps"),
        ({"airspeed_mps": math.nan}, "airspeed_mps"),
    ],
)
def test_no_nan_flows_out_of_the_power_balance(kwargs, word):
    args = {"speed_mps": 10.0, "accel_mps2": 0.0, "grade": 0.0, "air_density_kgpm3": 1.2,
            "vehicle": UPRIGHT_BIKE}
    args.update(kwargs)
    with pytest.raises(PhysicsError, match=word):
        crank_power_w(**args)


def test_acceleration_rejects_nan_power():
    with pytest.raises(PhysicsError, match="crank_power_w"):
        acceleration_mps2(math.nan, 10.0, 0.0, 1.2, UPRIGHT_BIKE)


def test_with_changes_one_field_and_rejects_unknown():
    assert UPRIGHT_BIKE.with_(cda_m2=0.25).cda_m2 == 0.25
    assert UPRIGHT_BIKE.with_(cda_m2=0.25).mass_kg == UPRIGHT_BIKE.mass_kg
    with pytest.raises(PhysicsError, match="cdA"):
        UPRIGHT_BIKE.with_(cdA=0.2)
