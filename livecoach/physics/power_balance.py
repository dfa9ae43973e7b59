"""Longitudinal power balance of a bicycle-type vehicle.

Source: Martin, J. C., Milliken, D. L., Cobb, J. E., McFadden, K. L. and
Coggan, A. R. (1998), "Validation of a mathematical model for road cycling
power", Journal of Applied Biomechanics 14, 276-291:

    P_crank * E_c = P_aero + P_roll + P_bearing + P_grade + P_kinetic

    P_aero    = 1/2 * rho * CdA * v_air^2 * v_ground   (v_air = v_ground + head wind)
    P_roll    = Crr * m * g * cos(atan(G)) * v_ground
    P_bearing = v_ground * (91 + 8.7 * v_ground) * 1e-3           (optional)
    P_grade   = m * g * sin(atan(G)) * v_ground
    P_kinetic = (m + I / r^2) * a * v_ground

where G is the grade (rise over run, positive uphill), I the moment of
inertia of all wheels (kg*m^2), r the wheel radius (m), E_c the drivetrain
efficiency between the crank power meter and the wheel.

Martin et al. measured the aero term with a wheel-rotation term F_w added to
CdA; here it is folded into CdA, as is common practice for faired vehicles.
The bearing term is off by default: on-road rolling-resistance estimates
usually absorb it into Crr (common practice).

Sign convention for wind: ``headwind_mps`` > 0 blows against the rider. With
a measured air speed (``airspeed_mps``), that value is used as v_air instead.
Drag acts against the relative wind: P_aero uses v_air * |v_air|.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from livecoach.errors import PhysicsError

#: Standard gravity, m/s^2 (CGPM 1901).
GRAVITY_MPS2 = 9.80665

#: Below this speed the propulsive force P/v is capped at P/v_min, m/s: a
#: documented treatment of a standing start (the real limit is the rider's
#: maximal crank force, which this lumps into one number).
MIN_PROPULSION_SPEED_MPS = 1.0


@dataclass(frozen=True, slots=True)
class VehicleModel:
    """Parameters of the vehicle + rider system (SI units).

    mass_kg: total mass of vehicle, rider and kit, kg.
    cda_m2: drag area, m^2.  crr: rolling-resistance coefficient, -.
    drivetrain_efficiency: crank power to wheel power, (0, 1].
    wheel_inertia_kgm2: moment of inertia of all wheels together, kg*m^2.
    wheel_radius_m: rolling radius of the wheels, m (circumference / 2 pi).
    bearing_loss: include Martin et al. (1998) wheel-bearing loss term.
    """

    mass_kg: float
    cda_m2: float
    crr: float
    drivetrain_efficiency: float = 0.975
    wheel_inertia_kgm2: float = 0.0
    wheel_radius_m: float = 0.25
    bearing_loss: bool = False

    def __post_init__(self) -> None:
        checks = (
            ("mass_kg", self.mass_kg, self.mass_kg > 0.0),
            ("cda_m2", self.cda_m2, self.cda_m2 >= 0.0),
            ("crr", self.crr, self.crr >= 0.0),
            (
                "drivetrain_efficiency",
                self.drivetrain_efficiency,
                0.0 < self.drivetrain_efficiency <= 1.0,
            ),
            ("wheel_inertia_kgm2", self.wheel_inertia_kgm2, self.wheel_inertia_kgm2 >= 0.0),
            ("wheel_radius_m", self.wheel_radius_m, self.wheel_radius_m > 0.0),
        )
        for name, value, ok in checks:
            if not (math.isfinite(value) and ok):
                raise PhysicsError(f"VehicleModel.{name}={value!r} is out of range")

    @property
    def effective_mass_kg(self) -> float:
        """Mass plus the wheels' rotational inertia as equivalent mass, m + I/r^2 (kg)."""
        return self.mass_kg + self.wheel_inertia_kgm2 / (self.wheel_radius_m**2)

    def with_(self, **changes: float) -> "VehicleModel":
        """Copy with some fields changed (e.g. ``model.with_(cda_m2=0.031)``)."""
        fields = {
            "mass_kg": self.mass_kg,
            "cda_m2": self.cda_m2,
            "crr": self.crr,
            "drivetrain_efficiency": self.drivetrain_efficiency,
            "wheel_inertia_kgm2": self.wheel_inertia_kgm2,
            "wheel_radius_m": self.wheel_radius_m,
            "bearing_loss": self.bearing_loss,
        }
        fields.update(changes)
        return VehicleModel(**fields)  # type: ignore[arg-type]


@dataclass(frozen=True, slots=True)
class PowerTerms:
    """Where the power goes, W (Martin et al. 1998 terms; wheel side unless noted)."""

    aero_w: float
    rolling_w: float
    bearing_w: float
    grade_w: float
    kinetic_w: float

    @property
    def wheel_w(self) -> float:
        """Total power needed at the wheel, W."""
        return self.aero_w + self.rolling_w + self.bearing_w + self.grade_w + self.kinetic_w


def _air_speed(speed_mps: float, headwind_mps: float, airspeed_mps: float | None) -> float:
    return speed_mps + headwind_mps if airspeed_mps is None else airspeed_mps


def grade_angle_rad(grade: float) -> float:
    """Road angle, rad, from grade (rise over run, -)."""
    return math.atan(grade)


def resistive_force_n(
    speed_mps: float,
    grade: float,
    air_density_kgpm3: float,
    vehicle: VehicleModel,
    headwind_mps: float = 0.0,
    airspeed_mps: float | None = None,
) -> float:
    """Sum of the steady forces opposing motion, N (aero + rolling + bearing + grade).

    Rolling and bearing resistance act only while the vehicle moves (speed > 0).
    """
    theta = math.atan(grade)
    v_air = _air_speed(speed_mps, headwind_mps, airspeed_mps)
    f_aero = 0.5 * air_density_kgpm3 * vehicle.cda_m2 * v_air * abs(v_air)
    moving = speed_mps > 0.0
    f_roll = vehicle.crr * vehicle.mass_kg * GRAVITY_MPS2 * math.cos(theta) if moving else 0.0
    f_bearing = (91.0 + 8.7 * speed_mps) * 1e-3 if (vehicle.bearing_loss and moving) else 0.0
    f_grade = vehicle.mass_kg * GRAVITY_MPS2 * math.sin(theta)
    return f_aero + f_roll + f_bearing + f_grade


def power_terms(
    speed_mps: float,
    accel_mps2: float,
    grade: float,
    air_density_kgpm3: float,
    vehicle: VehicleModel,
    headwind_mps: float = 0.0,
    airspeed_mps: float | None = None,
) -> PowerTerms:
    """The terms of the power balance at one instant, W (Martin et al. 1998)."""
    v = speed_mps
    theta = math.atan(grade)
    v_air = _air_speed(v, headwind_mps, airspeed_mps)
    aero = 0.5 * air_density_kgpm3 * vehicle.cda_m2 * v_air * abs(v_air) * v
    rolling = vehicle.crr * vehicle.mass_kg * GRAVITY_MPS2 * math.cos(theta) * v
    bearing = v * (91.0 + 8.7 * v) * 1e-3 if vehicle.bearing_loss else 0.0
    grade_w = vehicle.mass_kg * GRAVITY_MPS2 * math.sin(theta) * v
    kinetic = vehicle.effective_mass_kg * accel_mps2 * v
    return PowerTerms(aero, rolling, bearing, grade_w, kinetic)


def crank_power_w(
    speed_mps: float,
    accel_mps2: float,
    grade: float,
    air_density_kgpm3: float,
    vehicle: VehicleModel,
    headwind_mps: float = 0.0,
    airspeed_mps: float | None = None,
) -> float:
    """Crank power, W, needed for the given motion (Martin et al. 1998, eq. 9).

    ``speed_mps``: ground speed, m/s; ``accel_mps2``: dv/dt, m/s^2;
    ``grade``: rise over run; ``air_density_kgpm3``: kg/m^3.
    Negative means the vehicle would need braking (or coasts down).
    """
    terms = power_terms(
        speed_mps, accel_mps2, grade, air_density_kgpm3, vehicle, headwind_mps, airspeed_mps
    )
    return terms.wheel_w / vehicle.drivetrain_efficiency


def acceleration_mps2(
    crank_power_w: float,
    speed_mps: float,
    grade: float,
    air_density_kgpm3: float,
    vehicle: VehicleModel,
    headwind_mps: float = 0.0,
    airspeed_mps: float | None = None,
    min_propulsion_speed_mps: float = MIN_PROPULSION_SPEED_MPS,
) -> float:
    """Acceleration, m/s^2, for a given crank power, W, at ``speed_mps`` (m/s).

    The power balance solved for a: a = (E_c P / v - F_resist) / (m + I/r^2).
    At standing start the propulsive force is capped at E_c P / v_min
    (``min_propulsion_speed_mps``), so the model stays finite at v = 0.
    A vehicle at rest with too little force to move stays at rest (no
    backward rolling from static friction is modelled on a downhill-only
    run-up; on an uphill from rest it rolls back, as physics says).
    """
    if not math.isfinite(crank_power_w) or not math.isfinite(speed_mps):
        raise PhysicsError(
            f"acceleration_mps2 got a non-finite input: power={crank_power_w!r}, speed={speed_mps!r}"
        )
    v_prop = max(speed_mps, min_propulsion_speed_mps)
    f_prop = vehicle.drivetrain_efficiency * crank_power_w / v_prop
    f_res = resistive_force_n(
        speed_mps, grade, air_density_kgpm3, vehicle, headwind_mps, airspeed_mps
    )
    if speed_mps <= 0.0:
        # At rest rolling resistance is static: it holds up to Crr*m*g*cos.
        static = vehicle.crr * vehicle.mass_kg * GRAVITY_MPS2 * math.cos(math.atan(grade))
        net = f_prop - f_res
        if abs(net) <= static:
            return 0.0
        net -= math.copysign(static, net)
        return net / vehicle.effective_mass_kg
    return (f_prop - f_res) / vehicle.effective_mass_kg
