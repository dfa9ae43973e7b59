"""Re-planning the rest of the run from the measured state (the trap-speed prediction).

From the current distance, speed and W′ balance, with the live CdA and Crr
estimates, the rest of the run-up and trap is optimised again
(:func:`livecoach.plan.optimise.optimise_run`: the best "hold, then close
all-out" start, refined by the projected-gradient optimiser, warm-started
from the previous re-plan). Pure Python, no scipy; deterministic. A re-plan
takes a few milliseconds to a few tens of milliseconds on a desktop core
(benchmarks/plan_bench.py).
"""

from __future__ import annotations

import bisect
import math
from dataclasses import dataclass

from livecoach.plan.model import RunModel, build_run_model
from livecoach.plan.optimise import optimise_run
from livecoach.plan.plan import final_effort_start_m


@dataclass(frozen=True, slots=True)
class Replan:
    """The optimal rest of the run from one measured state.

    nodes_m: node distances from the measurement point to the trap exit, m;
    powers_w: power per segment, W; speeds_mps / times_s (from the
    measurement, s) / balances_j per node; remaining_trap_time_s: planned
    time still to spend in the trap, s; final_effort_m: where the closing
    effort starts, m; cda_m2/crr: the drag values used.
    """

    from_m: float
    nodes_m: tuple[float, ...]
    powers_w: tuple[float, ...]
    speeds_mps: tuple[float, ...]
    times_s: tuple[float, ...]
    balances_j: tuple[float, ...]
    remaining_trap_time_s: float
    final_effort_m: float
    cda_m2: float
    crr: float
    spend: tuple[float, ...]
    ease: tuple[float, ...]

    def power_at(self, distance_m: float) -> float:
        """Planned power at a distance, W (the segment's power; clamped to the range)."""
        k = bisect.bisect_right(self.nodes_m, distance_m) - 1
        k = min(max(k, 0), len(self.powers_w) - 1)
        return self.powers_w[k]


class Replanner:
    """Re-plans for one ride; caches the course model between calls.

    ``ride``: a RideConfig; ``max_evaluations``: optimiser budget per re-plan.
    """

    def __init__(self, ride, max_evaluations: int = 25) -> None:
        self.ride = ride
        self.max_evaluations = max_evaluations
        self._base: RunModel = build_run_model(ride)
        self._by_crr: dict[float, RunModel] = {self._base.crr: self._base}

    @property
    def base_model(self) -> RunModel:
        return self._base

    def _model(self, cda_m2: float, crr: float) -> RunModel:
        m = self._by_crr.get(crr)
        if m is None:
            m = self._base.with_(crr=crr)
            if len(self._by_crr) > 8:
                self._by_crr.clear()
            self._by_crr[crr] = m
        return m.with_(cda_m2=cda_m2)

    def replan(self, distance_m: float, speed_mps: float, balance_j: float, cda_m2: float, crr: float,
               previous: Replan | None = None) -> Replan:
        """The optimal rest of the run from this state (see module doc)."""
        model = self._model(cda_m2, crr).tail(distance_m, speed_mps)
        w0 = min(max(balance_j, 0.0), model.w_prime_j)
        warm = None
        if previous is not None:
            warm = _map_controls(previous, model.nodes_m)
        run = optimise_run(model, max(speed_mps, 0.0), w0, max_evaluations=self.max_evaluations,
                           warm_start=warm, extra_starts=False)
        tr = run.trajectory
        powers = list(tr.power_w)
        fe = final_effort_start_m(tr.distance_m, powers + [powers[-1]], model.cp_w, model.trap_exit_m)
        return Replan(
            from_m=model.nodes_m[0],
            nodes_m=model.nodes_m,
            powers_w=tuple(powers),
            speeds_mps=tr.speed_mps,
            times_s=tr.time_s,
            balances_j=tr.w_prime_balance_j,
            remaining_trap_time_s=run.trap_time_s,
            final_effort_m=fe,
            cda_m2=cda_m2,
            crr=crr,
            spend=run.spend,
            ease=run.ease,
        )


def _map_controls(previous: Replan, nodes_m: tuple[float, ...]) -> tuple[list[float], list[float]]:
    """The previous re-plan's controls on a new (later) grid, segment by segment."""
    spend: list[float] = []
    ease: list[float] = []
    prev_nodes = previous.nodes_m
    last = len(previous.spend) - 1
    for s in nodes_m[:-1]:
        j = min(max(bisect.bisect_right(prev_nodes, s) - 1, 0), last)
        spend.append(previous.spend[j])
        ease.append(previous.ease[j])
    return spend, ease


def clamp_drag(cda_m2: float | None, crr: float | None, prior_cda_m2: float, prior_crr: float,
               factor: float) -> tuple[float, float]:
    """Live estimates made safe for planning: None or non-finite -> the prior;
    CdA within prior/factor .. prior*factor; Crr within 0 .. prior*factor + 0.002."""
    c = prior_cda_m2 if cda_m2 is None or not math.isfinite(cda_m2) else cda_m2
    r = prior_crr if crr is None or not math.isfinite(crr) else crr
    c = min(max(c, prior_cda_m2 / factor), prior_cda_m2 * factor)
    r = min(max(r, 0.0), prior_crr * factor + 0.002)
    return c, r
