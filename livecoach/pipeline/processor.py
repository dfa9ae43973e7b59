"""The processing pipeline: RawEvent -> samples -> estimates, coaching -> LiveState.

A pure, deterministic function of the event sequence: no wall clock, no
randomness, no I/O. The live loop, replay, the simulator's closed loop and
the CSV import all drive this same object, so a replay of a recording gives
the very outputs the live run gave.

Stages (each its own module):
    decode      livecoach.pipeline.decode.Decoder          bytes -> samples
    estimate    livecoach.estimate.LiveDragEstimator        kinematics, CdA/Crr, alarms
    rider       livecoach.rider.WPrimeBalance              W' balance (Skiba 2015)
    coach       livecoach.coach.LiveCoach                  target power, cues, trap prediction
    bookkeeping health (staleness, gaps), trap timing, phase, summary
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Iterable

from livecoach.config.ridefile import RideConfig
from livecoach.pipeline.health import HealthTracker
from livecoach.pipeline.state import (
    NOTICE_ALARM,
    NOTICE_PHASE,
    NOTICE_WARNING,
    PHASE_DONE,
    PHASE_RUNUP,
    PHASE_TRAP,
    PHASE_WAITING,
    LiveState,
    Notice,
)
from livecoach.pipeline.trap import TrapTimer
from livecoach.stream.builders import positional_builder
from livecoach.stream.events import CH_CSC, CH_GPS, CH_MCU, CH_POWER, CH_TICK, RawEvent
from livecoach.stream import samples as S

#: Speed above which the vehicle counts as rolling (phase waiting -> runup), m/s.
ROLLING_SPEED_MPS = 1.0

#: Sample types the offline batch fit needs (kept only when ``keep_for_batch``).
_BATCH_TYPES = (S.PowerSample, S.WheelSample, S.SpeedSample, S.AirSample, S.AltitudeSample,
                S.GpsSample, S.LinkSample)

#: Health channel used for each sample type that arrives without a raw event (CSV path).
_CSV_CHANNEL = {
    S.PowerSample: CH_POWER,
    S.SpeedSample: CH_CSC,
    S.WheelSample: CH_CSC,
    S.GpsSample: CH_GPS,
    S.AirSample: CH_MCU,
}


@dataclass(frozen=True, slots=True)
class StepResult:
    """What one event produced: the state after it and any notices."""

    state: LiveState
    notices: tuple[Notice, ...]


_step_result = positional_builder(StepResult)
_live_state = positional_builder(LiveState)
_Rejected, _LinkSample, _PowerSample = S.Rejected, S.LinkSample, S.PowerSample
_CadenceSample, _HeartRateSample, _AirSample = S.CadenceSample, S.HeartRateSample, S.AirSample


class Pipeline:
    """Feed events (or samples) in time order; read states, notices and a summary.

    ``plan``: a :class:`livecoach.plan.Plan` for live coaching (None: no
    coaching, estimation only). ``keep_for_batch``: keep the samples the
    offline batch fit needs, for :meth:`summary` (replay; the live loop turns
    it off so memory stays flat over hours).
    """

    def __init__(self, ride: RideConfig, plan: Any = None, *, keep_for_batch: bool = True) -> None:
        from livecoach.coach import LiveCoach
        from livecoach.estimate import LiveDragEstimator
        from livecoach.pipeline.decode import Decoder
        from livecoach.rider import WPrimeBalance

        self.ride = ride
        self.plan = plan
        self.decoder = Decoder(ride)
        self.estimator = LiveDragEstimator(ride)
        self.w_prime = WPrimeBalance(ride.rider)
        self.coach = LiveCoach(ride, plan) if plan is not None else None
        self.health = HealthTracker()
        self.trap = TrapTimer(ride.course.trap_entry_m, ride.course.trap_exit_m)
        self.keep_for_batch = keep_for_batch
        self._batch_samples: list[Any] = []
        self._phase = PHASE_WAITING
        self._first_t_s: float | None = None
        self._last_t_s: float | None = None
        self._samples = 0
        self._rejected = 0
        self._reject_reasons: dict[str, int] = {}
        self._max_speed_mps = 0.0
        self._power_w: float | None = None
        self._cadence_rpm: float | None = None
        self._heart_rate_bpm: float | None = None
        self._airspeed_mps: float | None = None
        self._wbal_j: float = ride.rider.w_prime_j
        self._coach_out: Any = None
        # The plan is immutable: its trap speed (a property that interpolates) is read once.
        self._planned_trap_speed_mps: float | None = getattr(plan, "trap_speed_mps", None)
        self._last_track_point: tuple[float, float] | None = None
        self._alarms: list[str] = []
        self._last_alarms: tuple[str, ...] = ()     # the last five, as LiveState shows them
        # Constants of the ride read on every event.
        self._trap_entry_m = ride.course.trap_entry_m
        self._w_prime_j = ride.rider.w_prime_j
        self._vehicle_cda_m2 = ride.vehicle.cda_m2
        self._vehicle_crr = ride.vehicle.crr
        self._warnings: list[str] = []
        self._state: LiveState = LiveState(t_s=0.0, w_prime_balance_j=self._wbal_j,
                                           w_prime_j=ride.rider.w_prime_j)

    # ------------------------------------------------------------------ feeding
    def feed(self, event: RawEvent) -> StepResult:
        """Process one raw event (any channel). Never raises on bad payloads."""
        channel = event.channel
        if channel == CH_TICK:
            return self._process(event.t_s, (), None)
        try:
            decoded = self.decoder.feed(event)
        except Exception as exc:  # a decoder bug must not stop the loop: count it
            decoded = [S.Rejected(event.t_s, channel, f"decoder error: {type(exc).__name__}: {exc}")]
        return self._process(event.t_s, decoded, channel)

    def feed_sample(self, sample: Any) -> StepResult:
        """Process one already-decoded sample (CSV import path)."""
        return self._process(sample.t_s, (sample,), _CSV_CHANNEL.get(type(sample)))

    # --------------------------------------------------------------- processing
    def _process(self, t_s: float, decoded: Iterable[Any], channel: str | None) -> StepResult:
        # The hot path of replay (once per event): names are bound locally and
        # the records are built by position (see livecoach.stream.builders).
        if not math.isfinite(t_s):
            self._reject("non-finite receive time")
            return _step_result(self._state, ())
        last_t_s = self._last_t_s
        if last_t_s is not None and t_s < last_t_s:
            # Receive times come from one monotonic clock; an earlier one is a
            # corrupt record. Keep the clock monotonic by clamping.
            t_s = last_t_s
        if self._first_t_s is None:
            self._first_t_s = t_s
        self._last_t_s = t_s
        notices: list[Notice] = []
        health = self.health
        estimator = self.estimator

        for s in decoded:
            kind = type(s)
            if kind is _Rejected:
                self._reject(s.reason)
                health.rejected(s.channel)
                continue
            self._samples += 1
            ch = channel if channel is not None else _CSV_CHANNEL.get(kind)
            if kind is _LinkSample:
                health.link(s.channel, s.state == "up")
                if s.state != "up":
                    notices.append(Notice(t_s, NOTICE_WARNING, f"{s.channel} link {s.state}",
                                          {"channel": s.channel, "state": s.state}))
            elif ch is not None:
                if health.valid(ch, t_s):
                    notices.append(Notice(t_s, NOTICE_WARNING, f"{ch} values again",
                                          {"channel": ch, "state": "recovered"}))
            if kind is _PowerSample:
                if math.isfinite(s.power_w) and s.power_w >= 0.0:
                    self._power_w = s.power_w
                    self._wbal_j = self.w_prime.update(s.t_s, s.power_w)
            elif kind is _CadenceSample:
                self._cadence_rpm = s.cadence_rpm
            elif kind is _HeartRateSample:
                self._heart_rate_bpm = s.heart_rate_bpm
            elif kind is _AirSample and s.airspeed_mps is not None:
                self._airspeed_mps = s.airspeed_mps
            estimator.feed(s)
            if self.keep_for_batch and kind in _BATCH_TYPES:
                self._batch_samples.append(s)

        for name in health.tick(t_s):
            notices.append(Notice(t_s, NOTICE_WARNING, f"{name} stale: no valid value",
                                  {"channel": name, "state": "stale"}))

        distance_m, speed_mps, cda_m2, cda_sd_m2, crr, crr_sd = estimator.live_values()
        if speed_mps is not None and math.isfinite(speed_mps) and speed_mps > self._max_speed_mps:
            self._max_speed_mps = speed_mps

        # Trap timing and phase from the distance track.
        trap = self.trap
        if distance_m is not None:
            # Time the trap on the distance track's own points (wheel events
            # at their event times), not on the receive times of whatever
            # event came last: lines are timed to the wheel's resolution.
            crossed = None
            point = estimator.latest_track_point()
            if point is not None and point != self._last_track_point:
                self._last_track_point = point
                crossed = trap.feed(point[0], point[1])
            phase = self._phase
            new_phase = phase
            if phase == PHASE_WAITING and speed_mps is not None and speed_mps > ROLLING_SPEED_MPS:
                new_phase = PHASE_RUNUP
            if crossed == "entry":
                new_phase = PHASE_TRAP
            elif crossed == "exit":
                new_phase = PHASE_DONE
            if new_phase != phase:
                self._phase = new_phase
                data: dict[str, Any] = {"phase": new_phase}
                if crossed == "exit" and trap.trap_speed_mps is not None:
                    data["trap_speed_mps"] = trap.trap_speed_mps
                notices.append(Notice(t_s, NOTICE_PHASE, f"phase {new_phase}", data))

        alarms = estimator.pop_alarms()
        if alarms:
            for alarm in alarms:
                self._alarms.append(alarm.text)
                notices.append(Notice(alarm.t_s, NOTICE_ALARM, alarm.text,
                                      {"kind": "drag_changed", "step_cda_m2": alarm.step_cda_m2,
                                       "start_t_s": alarm.start_t_s}))
            self._last_alarms = tuple(self._alarms[-5:])

        coach_out = self._coach_out
        if self.coach is not None and distance_m is not None and speed_mps is not None:
            coach_out = self.coach.update(
                t_s, distance_m, speed_mps, self._power_w, self._wbal_j,
                cda_m2 if cda_m2 is not None else self._vehicle_cda_m2,
                crr if crr is not None else self._vehicle_crr,
            )
            self._coach_out = coach_out
            notices.extend(coach_out.notices)
        elif coach_out is None and self.coach is not None:
            # On the start line (no position yet): the plan's starting target.
            coach_out = self.coach.standby(t_s)
        if coach_out is None:
            target_power_w = planned_speed_mps = cue = cue_text = predicted_trap_speed_mps = None
        else:
            target_power_w = coach_out.target_power_w
            planned_speed_mps = coach_out.planned_speed_mps
            cue = coach_out.cue
            cue_text = coach_out.cue_text
            predicted_trap_speed_mps = coach_out.predicted_trap_speed_mps

        stale = health.stale
        state = _live_state(  # LiveState, by position
            t_s,                                                          # t_s
            self._phase,                                                  # phase
            distance_m,                                                   # distance_m
            (self._trap_entry_m - distance_m) if distance_m is not None else None,  # distance_to_trap_m
            speed_mps,                                                    # speed_mps
            stale(CH_CSC, t_s) and stale(CH_GPS, t_s),                    # speed_stale
            self._power_w,                                                # power_w
            stale(CH_POWER, t_s),                                         # power_stale
            self._cadence_rpm,                                            # cadence_rpm
            self._heart_rate_bpm,                                         # heart_rate_bpm
            self._airspeed_mps,                                           # airspeed_mps
            target_power_w,                                               # target_power_w
            planned_speed_mps,                                            # planned_speed_mps
            cue,                                                          # cue
            cue_text,                                                     # cue_text
            predicted_trap_speed_mps,                                     # predicted_trap_speed_mps
            self._planned_trap_speed_mps,                                 # planned_trap_speed_mps
            self._wbal_j,                                                 # w_prime_balance_j
            self._w_prime_j,                                              # w_prime_j
            cda_m2,                                                       # cda_m2
            cda_sd_m2,                                                    # cda_sd_m2
            crr,                                                          # crr
            crr_sd,                                                       # crr_sd
            self._last_alarms,                                            # alarms
            health.snapshot(t_s),                                         # sensors
            trap.entry_t_s,                                               # trap_entry_t_s
            trap.exit_t_s,                                                # trap_exit_t_s
            trap.trap_speed_mps,                                          # trap_speed_mps
        )
        self._state = state
        return _step_result(state, tuple(notices) if notices else ())

    def _reject(self, reason: str) -> None:
        self._rejected += 1
        key = reason.split(":")[0][:60]
        self._reject_reasons[key] = self._reject_reasons.get(key, 0) + 1

    # ------------------------------------------------------------------ results
    @property
    def state(self) -> LiveState:
        return self._state

    def add_warning(self, text: str) -> None:
        """Add a warning for the summary (e.g. the recording reader's torn-tail note)."""
        self._warnings.append(text)

    def summary(self) -> dict[str, Any]:
        """The replay JSON summary (stable keys, documented in README)."""
        st = self._state
        duration = (self._last_t_s - self._first_t_s) if self._first_t_s is not None else 0.0
        batch_cda = batch_crr = None
        warnings = list(self._warnings)
        if self.keep_for_batch and self._batch_samples:
            from livecoach.errors import LivecoachError
            from livecoach.estimate import batch_fit

            try:
                fit = batch_fit(self._batch_samples, self.ride)
                batch_cda, batch_crr = fit.cda_m2, fit.crr
            except LivecoachError as exc:
                warnings.append(f"batch fit: {exc}")
        for reason, n in sorted(self._reject_reasons.items()):
            warnings.append(f"rejected {n} payload(s): {reason}")
        gating = getattr(self.estimator.snapshot(), "rejected", {}) or {}
        return {
            "samples": self._samples,
            "duration_s": round(duration, 6),
            "distance_m": st.distance_m,
            "cda_m2": st.cda_m2,
            "cda_sd_m2": st.cda_sd_m2,
            "crr": st.crr,
            "crr_sd": st.crr_sd,
            "batch_cda_m2": batch_cda,
            "batch_crr": batch_crr,
            "rejected_samples": self._rejected,
            "estimator_gated": dict(sorted(gating.items())),
            "trap_speed_mps": self.trap.trap_speed_mps,
            "trap_entry_t_s": self.trap.entry_t_s,
            "trap_exit_t_s": self.trap.exit_t_s,
            "max_speed_mps": self._max_speed_mps if self._samples else None,
            "sensor_gaps": self.health.gaps_summary(self._last_t_s),
            "predicted_trap_speed_mps": st.predicted_trap_speed_mps,
            "alarms": list(self._alarms),
            "warnings": warnings,
        }
