"""The vehicle's motion: fixed-step RK4 on the power balance of the shared core.

State: distance along the course x (m) and ground speed v (m/s), plus running
integrals of the power terms (J) so the energy bookkeeping of a run can be
checked: crank work, wheel work, aero, rolling, bearing and grade work.

Equations: dx/dt = v, dv/dt = :func:`livecoach.physics.acceleration_mps2`
(Martin et al. 1998 solved for the acceleration), and the work rates from
:func:`livecoach.physics.power_terms` at that acceleration -- the simulator has
no second copy of the equations. Crank power, wind, CdA and Crr are held
constant within a step (zero-order hold); the course grade is evaluated at
each RK4 stage. Classical fourth-order Runge-Kutta (Kutta 1901; e.g. Press et
al., Numerical Recipes, 3rd ed., section 17.1).
"""

from __future__ import annotations

from livecoach.physics.power_balance import VehicleModel, acceleration_mps2, power_terms
from sim.environment import CourseProfile

#: Names of the work integrals kept in :attr:`MotionState.work_j`, J.
WORK_NAMES = ("crank", "wheel", "aero", "rolling", "bearing", "grade")


class MotionState:
    """Where the vehicle is: time (s), distance (m), speed (m/s), acceleration (m/s^2)
    at the last stage evaluated, and the work integrals (J) since the start."""

    __slots__ = ("t_s", "distance_m", "speed_mps", "accel_mps2", "work_j")

    def __init__(self, t_s: float, distance_m: float, speed_mps: float) -> None:
        self.t_s = t_s
        self.distance_m = distance_m
        self.speed_mps = speed_mps
        self.accel_mps2 = 0.0
        self.work_j = [0.0] * len(WORK_NAMES)


_NO_WORK = [0.0] * len(WORK_NAMES)


def _rates(
    crank_power_w: float, distance_m: float, speed_mps: float, course: CourseProfile,
    rho_kgpm3: float, vehicle: VehicleModel, headwind_mps: float, track_work: bool = True,
) -> tuple[float, list[float]]:
    """(dv/dt, [d(work)/dt for WORK_NAMES]) at one point."""
    grade = course.grade(distance_m)
    a = acceleration_mps2(crank_power_w, speed_mps, grade, rho_kgpm3, vehicle, headwind_mps)
    if not track_work:
        return a, _NO_WORK
    terms = power_terms(speed_mps, a, grade, rho_kgpm3, vehicle, headwind_mps)
    return a, [crank_power_w, terms.wheel_w, terms.aero_w, terms.rolling_w, terms.bearing_w, terms.grade_w]


def rk4_step(
    state: MotionState, dt_s: float, crank_power_w: float, course: CourseProfile,
    rho_kgpm3: float, vehicle: VehicleModel, headwind_mps: float, track_work: bool = True,
) -> None:
    """Advance ``state`` in place by ``dt_s`` s with the inputs held constant.

    ``track_work``: also integrate the work of each power term (twice the
    cost; off when no truth log is kept).

    The vehicle never rolls backwards on the run-up: a speed that would turn
    negative is set to 0 (a stopped vehicle waits for the rider).
    """
    x0, v0 = state.distance_m, state.speed_mps
    a1, w1 = _rates(crank_power_w, x0, v0, course, rho_kgpm3, vehicle, headwind_mps, track_work)
    h2 = 0.5 * dt_s
    a2, w2 = _rates(crank_power_w, x0 + h2 * v0, v0 + h2 * a1, course, rho_kgpm3, vehicle, headwind_mps, track_work)
    v2 = v0 + h2 * a1
    a3, w3 = _rates(crank_power_w, x0 + h2 * v2, v0 + h2 * a2, course, rho_kgpm3, vehicle, headwind_mps, track_work)
    v3 = v0 + h2 * a2
    v4 = v0 + dt_s * a3
    a4, w4 = _rates(crank_power_w, x0 + dt_s * v3, v4, course, rho_kgpm3, vehicle, headwind_mps, track_work)
    k = dt_s / 6.0
    state.distance_m = x0 + k * (v0 + 2.0 * v2 + 2.0 * v3 + v4)
    v_new = v0 + k * (a1 + 2.0 * a2 + 2.0 * a3 + a4)
    if track_work:
        work = state.work_j
        for i in range(len(work)):
            work[i] += k * (w1[i] + 2.0 * w2[i] + 2.0 * w3[i] + w4[i])
    state.speed_mps = v_new if v_new > 0.0 else 0.0
    state.accel_mps2 = a4
    state.t_s += dt_s
