"""Steady speed for a given power, and power for a given steady speed.

Steady state means dv/dt = 0 in the power balance of Martin et al. (1998),
J. Appl. Biomech. 14, 276-291: E_c * P = v * F(v), with F(v) the resistive
force of :func:`livecoach.physics.power_balance.resistive_force_n`
(aero + rolling + bearing + grade), which never decreases with v.

The speed is found by a bracketed root search (regula falsi with the
Illinois modification, Dowell & Jarratt 1971, BIT 11, 168-174, falling
back to bisection), robust on any grade:

* Where F(v) >= 0 the wheel power v * F(v) rises with v, so a positive
  power has exactly one steady speed there.
* On a descent steep enough to coast (F(0) < 0), zero power gives the
  terminal coasting speed v0 with F(v0) = 0, and a negative (braking) power
  gives the largest speed below v0 that the brakes can hold - the stable
  equilibrium a rider reaches by holding that braking power from above.
"""

from __future__ import annotations

from typing import Callable

from livecoach.errors import NoSolutionError, PhysicsError
from livecoach.physics._checks import finite
from livecoach.physics.power_balance import VehicleModel, resistive_force_n

#: Highest steady speed searched for, m/s: beyond it the inputs are surely wrong.
MAX_SPEED_MPS = 200.0
_MAX_SPEED_MPS = MAX_SPEED_MPS  # kept for older callers
#: Grid of the downward scan for a braking equilibrium on a descent.
_BRAKING_SCAN_POINTS = 256


def steady_power_w(
    speed_mps: float,
    grade: float,
    air_density_kgpm3: float,
    vehicle: VehicleModel,
    headwind_mps: float = 0.0,
) -> float:
    """Crank power, W, to hold ``speed_mps`` (m/s, >= 0) steady on ``grade`` (rise/run).

    ``air_density_kgpm3``: kg/m^3; ``headwind_mps``: m/s, + against the rider.
    Negative on a descent steep enough to coast faster than ``speed_mps``
    (the power that braking must take out). Source: Martin et al. (1998) with
    dv/dt = 0.
    """
    v = finite("speed_mps", speed_mps)
    if v < 0.0:
        raise PhysicsError(f"speed_mps={speed_mps!r} must be >= 0")
    force_n = resistive_force_n(v, grade, air_density_kgpm3, vehicle, headwind_mps)
    return v * force_n / vehicle.drivetrain_efficiency


def _solve(f: Callable[[float], float], lo: float, f_lo: float, hi: float, f_hi: float,
           tol_mps: float) -> float:
    """Root of ``f`` in [lo, hi] with f(lo) < 0 <= f(hi): Illinois regula falsi."""
    side = 0
    x = 0.5 * (lo + hi)
    for _ in range(200):
        x = (lo * f_hi - hi * f_lo) / (f_hi - f_lo)
        if not lo < x < hi:
            x = 0.5 * (lo + hi)
        fx = f(x)
        if fx == 0.0:
            return x
        if fx > 0.0:
            hi, f_hi = x, fx
            if side == -1:
                f_lo *= 0.5
            side = -1
        else:
            lo, f_lo = x, fx
            if side == 1:
                f_hi *= 0.5
            side = 1
        if hi - lo < tol_mps:
            break
    return 0.5 * (lo + hi)


def steady_speed_mps(
    crank_power_w: float,
    grade: float,
    air_density_kgpm3: float,
    vehicle: VehicleModel,
    headwind_mps: float = 0.0,
    tol_mps: float = 1e-9,
) -> float:
    """Steady ground speed, m/s, at constant crank power ``crank_power_w`` (W).

    ``grade``: rise over run; ``air_density_kgpm3``: kg/m^3 (> 0);
    ``headwind_mps``: m/s, + against the rider; ``tol_mps``: width of the
    final bracket, m/s. Works on any grade: on a descent with zero power it
    returns the terminal coasting speed, with negative power the speed the
    brakes hold. Raises :class:`NoSolutionError` when no forward steady speed
    exists (too little power to move up the grade, or more braking than the
    descent can feed) and :class:`PhysicsError` for bad inputs.

    Where two speeds balance the same braking power, the faster one is
    returned: there the power to hold a speed rises with speed, so the
    equilibrium is stable (a little faster means more drag and it slows back).
    """
    p = finite("crank_power_w", crank_power_w)
    g = finite("grade", grade)
    rho = finite("air_density_kgpm3", air_density_kgpm3)
    wind = finite("headwind_mps", headwind_mps)
    tol = finite("tol_mps", tol_mps)
    if rho <= 0.0:
        raise PhysicsError(f"air_density_kgpm3={air_density_kgpm3!r} must be > 0")
    if vehicle.cda_m2 <= 0.0:
        raise PhysicsError("steady_speed_mps needs cda_m2 > 0 (otherwise no finite speed)")
    if tol <= 0.0:
        raise PhysicsError(f"tol_mps={tol_mps!r} must be > 0")
    wheel_w = p * vehicle.drivetrain_efficiency

    def force(v: float) -> float:
        return resistive_force_n(v, g, rho, vehicle, wind)

    def f(v: float) -> float:
        return v * force(v) - wheel_w

    tiny = 1e-9
    if force(tiny) >= 0.0:
        # Wheel power rises with speed from zero: one root if the power is positive.
        if wheel_w <= 0.0:
            raise NoSolutionError(
                f"no steady forward speed at {p:.1f} W on grade {g:+.4f}: rolling resistance "
                "and grade need more power than that at every speed"
            )
        lo, f_lo = tiny, f(tiny)
        hi = 1.0
    else:
        # A descent that coasts: find the terminal coasting speed v0, F(v0) = 0.
        lo, hi = tiny, 1.0
        while force(hi) < 0.0:
            if hi >= MAX_SPEED_MPS:
                raise NoSolutionError(
                    f"coasting speed above {MAX_SPEED_MPS} m/s on grade {g:+.4f}: check the inputs"
                )
            lo, hi = hi, min(hi * 2.0, MAX_SPEED_MPS)
        v0 = _solve(force, lo, force(lo), hi, force(hi), tol)
        if wheel_w == 0.0:
            return v0
        if wheel_w < 0.0:
            # Braking: the largest root below v0 (f(v0) = -wheel_w > 0), scanning down.
            step = v0 / _BRAKING_SCAN_POINTS
            upper, f_upper = v0, f(v0)
            for i in range(_BRAKING_SCAN_POINTS - 1, 0, -1):
                x = i * step
                fx = f(x)
                if fx < 0.0:
                    return _solve(f, x, fx, upper, f_upper, tol)
                upper, f_upper = x, fx
            raise NoSolutionError(
                f"braking {-p:.1f} W is more than the descent (grade {g:+.4f}) feeds at any "
                "steady speed"
            )
        lo, f_lo = v0, f(v0)
        hi = max(2.0 * v0, v0 + 1.0)
    f_hi = f(hi)
    while f_hi < 0.0:
        if hi >= MAX_SPEED_MPS:
            raise NoSolutionError(
                f"steady speed above {MAX_SPEED_MPS} m/s at {p:.1f} W: check the inputs"
            )
        lo, f_lo = hi, f_hi
        hi = min(hi * 2.0, MAX_SPEED_MPS)
        f_hi = f(hi)
    return _solve(f, lo, f_lo, hi, f_hi, tol)
