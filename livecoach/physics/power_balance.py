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
Rolling and bearing resistance oppose the direction of travel (they need
power for either direction of motion and vanish at rest).

Every function checks its inputs and raises
:class:`~livecoach.errors.PhysicsError` naming the argument for NaN, infinity,
text or a negative air density, so no NaN leaves this module.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from livecoach.errors import PhysicsError
from livecoach.physics._checks import finite

#: Standard gravity, m/s^2 (CGPM 1901).
GRAVITY_MPS2 = 9.80665

#: Below this speed the propulsive force P/v is capped at P/v_min, m/s: a
#: documented treatment of a standing start (the real limit is the rider's
#: maximal crank force, which this lumps into one number).
MIN_PROPULSION_SPEED_MPS = 1.0


@dataclass(frozen=True, slots=True)
class VehicleModel:
    """Parameters of the vehicle + rider system (SI units).

    mass_kg: total mass of vehicle, rider and kit, kg (> 0).
    cda_m2: drag area, m^2 (>= 0).  crr: rolling-resistance coefficient, - (>= 0).
    drivetrain_efficiency: crank power to wheel power, (0, 1].
    wheel_inertia_kgm2: moment of inertia of all wheels together, kg*m^2 (>= 0).
    wheel_radius_m: rolling radius of the wheels, m (circumference / 2 pi, > 0).
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
        rules = (
            ("mass_kg", lambda x: x > 0.0, "> 0 kg"),
            ("cda_m2", lambda x: x >= 0.0, ">= 0 m^2"),
            ("crr", lambda x: x >= 0.0, ">= 0"),
            ("drivetrain_efficiency", lambda x: 0.0 < x <= 1.0, "in (0, 1]"),
            ("wheel_inertia_kgm2", lambda x: x >= 0.0, ">= 0 kg*m^2"),
            ("wheel_radius_m", lambda x: x > 0.0, "> 0 m"),
        )
        for name, ok, allowed in rules:
            value = getattr(self, name)
            x = finite(f"VehicleModel.{name}", value)
            if not ok(x):
                raise PhysicsError(f"VehicleModel.{name}={value!r} is out of range: must be {allowed}")
            object.__setattr__(self, name, x)
        if not isinstance(self.bearing_loss, bool):
            raise PhysicsError(
                f"VehicleModel.bearing_loss={self.bearing_loss!r} must be True or False"
            )

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
        unknown = set(changes) - set(fields)
        if unknown:
            raise PhysicsError(f"VehicleModel has no field(s) {', '.join(sorted(unknown))}")
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


def _motion_inputs(
    speed_mps: float,
    grade: float,
    air_density_kgpm3: float,
    headwind_mps: float,
    airspeed_mps: float | None,
) -> tuple[float, float, float, float]:
    """Checked (speed, grade, density, air speed) as floats; PhysicsError names a bad one."""
    v = finite("speed_mps", speed_mps)
    g = finite("grade", grade)
    rho = finite("air_density_kgpm3", air_density_kgpm3)
    if rho < 0.0:
        raise PhysicsError(f"air_density_kgpm3={air_density_kgpm3!r} must be >= 0")
    if airspeed_mps is None:
        v_air = v + finite("headwind_mps", headwind_mps)
    else:
        v_air = finite("airspeed_mps", airspeed_mps)
    return v, g, rho, v_air


def grade_angle_rad(grade: float) -> float:
    """Road angle, rad, from grade (rise over run, -)."""
    return math.atan(finite("grade", grade))


def resistive_force_n(
    speed_mps: float,
    grade: float,
    air_density_kgpm3: float,
    vehicle: VehicleModel,
    headwind_mps: float = 0.0,
    airspeed_mps: float | None = None,
) -> float:
    """Sum of the steady forces opposing forward motion, N (aero + rolling + bearing + grade).

    ``speed_mps``: ground speed, m/s (negative when rolling backwards);
    ``grade``: rise over run; ``air_density_kgpm3``: kg/m^3; ``headwind_mps``:
    wind along the course, + against the rider, m/s; ``airspeed_mps``: a
    measured air speed, m/s, used instead of speed + head wind when given.
    Rolling and bearing resistance oppose the direction of travel and vanish
    at rest. Source: the force form of Martin et al. (1998).
    """
    v, g, rho, v_air = _motion_inputs(speed_mps, grade, air_density_kgpm3, headwind_mps, airspeed_mps)
    theta = math.atan(g)
    direction = (v > 0.0) - (v < 0.0)
    f_aero = 0.5 * rho * vehicle.cda_m2 * v_air * abs(v_air)
    f_roll = direction * vehicle.crr * vehicle.mass_kg * GRAVITY_MPS2 * math.cos(theta)
    f_bearing = direction * (91.0 + 8.7 * abs(v)) * 1e-3 if vehicle.bearing_loss else 0.0
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
    """The terms of the power balance at one instant, W at the wheel (Martin et al. 1998).

    ``speed_mps``: ground speed, m/s; ``accel_mps2``: dv/dt, m/s^2; ``grade``:
    rise over run; ``air_density_kgpm3``: kg/m^3; ``headwind_mps``: m/s, +
    against the rider; ``airspeed_mps``: measured air speed, m/s (overrides
    speed + head wind). The kinetic term uses the instantaneous form
    (m + I/r^2) * a * v of Martin's 1/2 (m + I/r^2)(v_f^2 - v_i^2)/dt.
    """
    v, g, rho, v_air = _motion_inputs(speed_mps, grade, air_density_kgpm3, headwind_mps, airspeed_mps)
    a = finite("accel_mps2", accel_mps2)
    theta = math.atan(g)
    speed = abs(v)
    aero = 0.5 * rho * vehicle.cda_m2 * v_air * abs(v_air) * v
    rolling = vehicle.crr * vehicle.mass_kg * GRAVITY_MPS2 * math.cos(theta) * speed
    bearing = speed * (91.0 + 8.7 * speed) * 1e-3 if vehicle.bearing_loss else 0.0
    grade_w = vehicle.mass_kg * GRAVITY_MPS2 * math.sin(theta) * v
    kinetic = vehicle.effective_mass_kg * a * v
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
    """Crank power, W, needed for the given motion (Martin et al. 1998: the
    sum of the wheel-side terms divided by the drivetrain efficiency).

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

    The power balance of Martin et al. (1998) solved for a:
    a = (E_c P / v - F_resist) / (m + I/r^2), so that for v >= the propulsion
    floor ``crank_power_w(v, a, ...)`` gives back P exactly.
    At a standing start the propulsive force is capped at E_c P / v_min
    (``min_propulsion_speed_mps``, m/s), so the model stays finite at v = 0.
    At rest, rolling resistance acts as static friction up to Crr*m*g*cos(theta):
    a vehicle with too little net force stays at rest; a larger net force
    (e.g. on a steep enough slope) moves it, rolling back if need be.
    """
    p = finite("crank_power_w", crank_power_w)
    v = finite("speed_mps", speed_mps)
    v_min = finite("min_propulsion_speed_mps", min_propulsion_speed_mps)
    if v_min <= 0.0:
        raise PhysicsError(f"min_propulsion_speed_mps={min_propulsion_speed_mps!r} must be > 0")
    v_prop = max(v, v_min)
    f_prop = vehicle.drivetrain_efficiency * p / v_prop
    f_res = resistive_force_n(v, grade, air_density_kgpm3, vehicle, headwind_mps, airspeed_mps)
    if v == 0.0:
        # At rest rolling resistance is static: it holds up to Crr*m*g*cos.
        static = vehicle.crr * vehicle.mass_kg * GRAVITY_MPS2 * math.cos(math.atan(grade))
        net = f_prop - f_res
        if abs(net) <= static:
            return 0.0
        net -= math.copysign(static, net)
        return net / vehicle.effective_mass_kg
    return (f_prop - f_res) / vehicle.effective_mass_kg
