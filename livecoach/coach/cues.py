"""The rider's cues: a small state machine with hysteresis and a minimum dwell.

Cue names and words are livecoach's own. Meanings:

====== ======================================= =================================
name   words shown / spoken                    when
====== ======================================= =================================
ready  "Ready — roll out steady"                not rolling yet
lift   "Lift — more power"                     power below target beyond the band
steady "Steady — on target"                    power within the band
ease   "Ease — back off a little"              power above target beyond the band
go     "Go — everything now"                   the closing effort starts
trap   "Trap — hold it to the line"            inside the timed trap
done   "Done — stand down, brake gently"       past the trap exit
====== ======================================= =================================

Power cues switch only when the smoothed power leaves the *enter* band and
come back to "steady" only inside the narrower *exit* band (hysteresis),
and a power cue stays at least ``min_dwell_s`` (so they never flap). The
phase cues (go, trap, done) take over at once and never go back.
"""

from __future__ import annotations

from dataclasses import dataclass

CUE_READY = "ready"
CUE_LIFT = "lift"
CUE_STEADY = "steady"
CUE_EASE = "ease"
CUE_GO = "go"
CUE_TRAP = "trap"
CUE_DONE = "done"

CUE_TEXT = {
    CUE_READY: "Ready — roll out steady",
    CUE_LIFT: "Lift — more power",
    CUE_STEADY: "Steady — on target",
    CUE_EASE: "Ease — back off a little",
    CUE_GO: "Go — everything now",
    CUE_TRAP: "Trap — hold it to the line",
    CUE_DONE: "Done — stand down, brake gently",
}

_PHASE_ORDER = {CUE_GO: 1, CUE_TRAP: 2, CUE_DONE: 3}


@dataclass(slots=True)
class CueMachine:
    """Chooses the cue from the power error and the run phase (pure, by sample time).

    band_enter_pct/band_exit_pct: % of target; band_min_w: W; min_dwell_s: s.
    """

    band_enter_pct: float = 8.0
    band_exit_pct: float = 3.0
    band_min_w: float = 12.0
    min_dwell_s: float = 4.0
    cue: str = CUE_READY
    since_t_s: float = float("-inf")

    def _phase_rank(self) -> int:
        return _PHASE_ORDER.get(self.cue, 0)

    def update(self, t_s: float, *, rolling: bool, phase_cue: str | None,
               power_w: float | None, target_w: float | None) -> bool:
        """Advance to time ``t_s``; returns True when the cue changed.

        ``phase_cue``: go / trap / done when the run has reached that phase
        (else None). ``power_w``: smoothed power, W (None: unknown);
        ``target_w``: target power, W.
        """
        if phase_cue is not None and _PHASE_ORDER[phase_cue] > self._phase_rank():
            return self._set(t_s, phase_cue)
        if self._phase_rank() > 0:
            return False
        if not rolling:
            return False
        if self.cue == CUE_READY:
            return self._set(t_s, CUE_STEADY)
        if power_w is None or target_w is None:
            return False
        if t_s - self.since_t_s < self.min_dwell_s:
            return False
        enter = max(self.band_min_w, self.band_enter_pct / 100.0 * target_w)
        leave = max(self.band_min_w * self.band_exit_pct / max(self.band_enter_pct, 1e-9),
                    self.band_exit_pct / 100.0 * target_w)
        err = power_w - target_w
        if self.cue == CUE_STEADY:
            if err < -enter:
                return self._set(t_s, CUE_LIFT)
            if err > enter:
                return self._set(t_s, CUE_EASE)
        elif self.cue == CUE_LIFT:
            if err > enter:
                return self._set(t_s, CUE_EASE)
            if err >= -leave:
                return self._set(t_s, CUE_STEADY)
        elif self.cue == CUE_EASE:
            if err < -enter:
                return self._set(t_s, CUE_LIFT)
            if err <= leave:
                return self._set(t_s, CUE_STEADY)
        return False

    def _set(self, t_s: float, cue: str) -> bool:
        if cue == self.cue:
            return False
        self.cue = cue
        self.since_t_s = t_s
        return True
