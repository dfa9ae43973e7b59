"""Sensor health: last valid value per channel, staleness, gaps and reject counts.

Pure bookkeeping on the event clock (``t_s`` of the events), so replay gives
the same health history as the live run.

:meth:`HealthTracker.snapshot` is asked for after every event. Its flags
(``link_up``, ``stale``, ``gaps``) are always current: every change of them
(a link change, a channel going stale or recovering, a new channel) makes a
new snapshot. Otherwise the counters and ages are those of a full snapshot
taken at most :data:`SNAPSHOT_REFRESH_S` earlier (event time); rebuilding every channel's record
after every event was a measurable share of the per-event cost
(benchmarks/pipeline_cost.py) for numbers no display shows more often.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from livecoach.pipeline.state import SensorHealth
from livecoach.stream.builders import positional_builder
from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_MCU, CH_POWER

#: A channel with no valid value for longer than this is stale, s. Power
#: meters and wheel sensors notify at 1-4 Hz (common practice), GPS at 1-10 Hz.
DEFAULT_STALE_AFTER_S: dict[str, float] = {
    CH_POWER: 3.0,
    CH_CSC: 3.0,
    CH_HEART_RATE: 5.0,
    CH_GPS: 3.0,
    CH_MCU: 3.0,
    "csv": 3.0,
}


#: Longest time the counters and ages of a health snapshot may lag, s (event time).
SNAPSHOT_REFRESH_S = 0.25

#: :meth:`HealthTracker.tick` looks at the channels only from this long before
#: the earliest time one of them can go stale, s (far above the rounding of
#: ``t_s - last`` against ``last + limit``, far below any sensor's period).
_TICK_MARGIN_S = 1e-6

_sensor_health = positional_builder(SensorHealth)


@dataclass(slots=True)
class _Channel:
    limit_s: float = 3.0
    last_valid_t_s: float | None = None
    link_up: bool = True
    accepted: int = 0
    rejected: int = 0
    gaps: int = 0
    longest_gap_s: float = 0.0
    in_gap: bool = False


class HealthTracker:
    """Tracks each channel seen; reports :class:`SensorHealth` snapshots."""

    def __init__(self, stale_after_s: dict[str, float] | None = None) -> None:
        self._limits = dict(DEFAULT_STALE_AFTER_S)
        if stale_after_s:
            self._limits.update(stale_after_s)
        self._channels: dict[str, _Channel] = {}
        self._cache: tuple[SensorHealth, ...] | None = None
        self._cache_t_s: float | None = None
        # No channel can go stale before this event time (a lower bound, see tick).
        self._tick_due_s = math.inf

    def _get(self, channel: str) -> _Channel:
        ch = self._channels.get(channel)
        if ch is None:
            ch = self._channels[channel] = _Channel(self.limit_s(channel))
            self._cache = None
        return ch

    def limit_s(self, channel: str) -> float:
        return self._limits.get(channel, 3.0)

    def valid(self, channel: str, t_s: float) -> bool:
        """Record a valid value; returns True when it ends a gap (sensor recovered)."""
        ch = self._channels.get(channel)
        if ch is None:
            ch = self._get(channel)
        recovered = False
        last = ch.last_valid_t_s
        if last is None:
            self._cache = None            # stale -> fresh
        else:
            gap = t_s - last
            if gap > ch.limit_s:
                if not ch.in_gap:
                    ch.gaps += 1
                recovered = True
                if gap > ch.longest_gap_s:
                    ch.longest_gap_s = gap
                self._cache = None        # stale -> fresh
            elif ch.in_gap:
                self._cache = None
        ch.in_gap = False
        ch.last_valid_t_s = t_s
        ch.accepted += 1
        due = t_s + ch.limit_s
        if due < self._tick_due_s:
            self._tick_due_s = due
        return recovered

    def rejected(self, channel: str) -> None:
        self._get(channel).rejected += 1

    def link(self, channel: str, up: bool) -> None:
        self._get(channel).link_up = up
        self._cache = None

    def stale(self, channel: str, t_s: float) -> bool:
        ch = self._channels.get(channel)
        if ch is None or ch.last_valid_t_s is None:
            return True
        return (t_s - ch.last_valid_t_s) > ch.limit_s or not ch.link_up

    def tick(self, t_s: float) -> list[str]:
        """Mark channels that just went stale; returns their names (once per gap).

        Called after every event: the channels are looked at only once the
        earliest time one of them can go stale (``last valid + limit``,
        kept as a lower bound by :meth:`valid`) is near."""
        if t_s < self._tick_due_s - _TICK_MARGIN_S:
            return []
        newly = []
        due = math.inf
        for name, ch in self._channels.items():
            last = ch.last_valid_t_s
            if last is None or ch.in_gap:
                continue
            if t_s - last > ch.limit_s:
                ch.in_gap = True
                ch.gaps += 1
                newly.append(name)
                self._cache = None
            elif last + ch.limit_s < due:
                due = last + ch.limit_s
        self._tick_due_s = due
        return newly

    def snapshot(self, t_s: float) -> tuple[SensorHealth, ...]:
        """Every channel's health at ``t_s``: flags current; counters and ages from a
        snapshot at most :data:`SNAPSHOT_REFRESH_S` old (see the module docstring)."""
        cache = self._cache
        if cache is not None and self._cache_t_s is not None and 0.0 <= t_s - self._cache_t_s < SNAPSHOT_REFRESH_S:
            return cache
        out = []
        for name in sorted(self._channels):
            ch = self._channels[name]
            age = None if ch.last_valid_t_s is None else t_s - ch.last_valid_t_s
            out.append(
                _sensor_health(  # SensorHealth, by position
                    name,                                       # channel
                    ch.link_up,                                 # link_up
                    self.stale(name, t_s),                      # stale
                    age,                                        # age_s
                    ch.accepted,                                # accepted
                    ch.rejected,                                # rejected
                    ch.gaps,                                    # gaps
                    max(ch.longest_gap_s, age if (age is not None and ch.in_gap) else 0.0),  # longest_gap_s
                )
            )
        self._cache = tuple(out)
        self._cache_t_s = t_s
        return self._cache

    def gaps_summary(self, t_end_s: float | None) -> dict[str, dict[str, float]]:
        """Per channel: {"count": gaps, "longest_s": longest gap} for the JSON summary."""
        out = {}
        for name in sorted(self._channels):
            ch = self._channels[name]
            longest = ch.longest_gap_s
            if ch.in_gap and ch.last_valid_t_s is not None and t_end_s is not None:
                longest = max(longest, t_end_s - ch.last_valid_t_s)
            out[name] = {"count": ch.gaps, "longest_s": round(longest, 3)}
        return out
