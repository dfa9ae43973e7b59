"""Ride-file section ``[coach]``: how the live coach re-plans and cues."""

from __future__ import annotations

from dataclasses import dataclass

from livecoach.config.schema import setting


@dataclass(frozen=True, kw_only=True)
class CoachConfig:
    """[coach]: re-planning and cue settings (defaults suit a 1-4 Hz power meter)."""

    replan_interval_s: float = setting(
        1.0, doc="time between re-plans of the rest of the run (trap-speed prediction)",
        unit="s", lo=0.2, hi=60.0,
    )
    replan_max_evaluations: int = setting(
        25, doc="objective evaluations per re-plan (more: better, slower)", lo=1, hi=2000
    )
    power_smoothing_s: float = setting(
        3.0, doc="time constant of the power average compared with the target", unit="s",
        lo=0.0, hi=30.0,
    )
    band_enter_pct: float = setting(
        8.0, doc="off target by more than this: cue more power / ease", unit="%", lo=1.0, hi=50.0
    )
    band_exit_pct: float = setting(
        3.0, doc="back within this of the target: cue on target", unit="%", lo=0.0, hi=50.0
    )
    band_min_w: float = setting(
        12.0, doc="the bands are never narrower than this", unit="W", lo=0.0, hi=200.0
    )
    min_dwell_s: float = setting(
        4.0, doc="shortest time a power cue stays before another power cue", unit="s",
        lo=0.0, hi=60.0,
    )
    final_effort_headroom_pct: float = setting(
        10.0, doc="during the closing effort the target is the power available (from the W' "
        "balance) plus this much, so a rider following the number leaves nothing unused",
        unit="%", lo=0.0, hi=100.0,
    )
    hold_under_cp_pct: float = setting(
        1.5, doc="where the plan holds critical power, the target is this much under CP: a "
        "rider's power wanders a few per cent around any target, every surge above CP spends "
        "W' and, with W' nearly full, the dips below CP win almost none back (Skiba 2015 "
        "recovery is proportional to the W' spent); 0 follows the plan exactly",
        unit="%", lo=0.0, hi=10.0,
    )
    cda_bounds_factor: float = setting(
        2.0, doc="re-plans use the live CdA clamped to prior / f .. prior * f", lo=1.0, hi=10.0
    )

    def __post_init__(self) -> None:
        from livecoach.errors import ConfigError

        if self.band_exit_pct > self.band_enter_pct:
            raise ConfigError(
                f"band_exit_pct = {self.band_exit_pct} must not exceed band_enter_pct = "
                f"{self.band_enter_pct} (the hysteresis needs exit <= enter)"
            )
