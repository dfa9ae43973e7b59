"""Timing the trap from the distance track: entry/exit crossing times and mean speed.

The crossing time of a line at distance D is interpolated linearly between
the two distance updates that straddle it (the timing-light equivalent on the
module's own clock). Mean speed through the trap = trap length / (t_exit - t_entry).
"""

from __future__ import annotations


class TrapTimer:
    """Feed (t_s, distance_m) pairs in time order; read entry/exit times and speed."""

    def __init__(self, entry_m: float, exit_m: float) -> None:
        self.entry_m = entry_m
        self.exit_m = exit_m
        self.entry_t_s: float | None = None
        self.exit_t_s: float | None = None
        self._prev: tuple[float, float] | None = None

    @staticmethod
    def _cross(t0: float, d0: float, t1: float, d1: float, line_m: float) -> float:
        if d1 == d0:
            return t1
        return t0 + (line_m - d0) * (t1 - t0) / (d1 - d0)

    def feed(self, t_s: float, distance_m: float) -> str | None:
        """Returns "entry" or "exit" when that line is crossed by this update."""
        prev = self._prev
        self._prev = (t_s, distance_m)
        if prev is None:
            return None
        t0, d0 = prev
        event = None
        if self.entry_t_s is None and d0 < self.entry_m <= distance_m:
            self.entry_t_s = self._cross(t0, d0, t_s, distance_m, self.entry_m)
            event = "entry"
        if self.entry_t_s is not None and self.exit_t_s is None and d0 < self.exit_m <= distance_m:
            self.exit_t_s = self._cross(t0, d0, t_s, distance_m, self.exit_m)
            event = "exit"
        return event

    @property
    def trap_time_s(self) -> float | None:
        if self.entry_t_s is None or self.exit_t_s is None:
            return None
        return self.exit_t_s - self.entry_t_s

    @property
    def trap_speed_mps(self) -> float | None:
        t = self.trap_time_s
        if t is None or t <= 0.0:
            return None
        return (self.exit_m - self.entry_m) / t
