"""Shared pieces of the sensor emulators: the step record, sensor clocks, the outbox.

Sensor clocks: each sensor counts its own time from its power-on, with an
offset (it was switched on before the run) and a rate error in ppm, as
quartz clocks do (common practice: +-20..50 ppm for cheap crystals).
"""

from __future__ import annotations

import heapq
import math
from typing import Callable

from livecoach.stream.events import RawEvent


class StepInfo:
    """The truth over one integration step [t0_s, t1_s] (SI units).

    Inputs held over the step: ``power_w`` (crank), ``headwind_mps``.
    State at both ends: distance ``x0_m``/``x1_m``, speed ``v0_mps``/``v1_mps``.
    At the end: ``elevation_m``, ``pressure_pa``, ``temperature_c``,
    ``relative_humidity_pct``, ``w_prime_balance_j``.
    """

    __slots__ = (
        "t0_s", "t1_s", "x0_m", "x1_m", "v0_mps", "v1_mps", "power_w", "headwind_mps",
        "elevation_m", "pressure_pa", "temperature_c", "relative_humidity_pct",
        "w_prime_balance_j", "pedalling",
    )

    def __init__(self) -> None:
        self.t0_s = self.t1_s = 0.0
        self.x0_m = self.x1_m = 0.0
        self.v0_mps = self.v1_mps = 0.0
        self.power_w = 0.0
        self.headwind_mps = 0.0
        self.elevation_m = 0.0
        self.pressure_pa = 101325.0
        self.temperature_c = 15.0
        self.relative_humidity_pct = 0.0
        self.w_prime_balance_j = 0.0
        self.pedalling = False

    def crossing_time_s(self, x_m: float) -> float:
        """Time, s, within the step at which the vehicle passes ``x_m`` (m).

        Cubic Hermite interpolation of x(t) from the end positions and speeds
        (error O(dt^4), far below a 1/1024 s tick at 50-100 Hz steps), solved
        by Newton's method from the linear guess; clamped to the step.
        """
        t0, t1 = self.t0_s, self.t1_s
        h = t1 - t0
        dx = self.x1_m - self.x0_m
        if dx <= 0.0:
            return t1
        s = min(max((x_m - self.x0_m) / dx, 0.0), 1.0)
        m0, m1 = self.v0_mps * h, self.v1_mps * h
        for _ in range(4):
            s2, s3 = s * s, s * s * s
            x = ((2 * s3 - 3 * s2 + 1) * self.x0_m + (s3 - 2 * s2 + s) * m0
                 + (-2 * s3 + 3 * s2) * self.x1_m + (s3 - s2) * m1)
            dxds = ((6 * s2 - 6 * s) * self.x0_m + (3 * s2 - 4 * s + 1) * m0
                    + (-6 * s2 + 6 * s) * self.x1_m + (3 * s2 - 2 * s) * m1)
            if dxds <= 0.0:
                break
            step = (x - x_m) / dxds
            s = min(max(s - step, 0.0), 1.0)
            if abs(step) < 1e-12:
                break
        return t0 + s * h

    def speed_at(self, t_s: float) -> float:
        """Speed, m/s, at ``t_s`` within the step (linear between the ends)."""
        h = self.t1_s - self.t0_s
        f = 0.0 if h <= 0.0 else (t_s - self.t0_s) / h
        return self.v0_mps + f * (self.v1_mps - self.v0_mps)

    def distance_at(self, t_s: float) -> float:
        """Distance, m, at ``t_s`` within the step (cubic Hermite, as above)."""
        h = self.t1_s - self.t0_s
        if h <= 0.0:
            return self.x1_m
        s = (t_s - self.t0_s) / h
        s2, s3 = s * s, s * s * s
        return ((2 * s3 - 3 * s2 + 1) * self.x0_m + (s3 - 2 * s2 + s) * self.v0_mps * h
                + (-2 * s3 + 3 * s2) * self.x1_m + (s3 - s2) * self.v1_mps * h)


class SensorClock:
    """A sensor's own clock: ``sensor_s = (t_s + offset_s) * (1 + ppm * 1e-6)``."""

    __slots__ = ("offset_s", "rate")

    def __init__(self, offset_s: float, ppm: float) -> None:
        self.offset_s = offset_s
        self.rate = 1.0 + ppm * 1e-6

    def sensor_s(self, t_s: float) -> float:
        """The sensor's time, s, at simulated time ``t_s`` (s)."""
        return (t_s + self.offset_s) * self.rate

    def ticks(self, t_s: float, ticks_per_s: float) -> int:
        """Whole ticks of the sensor clock at ``t_s`` (unwrapped; the codec wraps)."""
        return int(math.floor(self.sensor_s(t_s) * ticks_per_s))


class Outbox:
    """Payloads on their way to the receiver, ordered by receive time.

    ``filter`` (the fault injector) may drop, change, duplicate or delay a
    payload; it gets ``(t_s, channel, payload)`` and returns a list of them.
    Receive times on one channel never go backwards (a radio link or a serial
    line delivers in order), unless a fault says so.
    """

    def __init__(self, filter_: Callable[[float, str, bytes], list[tuple[float, str, bytes]]] | None = None) -> None:
        self._heap: list[tuple[float, int, str, bytes]] = []
        self._seq = 0
        self._last_t: dict[str, float] = {}
        self.filter = filter_
        self.posted = 0

    def post(self, t_s: float, channel: str, payload: bytes) -> None:
        """Send ``payload`` on ``channel``, received at ``t_s`` (s)."""
        last = self._last_t.get(channel)
        if last is not None and t_s <= last:
            t_s = last + 1e-4
        self._last_t[channel] = t_s
        self.posted += 1
        items = [(t_s, channel, payload)] if self.filter is None else self.filter(t_s, channel, payload)
        for t, ch, p in items:
            self.push_raw(t, ch, p)

    def push_raw(self, t_s: float, channel: str, payload: bytes) -> None:
        """Queue a payload as is (no ordering, no faults)."""
        heapq.heappush(self._heap, (t_s, self._seq, channel, payload))
        self._seq += 1

    def pop_until(self, t_s: float) -> list[RawEvent]:
        """Every queued payload received at or before ``t_s`` (s), in order."""
        out = []
        heap = self._heap
        while heap and heap[0][0] <= t_s:
            t, _, ch, p = heapq.heappop(heap)
            out.append(RawEvent(t, ch, p))
        return out

    def pop_all(self) -> list[RawEvent]:
        return self.pop_until(math.inf)

    def __len__(self) -> int:
        return len(self._heap)
