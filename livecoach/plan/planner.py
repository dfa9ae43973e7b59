"""``make_plan``: the run-up power profile that maximises the mean trap speed.

The problem (see :mod:`livecoach.plan.model`): from ``start_speed_mps`` at
the start line with a full W′, choose the power on every segment of at most
25 m, within 0 .. CP + (Pmax - CP)·W′bal/W′ (Morton 1996; W′ balance by
Skiba et al. 2015), to minimise the time from trap entry to trap exit under
the power balance of Martin et al. (1998) with the course's grades, the air
density and the head wind. Solved by :func:`livecoach.plan.optimise.optimise_run`;
checked against dynamic programming in the tests (:mod:`livecoach.plan.reference`).

Standing start (``start_speed_mps`` = 0): the vehicle starts from rest under
the rider's power, with the propulsive force capped at η·P/(1 m/s) below
1 m/s (the physics core's rule, a stand-in for the rider's maximal crank
force). A real start is a push from a catcher and a few seconds of
low-cadence effort; the planned first seconds are therefore approximate,
but they do not change the trap speed: the vehicle is at its steady speed
at CP long before the closing effort starts.

When the vehicle cannot reach the trap even all-out (a rise it cannot
climb), :class:`PlanError` says where it stops.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from livecoach.errors import PlanError
from livecoach.plan.model import DEFAULT_SPACING_M, RunModel, build_run_model, simulate
from livecoach.plan.optimise import optimise_run, trap_time_of
from livecoach.plan.plan import Plan, PlanBasis, final_effort_start_m

Progress = Callable[[float], None]

#: Slowest speed a plan may ask for once the vehicle has got going, m/s. A
#: faired two-wheeler needs speed to stay upright; below a walking pace it
#: falls over (common practice; about 3 m/s is a livecoach choice).
MIN_RIDEABLE_SPEED_MPS = 3.0


def _plan_from_run(model: RunModel, ride, run, basis: PlanBasis, note: str = "") -> Plan:
    traj = run.trajectory
    powers = list(traj.power_w) + [traj.power_w[-1]]
    fe = final_effort_start_m(traj.distance_m, powers, model.cp_w, model.trap_exit_m)
    return Plan(
        distance_m=traj.distance_m,
        power_w=tuple(powers),
        speed_mps=traj.speed_mps,
        time_s=traj.time_s,
        w_prime_balance_j=traj.w_prime_balance_j,
        basis=basis,
        final_effort_m=fe,
        note=note,
    )


def _check_rideable(traj, min_speed_mps: float, trap_exit_m: float) -> None:
    """PlanError if the plan's speed drops below ``min_speed_mps`` after first reaching it."""
    got_going = False
    for d, v in zip(traj.distance_m, traj.speed_mps):
        if v >= min_speed_mps:
            got_going = True
        elif got_going:
            raise PlanError(
                f"cannot reach the trap within the budget: even the best plan slows to {v:.1f} m/s "
                f"at {d:.0f} m (below the rideable {min_speed_mps:g} m/s); the run-up climbs too "
                f"much for this rider and vehicle before the trap at {trap_exit_m:.0f} m"
            )


def _check_reachable(model: RunModel, start_speed_mps: float) -> None:
    """PlanError if the vehicle stops before the trap exit even all-out."""
    traj = simulate(model, start_speed_mps=start_speed_mps, start_balance_j=model.w_prime_j,
                    fractions=[1.0] * model.n_segments)
    if traj.stalled_at_m is not None:
        raise PlanError(
            f"cannot reach the trap within the budget: even all-out from the start the vehicle "
            f"stops at about {traj.stalled_at_m:.0f} m (trap exit {model.trap_exit_m:.0f} m); "
            f"the run-up is too steep uphill for this rider and vehicle"
        )


def make_plan(
    ride,
    *,
    cda_m2: float | None = None,
    crr: float | None = None,
    air_density_kgpm3: float | None = None,
    headwind_mps: float | None = None,
    spacing_m: float = DEFAULT_SPACING_M,
    max_evaluations: int = 400,
    min_speed_mps: float = MIN_RIDEABLE_SPEED_MPS,
    progress: Progress | None = None,
) -> Plan:
    """The optimal run-up plan for ``ride`` (a RideConfig).

    ``cda_m2``/``crr``/``air_density_kgpm3``/``headwind_mps`` override the
    ride file's values (m², -, kg/m³, m/s). ``progress(fraction)`` is called
    as the optimiser works (for a progress bar). Raises :class:`PlanError`
    when no plan can reach the trap, or when even the best plan slows below
    ``min_speed_mps`` after getting going (a rise it cannot ride over).
    """
    model = build_run_model(
        ride, cda_m2=cda_m2, crr=crr, air_density_kgpm3=air_density_kgpm3,
        headwind_mps=headwind_mps, spacing_m=spacing_m,
    )
    v0 = ride.course.start_speed_mps
    _check_reachable(model, v0)
    run = optimise_run(model, v0, model.w_prime_j, max_evaluations=max_evaluations,
                       min_speed_mps=min_speed_mps, progress=progress)
    _check_rideable(run.trajectory, max(min_speed_mps, 0.5), model.trap_exit_m)
    basis = PlanBasis.from_ride(ride, cda_m2=model.cda_m2, crr=model.crr,
                                air_density_kgpm3=model.air_density_kgpm3,
                                headwind_mps=model.headwind_mps)
    note = "standing start (see planner docs)" if v0 == 0.0 else ""
    return _plan_from_run(model, ride, run, basis, note)


# ------------------------------------------------------------ comparisons
@dataclass(frozen=True, slots=True)
class StrategyResult:
    """A simple strategy's outcome: its name, power (W, if constant) and trap speed (m/s)."""

    name: str
    power_w: float | None
    trap_speed_mps: float
    w_prime_left_j: float


def _trap_speed(model: RunModel, traj) -> float:
    return (model.trap_exit_m - model.trap_entry_m) / trap_time_of(model, traj)


def constant_power_strategy(ride, model: RunModel | None = None) -> StrategyResult:
    """Constant power from start to trap exit at the highest level the W′ budget
    allows (the power is never above what is available), found by bisection."""
    model = model or build_run_model(ride)
    v0 = ride.course.start_speed_mps
    n = model.n_segments

    def run(p: float):
        return simulate(model, start_speed_mps=v0, start_balance_j=model.w_prime_j, powers_w=[p] * n)

    def feasible(p: float) -> bool:
        tr = run(p)
        return tr.stalled_at_m is None and all(abs(q - p) < 1e-9 for q in tr.power_w)

    lo, hi = model.cp_w, model.pmax_w
    if not feasible(lo):
        raise PlanError("constant power at CP does not reach the trap")
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if feasible(mid):
            lo = mid
        else:
            hi = mid
        if hi - lo < 1e-3:
            break
    tr = run(lo)
    return StrategyResult("constant_power", lo, _trap_speed(model, tr), tr.w_prime_balance_j[-1])


def all_out_strategy(ride, model: RunModel | None = None) -> StrategyResult:
    """All-out from the start: always the full power available."""
    model = model or build_run_model(ride)
    tr = simulate(model, start_speed_mps=ride.course.start_speed_mps, start_balance_j=model.w_prime_j,
                  fractions=[1.0] * model.n_segments)
    if tr.stalled_at_m is not None:
        raise PlanError(f"all-out from the start stops at {tr.stalled_at_m:.0f} m")
    return StrategyResult("all_out", None, _trap_speed(model, tr), tr.w_prime_balance_j[-1])


#: The sensitivity cases: (name, label, how to change the ride's values).
SENSITIVITY_CASES = (
    ("cda_m2", "-5 %", 0.95), ("cda_m2", "+5 %", 1.05),
    ("crr", "-10 %", 0.90), ("crr", "+10 %", 1.10),
    ("headwind_mps", "-1 m/s", -1.0), ("headwind_mps", "+1 m/s", 1.0),
    ("air_density_kgpm3", "-3 %", 0.97), ("air_density_kgpm3", "+3 %", 1.03),
)


def sensitivity_table(ride, plan: Plan, progress: Progress | None = None) -> list[dict]:
    """Trap speed of the re-optimised plan when one input changes (CdA ±5 %,
    Crr ±10 %, head wind ±1 m/s, air density ±3 %), and of the nominal plan's
    power profile ridden in those conditions."""
    base = build_run_model(ride, cda_m2=plan.basis.cda_m2, crr=plan.basis.crr,
                           air_density_kgpm3=plan.basis.air_density_kgpm3,
                           headwind_mps=plan.basis.headwind_mps)
    v0 = ride.course.start_speed_mps
    rows = []
    for i, (name, label, change) in enumerate(SENSITIVITY_CASES):
        value = getattr(base, name) + change if name == "headwind_mps" else getattr(base, name) * change
        model = base.with_(**{name: value})
        run = optimise_run(model, v0, model.w_prime_j, extra_starts=False)
        fixed = simulate(model, start_speed_mps=v0, start_balance_j=model.w_prime_j,
                         powers_w=list(plan.power_w[:-1]))
        fixed_speed = math.nan if fixed.stalled_at_m is not None else _trap_speed(model, fixed)
        rows.append({
            "parameter": name,
            "change": label,
            "value": value,
            "trap_speed_mps": _trap_speed(model, run.trajectory),
            "delta_mps": _trap_speed(model, run.trajectory) - plan.trap_speed_mps,
            "same_plan_trap_speed_mps": fixed_speed,
        })
        if progress is not None:
            progress((i + 1) / len(SENSITIVITY_CASES))
    return rows
