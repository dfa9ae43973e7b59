"""Optimising the power profile of a run (pure Python, no scipy).

Two steps, both deterministic:

1. :func:`final_effort_search` — the best plan of the simplest useful shape:
   hold CP, then go all-out from one node to the trap exit (the
   bang-bang shape optimal-control studies of time trials find; Gordon
   2005, de Jong et al. 2017). The hold trajectory is simulated once and
   every candidate start of the closing effort is tried (coarse, then
   node by node around the best).
2. :func:`optimise_run` — from that start, the spectral projected gradient
   method (:mod:`livecoach.plan.spg`) over every segment's control, with the
   exact gradient of :func:`livecoach.plan.model.objective_and_gradient`,
   so shapes other than bang-bang (recovering below CP, easing on a rise,
   part efforts) are found when they are better.

The objective is the trap time (s) plus a tie-breaking 1e-6 × run-up time,
which only decides between plans of equal trap time (faster run-up wins).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from livecoach.errors import PlanError
from livecoach.physics.power_balance import MIN_PROPULSION_SPEED_MPS
from livecoach.plan.model import (
    E_STALL_J_PER_KG,
    RunModel,
    Trajectory,
    check_finite_state,
    objective_and_gradient,
    simulate,
)
from livecoach.plan.spg import spg_minimise

#: Weight of the run-up time in the objective (a tie-breaker only).
RUNUP_WEIGHT = 1e-6

Progress = Callable[[float], None]


@dataclass(frozen=True, slots=True)
class OptimisedRun:
    """Result of an optimisation on a :class:`RunModel`.

    powers_w: net power per segment, W; trajectory: the exact simulation of
    those powers; objective_s: trap time (+ tie-breaker) of the trajectory;
    spend/ease: the optimiser's controls (for warm starts); evaluations: number
    of objective evaluations.
    """

    powers_w: tuple[float, ...]
    trajectory: Trajectory
    objective_s: float
    trap_time_s: float
    spend: tuple[float, ...]
    ease: tuple[float, ...]
    evaluations: int


def trap_time_of(model: RunModel, traj: Trajectory) -> float:
    """Time spent on the trap segments of ``model`` in ``traj``, s."""
    total = 0.0
    for k in range(model.n_segments):
        if model.seg_in_trap[k]:
            total += traj.time_s[k + 1] - traj.time_s[k]
    return total


def final_effort_search(
    model: RunModel,
    start_speed_mps: float,
    start_balance_j: float,
    *,
    max_candidates: int = 40,
    around: int | None = None,
    window: int = 8,
) -> tuple[int, float]:
    """Best node to start an all-out effort after holding CP: (segment index, objective s).

    Index ``n_segments`` means "hold CP to the end". Objective as in the
    module doc. ``around``: only try segment indices within ``window`` of this
    one (and "never"), e.g. near the previous re-plan's choice.
    """
    check_finite_state(start_speed_mps, start_balance_j)
    n = model.n_segments
    cp, wp, kk = model.cp_w, model.w_prime_j, model.decline_rate_per_j
    trap = model.seg_in_trap
    ds_l, fc_l = model.seg_ds_m, model.seg_force_n
    M = model.effective_mass_kg
    eta = model.efficiency
    ca = model.air_coef_kgpm
    hw = model.headwind_mps
    b1 = model.bearing_slope_nspm
    vmin = MIN_PROPULSION_SPEED_MPS
    e_stall = E_STALL_J_PER_KG
    sqrt = math.sqrt
    expm1 = math.expm1

    def run(k0: int, v: float, E: float, w: float, all_out: bool, record: bool) -> float:
        """Cost from segment k0 to the end (same arithmetic as segment_step)."""
        c = 0.0
        for j in range(k0, n):
            p = cp + kk * (w if w > 0.0 else 0.0) if all_out else cp
            ds = ds_l[j]
            fc = fc_l[j]
            va = v + hw
            a0 = (eta * p / (v if v > vmin else vmin) - ca * va * abs(va) - fc - b1 * v) / M
            E1p = E + a0 * ds
            if E1p < e_stall:
                E1p = e_stall
            v1p = sqrt(2.0 * E1p)
            va = v1p + hw
            a1 = (eta * p / (v1p if v1p > vmin else vmin) - ca * va * abs(va) - fc - b1 * v1p) / M
            E1 = E + 0.5 * (a0 + a1) * ds
            if E1 < e_stall:
                E1 = e_stall
            v1 = sqrt(2.0 * E1)
            dt = 2.0 * ds / (v + v1)
            if p >= cp:
                w = w - (p - cp) * dt
            elif w < wp:
                w = w - (wp - w) * expm1(-(cp - p) * dt / wp)
            if w < 0.0:
                w = 0.0
            c += dt if trap[j] else RUNUP_WEIGHT * dt
            v, E = v1, E1
            if record:
                states.append((v, E, w))
                cost_before.append(c)
        return c

    # Hold trajectory: states at every node and the cost accumulated so far.
    states = [(start_speed_mps, 0.5 * start_speed_mps**2, start_balance_j)]
    cost_before = [0.0]
    run(0, *states[0], False, True)

    def all_out_from(k: int) -> float:
        if k >= n:
            return cost_before[n]
        return cost_before[k] + run(k, *states[k], True, False)

    tried: dict[int, float] = {n: cost_before[n]}
    if around is not None:
        for k in range(max(0, around - window), min(n, around + window + 1)):
            tried[k] = all_out_from(k)
        best = min(tried, key=lambda k: (tried[k], -k))
        return best, tried[best]
    stride = max(1, n // max_candidates)
    candidates = list(range(n, -1, -stride))
    if candidates[-1] != 0:
        candidates.append(0)
    for k in candidates:
        tried[k] = all_out_from(k)
    best = min(tried, key=lambda k: (tried[k], -k))
    for k in range(max(0, best - stride + 1), min(n, best + stride - 1) + 1):
        if k not in tried:
            tried[k] = all_out_from(k)
    best = min(tried, key=lambda k: (tried[k], -k))
    return best, tried[best]


def _objective(model: RunModel, v0: float, w0: float, counter: list[int], progress: Progress | None,
               budget: int, min_speed_mps: float):
    n = model.n_segments

    def fun(x: list[float]) -> tuple[float, list[float]]:
        J, ga, gb, _ = objective_and_gradient(model, x[:n], x[n:], v0, w0, RUNUP_WEIGHT,
                                              min_speed_mps=min_speed_mps)
        counter[0] += 1
        if progress is not None:
            progress(min(1.0, counter[0] / budget))
        return J, ga + gb

    return fun


def optimise_run(
    model: RunModel,
    start_speed_mps: float,
    start_balance_j: float,
    *,
    max_evaluations: int = 400,
    warm_start: tuple[list[float], list[float]] | None = None,
    extra_starts: bool = True,
    min_speed_mps: float = 0.0,
    progress: Progress | None = None,
) -> OptimisedRun:
    """Optimise the power of every segment of ``model`` from the given state.

    ``warm_start``: (spend, ease) controls to start from as well (e.g. the
    previous re-plan); ``extra_starts``: also start from "hold CP" (costs a
    second run of the optimiser; used for the pre-ride plan); ``min_speed_mps``:
    penalise speeds below this once reached (see ``objective_and_gradient``).
    """
    check_finite_state(start_speed_mps, start_balance_j)
    n = model.n_segments
    around = None
    if warm_start is not None:
        spend, ease = warm_start
        if len(spend) != n or len(ease) != n:
            raise PlanError(f"warm start has {len(spend)} controls for {n} segments")
        around = n
        while around > 0 and spend[around - 1] > 0.999:
            around -= 1
    k_go, _ = final_effort_search(model, start_speed_mps, start_balance_j, around=around)
    starts: list[list[float]] = [[0.0] * k_go + [1.0] * (n - k_go) + [0.0] * n]
    if warm_start is not None:
        starts.append(list(spend) + list(ease))
    if extra_starts:
        starts.append([0.0] * (2 * n))
    counter = [0]
    budget = max_evaluations * len(starts)
    fun = _objective(model, start_speed_mps, start_balance_j, counter, progress, budget, min_speed_mps)
    best_x: list[float] | None = None
    best_f = float("inf")
    if min_speed_mps > 0.0:
        starts.append([1.0] * n + [0.0] * n)  # all-out: the best chance over a rise
    for x0 in starts:
        x, f, _ = spg_minimise(fun, x0, max_evaluations=max_evaluations)
        if f < best_f:
            best_x, best_f = x, f
    chosen = best_x if best_x is not None else starts[0]
    spend = chosen[:n]
    ease = chosen[n:]
    _, _, _, powers = objective_and_gradient(
        model, spend, ease, start_speed_mps, start_balance_j, RUNUP_WEIGHT, want_trajectory=True,
        min_speed_mps=min_speed_mps,
    )
    traj = simulate(model, start_speed_mps=start_speed_mps, start_balance_j=start_balance_j,
                    powers_w=powers)
    if progress is not None:
        progress(1.0)
    return OptimisedRun(
        powers_w=tuple(traj.power_w),
        trajectory=traj,
        objective_s=best_f,
        trap_time_s=trap_time_of(model, traj),
        spend=tuple(spend),
        ease=tuple(ease),
        evaluations=counter[0],
    )
