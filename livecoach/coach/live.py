"""The live coach: plan + measured state -> target power, cue, trap-speed prediction.

Pure and deterministic: its outputs depend only on the sequence of
``update`` calls (sample times included), never on the wall clock, so a
replay of a recording reproduces every cue, target and prediction.

On every update (cheap: a few table look-ups):
  * the planned power and speed at the current distance;
  * the power averaged over ``power_smoothing_s`` compared with the target,
    through :class:`livecoach.coach.cues.CueMachine` (hysteresis + dwell);
  * the phase cues: "go" where the closing effort starts, "trap" at trap
    entry, "done" at trap exit. From "go" to the trap exit the target is
    everything the rider has: the power available from the measured W′
    balance (Morton 1996) plus ``final_effort_headroom_pct``; after the trap
    exit it is 0 W (stand down).
At most once per ``replan_interval_s`` of *sample time* (the first update
at or after each multiple of the interval) it re-plans the rest of the run
from the measured state with the live CdA/Crr and W′ balance
(:mod:`livecoach.coach.predict`); the re-plan gives the target power from
then on and the predicted trap speed. Inside the trap the prediction is the
time already spent there plus the re-planned remainder.

Bad input never raises: a non-finite distance or speed leaves the output
as it was (counted in ``rejected``); a re-plan that fails keeps the
previous prediction and emits one warning notice.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from livecoach.coach.cues import (
    CUE_DONE,
    CUE_GO,
    CUE_TEXT,
    CUE_TRAP,
    CueMachine,
)
from livecoach.coach.predict import Replan, Replanner, clamp_drag
from livecoach.coach.settings import CoachConfig
from livecoach.errors import LivecoachError
from livecoach.pipeline.state import NOTICE_CUE, NOTICE_WARNING, Notice
from livecoach.stream.builders import positional_builder

#: Speed above which the vehicle counts as rolling, m/s (same as the pipeline's).
ROLLING_SPEED_MPS = 1.0


@dataclass(frozen=True, slots=True)
class CoachOutput:
    """What the coach says after one update (SI units; None: not known).

    target_power_w: the power to hold now; planned_speed_mps: the pre-ride
    plan's speed here; cue/cue_text: the current cue; predicted_trap_speed_mps:
    from the latest re-plan; notices: cue changes (and warnings) at this update.
    """

    t_s: float
    target_power_w: float | None
    planned_speed_mps: float | None
    planned_power_w: float | None
    planned_w_prime_balance_j: float | None
    cue: str
    cue_text: str
    predicted_trap_speed_mps: float | None
    planned_trap_speed_mps: float
    final_effort_m: float
    replanned: bool
    notices: tuple[Notice, ...] = ()


#: CoachOutput without the frozen-record cost per field (see livecoach.stream.builders);
#: one per update. Every field must be given (by keyword here).
_coach_output = positional_builder(CoachOutput)


def _coach_config(ride) -> CoachConfig:
    try:
        cfg = ride.section("coach")
    except LivecoachError:
        cfg = None
    return cfg if isinstance(cfg, CoachConfig) else CoachConfig()


class LiveCoach:
    """Live coaching against ``plan`` (a :class:`livecoach.plan.Plan`) for ``ride``."""

    def __init__(self, ride, plan, config: CoachConfig | None = None) -> None:
        self.ride = ride
        self.plan = plan
        self.config = config or _coach_config(ride)
        c = self.config
        self.replanner = Replanner(ride, c.replan_max_evaluations)
        self.cues = CueMachine(c.band_enter_pct, c.band_exit_pct, c.band_min_w, c.min_dwell_s)
        self.trap_entry_m = ride.course.trap_entry_m
        self.trap_exit_m = ride.course.trap_exit_m
        self.trap_m = ride.course.trap_m
        self.rejected = 0
        self.replans = 0
        self.replan_failures = 0
        self._next_replan_t_s = -math.inf
        self._replan: Replan | None = None
        self._replan_trap_elapsed_s: float | None = None
        self._prediction: float | None = None
        self._power_avg_w: float | None = None
        self._last_t_s: float | None = None
        self._last_d_m: float | None = None
        self._entry_t_s: float | None = None
        self._exit_t_s: float | None = None
        self._last_warning = ""
        self._output: CoachOutput | None = None
        self._planned_trap_speed_mps: float = plan.trap_speed_mps   # read once (the plan is frozen)

    # ---------------------------------------------------------------- helpers
    def _smooth_power(self, t_s: float, power_w: float | None) -> None:
        if power_w is None or not math.isfinite(power_w):
            return
        p = max(power_w, 0.0)
        if self._power_avg_w is None or self._last_t_s is None:
            self._power_avg_w = p
            return
        tau = self.config.power_smoothing_s
        dt = t_s - self._last_t_s
        if tau <= 0.0:
            self._power_avg_w = p
        elif dt > 0.0:
            alpha = 1.0 - math.exp(-dt / tau)
            self._power_avg_w += alpha * (p - self._power_avg_w)

    def _track_trap(self, t_s: float, d: float) -> None:
        if (d < self.trap_entry_m and d < self.trap_exit_m) or (
                self._entry_t_s is not None and self._exit_t_s is not None):
            return  # no line to time now (the usual case: the loop below would set nothing)
        prev_t, prev_d = self._last_t_s, self._last_d_m
        for line, attr in ((self.trap_entry_m, "_entry_t_s"), (self.trap_exit_m, "_exit_t_s")):
            if getattr(self, attr) is None and d >= line:
                if prev_d is not None and prev_t is not None and prev_d < line and d > prev_d:
                    setattr(self, attr, prev_t + (t_s - prev_t) * (line - prev_d) / (d - prev_d))
                else:
                    setattr(self, attr, t_s)

    def _do_replan(self, t_s: float, d: float, v: float, w: float, cda: float | None,
                   crr: float | None, notices: list[Notice]) -> bool:
        v_ = self.ride.vehicle
        c, r = clamp_drag(cda, crr, v_.cda_m2, v_.crr, self.config.cda_bounds_factor)
        try:
            rp = self.replanner.replan(d, v, w, c, r, self._replan)
        except LivecoachError as exc:
            self.replan_failures += 1
            text = f"re-plan failed: {exc}"
            if text != self._last_warning:
                self._last_warning = text
                notices.append(Notice(t_s, NOTICE_WARNING, text, {"source": "coach"}))
            return False
        self.replans += 1
        self._replan = rp
        if d >= self.trap_entry_m and self._entry_t_s is not None:
            elapsed = t_s - self._entry_t_s
            self._prediction = self.trap_m / (elapsed + rp.remaining_trap_time_s)
        else:
            self._prediction = self.trap_m / rp.remaining_trap_time_s
        return True

    # ----------------------------------------------------------------- update
    def update(
        self,
        t_s: float,
        distance_m: float,
        speed_mps: float,
        power_w: float | None,
        w_prime_balance_j: float | None,
        cda_m2: float | None,
        crr: float | None,
    ) -> CoachOutput:
        """One measured state -> the coach's output (see module doc)."""
        if not (math.isfinite(t_s) and math.isfinite(distance_m) and math.isfinite(speed_mps)) or (
            self._last_t_s is not None and t_s < self._last_t_s
        ):
            self.rejected += 1
            return self._output if self._output is not None else self.standby(t_s)
        notices: list[Notice] = []
        self._smooth_power(t_s, power_w)
        d = distance_m
        v = max(speed_mps, 0.0)
        self._track_trap(t_s, d)
        rolling = v > ROLLING_SPEED_MPS or d > 1.0
        w = self.ride.rider.w_prime_j if w_prime_balance_j is None or not math.isfinite(
            w_prime_balance_j) else w_prime_balance_j
        replanned = False
        if t_s >= self._next_replan_t_s and d < self.trap_exit_m and rolling:
            interval = self.config.replan_interval_s
            self._next_replan_t_s = (math.floor(t_s / interval) + 1.0) * interval
            replanned = self._do_replan(t_s, d, v, w, cda_m2, crr, notices)
        if self._exit_t_s is not None and self._entry_t_s is not None:
            self._prediction = self.trap_m / max(self._exit_t_s - self._entry_t_s, 1e-9)

        point = self.plan.at(d)
        final_effort_m = self._replan.final_effort_m if self._replan is not None else self.plan.final_effort_m
        if d >= self.trap_exit_m:
            phase_cue = CUE_DONE
        elif d >= self.trap_entry_m:
            phase_cue = CUE_TRAP
        elif d >= final_effort_m:
            phase_cue = CUE_GO
        else:
            phase_cue = None
        if phase_cue == CUE_DONE:
            target = 0.0
        elif phase_cue is not None:
            # Closing effort and trap: everything the rider has (Morton 1996 ceiling
            # from the measured W' balance), with headroom so noise never leaves power unused.
            r = self.ride.rider
            available = r.cp_w + (r.pmax_w - r.cp_w) * min(max(w, 0.0), r.w_prime_j) / r.w_prime_j
            target = available * (1.0 + self.config.final_effort_headroom_pct / 100.0)
        elif self._replan is not None:
            target = self._hold_target(self._replan.power_at(d))
        else:
            target = self._hold_target(point.target_power_w)
        changed = self.cues.update(t_s, rolling=rolling, phase_cue=phase_cue,
                                   power_w=self._power_avg_w, target_w=target)
        cue = self.cues.cue
        if changed:
            notices.append(Notice(t_s, NOTICE_CUE, CUE_TEXT[cue], {
                "cue": cue, "text": CUE_TEXT[cue], "target_power_w": target,
                "predicted_trap_speed_mps": self._prediction, "distance_m": d,
            }))
        self._last_t_s = t_s
        self._last_d_m = d
        out = _coach_output(
            t_s=t_s,
            target_power_w=target,
            planned_speed_mps=point.planned_speed_mps,
            planned_power_w=point.target_power_w,
            planned_w_prime_balance_j=point.planned_w_prime_balance_j,
            cue=cue,
            cue_text=CUE_TEXT[cue],
            predicted_trap_speed_mps=self._prediction,
            planned_trap_speed_mps=self._planned_trap_speed_mps,
            final_effort_m=final_effort_m,
            replanned=replanned,
            notices=tuple(notices),
        )
        self._output = out
        return out

    def _hold_target(self, power_w: float) -> float:
        """A planned hold at critical power aimed ``hold_under_cp_pct`` under CP (W).

        Under the differential W' balance (Skiba et al. 2015) a surge above CP
        spends W' one for one while a dip below it recovers only in proportion
        to the W' already spent, so with W' nearly full a rider wandering a few
        per cent around CP loses W' steadily; aiming a little under CP keeps most
        of it for the closing effort. Powers further than that from CP are kept.
        """
        cp_w = self.ride.rider.cp_w
        margin_w = cp_w * self.config.hold_under_cp_pct / 100.0
        if margin_w > 0.0 and abs(power_w - cp_w) <= margin_w:
            return cp_w - margin_w
        return power_w

    def standby(self, t_s: float) -> CoachOutput:
        """The output before the first measured position (on the start line).

        The plan's starting target (and the current cue), so the rider sees
        what to push from the first pedal stroke; nothing is updated.
        """
        point = self.plan.at(0.0)
        cue = self.cues.cue
        return CoachOutput(
            t_s=t_s, target_power_w=self._hold_target(point.target_power_w),
            planned_speed_mps=point.planned_speed_mps,
            planned_power_w=point.target_power_w,
            planned_w_prime_balance_j=point.planned_w_prime_balance_j, cue=cue,
            cue_text=CUE_TEXT[cue], predicted_trap_speed_mps=None,
            planned_trap_speed_mps=self._planned_trap_speed_mps, final_effort_m=self.plan.final_effort_m,
            replanned=False,
        )

    @property
    def replan(self) -> Replan | None:
        """The latest re-plan (None before the first)."""
        return self._replan
