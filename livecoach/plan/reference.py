"""Brute-force reference for the planner: dynamic programming on a fine grid.

Bellman's dynamic programming (Bellman 1957) over the state (node, speed,
W′ balance) with a grid of powers per segment: backward induction of the
least remaining trap time V_k(v, W′bal) with bilinear interpolation between
grid points, then a forward pass that at every node picks the power with
the best one-step look-ahead from the *actual* state and steps it with the
planner's own arithmetic (:func:`livecoach.plan.model.segment_step`). The
forward pass is therefore a feasible plan of the same problem; its trap
time bounds the optimum from above, and the optimiser must come within a
small margin of it.

Slow by design (numpy, millions of state-control pairs per node): for tests
and benchmarks only, never on the live path.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from livecoach.physics.power_balance import MIN_PROPULSION_SPEED_MPS
from livecoach.plan.model import _E_STALL, RunModel, Trajectory, segment_step


@dataclass(frozen=True)
class DPResult:
    """value_s: DP estimate of the least trap time from the start state (s);
    trajectory: the forward pass; trap_time_s: its trap time (s)."""

    value_s: float
    trajectory: Trajectory
    trap_time_s: float


def _step_vec(model: RunModel, k: int, v0, w0, p):
    """Vectorised :func:`segment_step` (same arithmetic)."""
    ds = model.seg_ds_m[k]
    fc = model.seg_force_n[k]
    M = model.effective_mass_kg
    eta = model.efficiency
    ca = model.air_coef_kgpm
    hw = model.headwind_mps
    b1 = model.bearing_slope_nspm
    vmin = MIN_PROPULSION_SPEED_MPS
    E0 = 0.5 * v0 * v0
    va = v0 + hw
    a0 = (eta * p / np.maximum(v0, vmin) - ca * va * np.abs(va) - fc - b1 * v0) / M
    E1p = np.maximum(E0 + a0 * ds, _E_STALL)
    v1p = np.sqrt(2.0 * E1p)
    va = v1p + hw
    a1 = (eta * p / np.maximum(v1p, vmin) - ca * va * np.abs(va) - fc - b1 * v1p) / M
    E1 = np.maximum(E0 + 0.5 * (a0 + a1) * ds, _E_STALL)
    v1 = np.sqrt(2.0 * E1)
    dt = 2.0 * ds / (v0 + v1)
    cp, wp = model.cp_w, model.w_prime_j
    above = w0 - (p - cp) * dt
    below = np.where(w0 >= wp, w0, w0 - (wp - w0) * np.expm1(-(cp - p) * dt / wp))
    w1 = np.maximum(np.where(p >= cp, above, below), 0.0)
    return v1, w1, dt


def _powers(model: RunModel, w, n_below: int, n_above: int):
    """Power levels for balance(s) ``w``: CP·(i/n_below) below CP, CP + j/n_above
    of the room above CP. Shape (..., n_below + n_above + 1)."""
    cp = model.cp_w
    below = cp * np.arange(n_below) / n_below
    room = model.decline_rate_per_j * np.maximum(w, 0.0)
    frac = np.arange(n_above + 1) / n_above
    w = np.asarray(w)
    below_b = np.broadcast_to(below, w.shape + below.shape)
    above = cp + room[..., None] * frac
    return np.concatenate([below_b, above], axis=-1)


def _interp(V, v_grid, w_grid, v, w):
    """Bilinear interpolation of V (nv, nw) at points (v, w), clamped to the grid."""
    nv, nw = V.shape
    fv = np.clip((v - v_grid[0]) / (v_grid[1] - v_grid[0]), 0.0, nv - 1 - 1e-9)
    fw = np.clip((w - w_grid[0]) / (w_grid[1] - w_grid[0]), 0.0, nw - 1 - 1e-9)
    iv = fv.astype(np.int64)
    iw = fw.astype(np.int64)
    tv = fv - iv
    tw = fw - iw
    return ((1 - tv) * (1 - tw) * V[iv, iw] + tv * (1 - tw) * V[iv + 1, iw]
            + (1 - tv) * tw * V[iv, iw + 1] + tv * tw * V[iv + 1, iw + 1])


def solve_dp(
    model: RunModel,
    start_speed_mps: float,
    start_balance_j: float,
    *,
    speed_range_mps: tuple[float, float],
    n_speed: int = 300,
    n_balance: int = 41,
    n_below: int = 8,
    n_above: int = 24,
    runup_weight: float = 1e-6,
) -> DPResult:
    """Dynamic programming over (speed, W′ balance) at every node of ``model``."""
    v_grid = np.linspace(speed_range_mps[0], speed_range_mps[1], n_speed)
    w_grid = np.linspace(0.0, model.w_prime_j, n_balance)
    vv, ww = np.meshgrid(v_grid, w_grid, indexing="ij")
    P = _powers(model, ww, n_below, n_above)              # (nv, nw, nc)
    n = model.n_segments
    values = [None] * (n + 1)
    V = np.zeros((n_speed, n_balance))
    values[n] = V
    for k in range(n - 1, -1, -1):
        v1, w1, dt = _step_vec(model, k, vv[..., None], ww[..., None], P)
        weight = 1.0 if model.seg_in_trap[k] else runup_weight
        total = weight * dt + _interp(V, v_grid, w_grid, v1, w1)
        V = total.min(axis=-1)
        values[k] = V
    # Forward pass from the true state with one-step look-ahead.
    v, E, w = start_speed_mps, 0.5 * start_speed_mps**2, start_balance_j
    speeds, times, bals, powers = [v], [0.0], [w], []
    t = 0.0
    stalled_at = None
    for k in range(n):
        p_opts = _powers(model, np.array(w), n_below, n_above)
        v1, w1, dt = _step_vec(model, k, np.full_like(p_opts, v), np.full_like(p_opts, w), p_opts)
        weight = 1.0 if model.seg_in_trap[k] else runup_weight
        score = weight * dt + _interp(values[k + 1], v_grid, w_grid, v1, w1)
        p = float(p_opts[int(np.argmin(score))])
        v, E, w, dt_s, stalled = segment_step(model, k, v, E, w, p)
        if stalled and stalled_at is None:
            stalled_at = model.nodes_m[k + 1]
        t += dt_s
        speeds.append(v)
        times.append(t)
        bals.append(w)
        powers.append(p)
    traj = Trajectory(model.nodes_m, tuple(speeds), tuple(times), tuple(bals), tuple(powers), stalled_at)
    trap = sum(times[k + 1] - times[k] for k in range(n) if model.seg_in_trap[k])
    value0 = float(_interp(values[0], v_grid, w_grid, np.array(start_speed_mps), np.array(start_balance_j)))
    return DPResult(value0, traj, trap)
