"""Sensor health: last valid value per channel, staleness, gaps and reject counts.

Pure bookkeeping on the event clock (``t_s`` of the events), so replay gives
the same health history as the live run.
"""

from __future__ import annotations

from dataclasses import dataclass

from livecoach.pipeline.state import SensorHealth
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


@dataclass(slots=True)
class _Channel:
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

    def _get(self, channel: str) -> _Channel:
        ch = self._channels.get(channel)
        if ch is None:
            ch = self._channels[channel] = _Channel()
        return ch

    def limit_s(self, channel: str) -> float:
        return self._limits.get(channel, 3.0)

    def valid(self, channel: str, t_s: float) -> bool:
        """Record a valid value; returns True when it ends a gap (sensor recovered)."""
        ch = self._get(channel)
        recovered = False
        if ch.last_valid_t_s is not None:
            gap = t_s - ch.last_valid_t_s
            if gap > self.limit_s(channel):
                if not ch.in_gap:
                    ch.gaps += 1
                recovered = True
                if gap > ch.longest_gap_s:
                    ch.longest_gap_s = gap
        ch.in_gap = False
        ch.last_valid_t_s = t_s
        ch.accepted += 1
        self._cache = None
        return recovered

    def rejected(self, channel: str) -> None:
        self._get(channel).rejected += 1
        self._cache = None

    def link(self, channel: str, up: bool) -> None:
        self._get(channel).link_up = up
        self._cache = None

    def stale(self, channel: str, t_s: float) -> bool:
        ch = self._channels.get(channel)
        if ch is None or ch.last_valid_t_s is None:
            return True
        return (t_s - ch.last_valid_t_s) > self.limit_s(channel) or not ch.link_up

    def tick(self, t_s: float) -> list[str]:
        """Mark channels that just went stale; returns their names (once per gap)."""
        newly = []
        for name, ch in self._channels.items():
            if ch.last_valid_t_s is None or ch.in_gap:
                continue
            if t_s - ch.last_valid_t_s > self.limit_s(name):
                ch.in_gap = True
                ch.gaps += 1
                newly.append(name)
                self._cache = None
        return newly

    def snapshot(self, t_s: float) -> tuple[SensorHealth, ...]:
        if self._cache is not None and self._cache_t_s is not None and t_s - self._cache_t_s < 0.25:
            return self._cache
        out = []
        for name in sorted(self._channels):
            ch = self._channels[name]
            age = None if ch.last_valid_t_s is None else t_s - ch.last_valid_t_s
            out.append(
                SensorHealth(
                    channel=name,
                    link_up=ch.link_up,
                    stale=self.stale(name, t_s),
                    age_s=age,
                    accepted=ch.accepted,
                    rejected=ch.rejected,
                    gaps=ch.gaps,
                    longest_gap_s=max(ch.longest_gap_s, age if (age is not None and ch.in_gap) else 0.0),
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
