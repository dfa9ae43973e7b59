"""Steady speed for a given power, and power for a given steady speed.

Steady state means dv/dt = 0 in the power balance of Martin et al. (1998).
The speed is found by a bracketed root search (bisection refined by the
Illinois variant of regula falsi; Dowell & Jarratt 1971), which is robust
for any grade: the wheel-power function P(v) is continuous, and for v >= 0
with positive CdA it grows without bound, so a bracket always exists when a
solution does.
"""

from __future__ import annotations

import math

from livecoach.errors import NoSolutionError, PhysicsError
from livecoach.physics.power_balance import VehicleModel
from livecoach.physics.power_balance import crank_power_w as _crank_power_w

_MAX_SPEED_MPS = 200.0


def steady_power_w(
    speed_mps: float,
    grade: float,
    air_density_kgpm3: float,
    vehicle: VehicleModel,
    headwind_mps: float = 0.0,
) -> float:
    """Crank power, W, to hold ``speed_mps`` (m/s) steady on ``grade`` (rise/run).

    Negative on a descent steep enough to coast faster than ``speed_mps``.
    """
    if not math.isfinite(speed_mps) or speed_mps < 0.0:
        raise PhysicsError(f"speed_mps={speed_mps!r} must be a finite number >= 0")
    return _crank_power_w(speed_mps, 0.0, grade, air_density_kgpm3, vehicle, headwind_mps)


def steady_speed_mps(
    crank_power_w: float,
    grade: float,
    air_density_kgpm3: float,
    vehicle: VehicleModel,
    headwind_mps: float = 0.0,
    tol_mps: float = 1e-9,
) -> float:
    """Steady ground speed, m/s, at constant crank power ``crank_power_w`` (W).

    Works on any grade: on a descent with zero power it returns the terminal
    coasting speed. Raises :class:`NoSolutionError` when no forward steady
    speed exists (e.g. too little power to climb the grade at all).
    """
    if not math.isfinite(crank_power_w):
        raise PhysicsError(f"crank_power_w={crank_power_w!r} is not finite")
    if vehicle.cda_m2 <= 0.0:
        raise PhysicsError("steady_speed_mps needs cda_m2 > 0 (otherwise no finite speed)")

    crank_power_w_ = crank_power_w

    def f(v: float) -> float:
        return _crank_power_w(v, 0.0, grade, air_density_kgpm3, vehicle, headwind_mps) - crank_power_w_

    lo, hi = 1e-9, 1.0
    f_lo = f(lo)
    if f_lo > 0.0:
        # Even the slowest crawl needs more power than given.
        raise NoSolutionError(
            f"{crank_power_w_:.1f} W is too little to move at a steady speed on grade {grade:+.4f}"
        )
    f_hi = f(hi)
    while f_hi < 0.0:
        lo, f_lo = hi, f_hi
        hi *= 2.0
        if hi > _MAX_SPEED_MPS:
            raise NoSolutionError(
                f"steady speed above {_MAX_SPEED_MPS} m/s at {crank_power_w_:.1f} W: check inputs"
            )
        f_hi = f(hi)
    # Illinois regula falsi on the bracket [lo, hi].
    side = 0
    for _ in range(200):
        x = (lo * f_hi - hi * f_lo) / (f_hi - f_lo)
        if not lo < x < hi:
            x = 0.5 * (lo + hi)
        fx = f(x)
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
        if hi - lo < tol_mps or fx == 0.0:
            return x
    return 0.5 * (lo + hi)

