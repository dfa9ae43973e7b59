"""What the pipeline tells the sinks (display, audio, web page, radio, report).

:class:`LiveState` is a snapshot after an event; :class:`Notice` is a discrete
happening (a cue change, a drag-change alarm, a warning). Both are plain frozen
records so sinks can never change what the core computed.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

#: Run phases.
PHASE_WAITING = "waiting"   # not rolling yet
PHASE_RUNUP = "runup"       # between start and trap entry
PHASE_TRAP = "trap"         # inside the timed trap
PHASE_DONE = "done"         # past trap exit


@dataclass(frozen=True, slots=True)
class SensorHealth:
    """Health of one sensor channel at the snapshot time."""

    channel: str
    link_up: bool
    stale: bool                      # no valid value for longer than its stale limit
    age_s: float | None              # time since the last valid value, s
    accepted: int                    # payloads decoded and used
    rejected: int                    # payloads rejected (garbage, bad checksum, ...)
    gaps: int                        # number of gaps longer than the stale limit
    longest_gap_s: float             # longest such gap, s


@dataclass(frozen=True, slots=True)
class LiveState:
    """A snapshot of everything the rider and crew may be shown (SI units).

    ``None`` means "not known yet"; a ``*_stale`` flag means the value is the
    last one received but too old to be current (sinks must show it as stale).
    """

    t_s: float
    phase: str = PHASE_WAITING
    distance_m: float | None = None
    distance_to_trap_m: float | None = None
    speed_mps: float | None = None
    speed_stale: bool = True
    power_w: float | None = None
    power_stale: bool = True
    cadence_rpm: float | None = None
    heart_rate_bpm: float | None = None
    airspeed_mps: float | None = None
    target_power_w: float | None = None
    planned_speed_mps: float | None = None
    cue: str | None = None
    cue_text: str | None = None
    predicted_trap_speed_mps: float | None = None
    planned_trap_speed_mps: float | None = None
    w_prime_balance_j: float | None = None
    w_prime_j: float | None = None
    cda_m2: float | None = None
    cda_sd_m2: float | None = None
    crr: float | None = None
    crr_sd: float | None = None
    alarms: tuple[str, ...] = ()
    sensors: tuple[SensorHealth, ...] = ()
    trap_entry_t_s: float | None = None
    trap_exit_t_s: float | None = None
    trap_speed_mps: float | None = None

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-able dict (tuples become lists)."""
        return asdict(self)


#: Notice kinds.
NOTICE_CUE = "cue"          # data: {"cue": name, "text": words, "target_power_w": ...}
NOTICE_ALARM = "alarm"      # data: {"kind": "drag_changed", "step_cda_m2": ..., "start_t_s": ...}
NOTICE_WARNING = "warning"  # data: {"text": ...}
NOTICE_PHASE = "phase"      # data: {"phase": ...}


@dataclass(frozen=True, slots=True)
class Notice:
    """A discrete happening at time ``t_s`` (s)."""

    t_s: float
    kind: str
    text: str
    data: dict[str, Any] = field(default_factory=dict)
