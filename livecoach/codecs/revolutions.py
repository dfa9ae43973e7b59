"""Revolution counters and event times: rollover, wheel speed, cadence, stops.

The Bluetooth SIG CSC and Cycling Power measurements report cumulative
revolutions (uint32 or uint16) and the sensor's own time of the last
revolution event (uint16 in 1/1024 s or 1/2048 s). Both wrap around: the
event time every 64 s (or 32 s) and a uint16 crank counter every 65 536
revolutions. A notification that repeats the previous event time says "no
new revolution since" (common practice, as the CSCS and CPS specifications
define the event time as the time of the *last* event).

Speed and cadence come from the sensor's own event times (Bluetooth SIG
CSCS v1.0, section on wheel speed: speed = delta revolutions * circumference
/ delta event time), never from arrival times, which jitter with the radio
link. Arrival (receive) times are used only to count whole rollover periods
when the gap between two events is longer than one period, and to decide
that the wheel or crank has stopped.

Everything here is pure and deterministic.
"""

from __future__ import annotations

from dataclasses import dataclass

from livecoach.codecs._errors import PayloadError

#: Reason kinds raised by :class:`RevolutionTracker` (see ``PayloadError.kind``).
COUNTER_BACKWARDS = "counter went backwards"
INCONSISTENT = "inconsistent"


def wrap_delta(new: int, old: int, bits: int) -> int:
    """Forward difference ``new - old`` of a ``bits``-bit wrapping counter (0..2**bits - 1)."""
    return (new - old) & ((1 << bits) - 1)


def wheel_speed_mps(delta_revolutions: int, delta_time_s: float, circumference_m: float) -> float:
    """Ground speed, m/s = delta revolutions * circumference (m) / delta event time (s).

    Source: Bluetooth SIG CSCS v1.0 (speed from cumulative wheel revolutions
    and last wheel event time). Returns 0.0 for no revolutions; raises
    ``ValueError`` for a non-positive time with revolutions.
    """
    if delta_revolutions == 0:
        return 0.0
    if delta_time_s <= 0.0:
        raise ValueError(f"delta_time_s={delta_time_s!r} must be > 0 when revolutions advanced")
    return delta_revolutions * circumference_m / delta_time_s


def cadence_rpm(delta_revolutions: int, delta_time_s: float) -> float:
    """Cadence, rev/min = 60 * delta crank revolutions / delta event time (s).

    Returns 0.0 for no revolutions; raises ``ValueError`` for a non-positive
    time with revolutions.
    """
    if delta_revolutions == 0:
        return 0.0
    if delta_time_s <= 0.0:
        raise ValueError(f"delta_time_s={delta_time_s!r} must be > 0 when revolutions advanced")
    return 60.0 * delta_revolutions / delta_time_s


def ticks_from_time_s(t_s: float, ticks_per_s: int, bits: int = 16) -> int:
    """Wrapped event-time ticks for a time ``t_s`` (s): what a sensor sends (simulator helper)."""
    return int(t_s * ticks_per_s) & ((1 << bits) - 1)


#: Highest revolution rate credited after a sensor restart, 1/s (a 0.45 m road wheel at
#: 130 km/h turns about 25 times a second; crank cadence stays far below).
MAX_RESTART_RATE_HZ = 40.0


class CounterUnwrapper:
    """Turns a wrapping ``bits``-bit counter into an ever-growing integer.

    The first value seen is the start. A step larger than half the range is
    taken as the counter going backwards (sensor reset or garbage): the
    update raises :class:`PayloadError` with kind ``"counter went backwards"``
    and re-bases on the new value so later updates continue from it.
    """

    __slots__ = ("bits", "_mask", "_half", "_last_raw", "_total")

    def __init__(self, bits: int) -> None:
        self.bits = bits
        self._mask = (1 << bits) - 1
        self._half = 1 << (bits - 1)
        self._last_raw: int | None = None
        self._total = 0

    @property
    def value(self) -> int | None:
        """The current unwrapped value (``None`` before the first update)."""
        return None if self._last_raw is None else self._total

    def update(self, raw: int) -> int:
        """Feed a raw counter value; returns the unwrapped value."""
        if self._last_raw is None:
            self._last_raw = raw
            self._total = raw
            return raw
        step = (raw - self._last_raw) & self._mask
        self._last_raw = raw
        if step >= self._half:
            back = self._mask + 1 - step
            raise PayloadError(
                COUNTER_BACKWARDS, f"{self.bits}-bit counter stepped back by {back} (to {raw})"
            )
        self._total += step
        return self._total

    def reset(self) -> None:
        """Forget the history (e.g. the sensor restarted)."""
        self._last_raw = None
        self._total = 0


@dataclass(frozen=True, slots=True)
class RevolutionReading:
    """One reading of a revolution sensor after unwrapping.

    revolutions: cumulative revolutions (unwrapped; starts at the first raw value).
    event_time_s: the sensor's own time of the last revolution, s (unwrapped;
    starts at the first raw value / ticks_per_s).
    new_event: at least one revolution since the previous reading.
    delta_revolutions / delta_time_s: since the previous new event (0 and 0.0
    when there is no new event, or on the first reading).
    rate_hz: revolutions per second over that interval, or ``None``.
    """

    revolutions: int
    event_time_s: float
    new_event: bool
    delta_revolutions: int = 0
    delta_time_s: float = 0.0
    rate_hz: float | None = None


class RevolutionTracker:
    """Stateful unwrapper for (cumulative revolutions, last event time) pairs.

    ``revolution_bits``: width of the counter (32 wheel, 16 crank);
    ``ticks_per_s`` and ``time_bits``: the event-time base (1024 or 2048 with
    16 bits for Bluetooth sensors; 1e6 with 32 bits for the mcu hall sensor).

    Rollover of the event time is unwrapped from the sensor's ticks; when
    the receive times of two successive new events are further apart than
    one rollover period, the whole periods are counted from the receive-time
    gap (the event times themselves still give the fraction).
    """

    __slots__ = (
        "ticks_per_s", "time_bits", "_revs", "_tick_mask", "_period_s", "_ticks_total",
        "_last_ticks", "_event_receive_t_s", "_last_event_time_s", "_last_revs",
    )

    def __init__(self, revolution_bits: int, ticks_per_s: float, time_bits: int = 16) -> None:
        self.ticks_per_s = ticks_per_s
        self.time_bits = time_bits
        self._revs = CounterUnwrapper(revolution_bits)
        self._tick_mask = (1 << time_bits) - 1
        self._period_s = (1 << time_bits) / ticks_per_s
        self._ticks_total = 0
        self._last_ticks: int | None = None
        self._event_receive_t_s = 0.0
        self._last_event_time_s = 0.0
        self._last_revs = 0

    @property
    def started(self) -> bool:
        return self._last_ticks is not None

    @property
    def revolutions(self) -> int | None:
        """Unwrapped cumulative revolutions of the latest reading (None before the first)."""
        return self._revs.value if self._last_ticks is not None else None

    @property
    def event_time_s(self) -> float | None:
        """Unwrapped sensor time of the latest revolution event, s (None before the first)."""
        return self._last_event_time_s if self._last_ticks is not None else None

    @property
    def last_event_receive_t_s(self) -> float | None:
        """Receive time (s) at which the latest revolution event was first seen."""
        return self._event_receive_t_s if self._last_ticks is not None else None

    def reset(self) -> None:
        """Forget the history (sensor restarted or link re-established with a reset)."""
        self._revs.reset()
        self._last_ticks = None
        self._ticks_total = 0

    def update(self, revolutions_raw: int, event_ticks_raw: int, receive_t_s: float) -> RevolutionReading:
        """Feed one (revolutions, event ticks) pair received at ``receive_t_s`` (s).

        Raises :class:`PayloadError` (kind ``"counter went backwards"`` or
        ``"inconsistent"``) for impossible data; the tracker re-bases on the
        new values so the next reading is usable.
        """
        if self._last_ticks is None:
            revs = self._revs.update(revolutions_raw)
            self._last_ticks = event_ticks_raw
            self._ticks_total = event_ticks_raw
            self._event_receive_t_s = receive_t_s
            self._last_event_time_s = event_ticks_raw / self.ticks_per_s
            self._last_revs = revs
            return RevolutionReading(revs, self._last_event_time_s, False)
        try:
            revs = self._revs.update(revolutions_raw)
        except PayloadError:
            self._restart(revolutions_raw, event_ticks_raw, receive_t_s)
            raise
        d_revs = revs - self._last_revs
        d_ticks = (event_ticks_raw - self._last_ticks) & self._tick_mask
        if d_revs == 0:
            if d_ticks != 0:
                self._rebase(event_ticks_raw, receive_t_s)
                raise PayloadError(INCONSISTENT, "event time changed but revolutions did not")
            return RevolutionReading(revs, self._last_event_time_s, False)
        if d_ticks == 0:
            gap_s = receive_t_s - self._event_receive_t_s
            if gap_s < 0.5 * self._period_s:
                self._last_revs = revs
                raise PayloadError(INCONSISTENT, f"{d_revs} new revolution(s) but the event time did not change")
        # Whole rollover periods from the receive-time gap (see class docstring).
        frac_s = d_ticks / self.ticks_per_s
        gap_s = receive_t_s - self._event_receive_t_s
        periods = int((gap_s - frac_s) / self._period_s + 0.5) if gap_s - frac_s > 0.5 * self._period_s else 0
        d_total = d_ticks + periods * (self._tick_mask + 1)
        self._ticks_total += d_total
        self._last_ticks = event_ticks_raw
        self._event_receive_t_s = receive_t_s
        dt_s = d_total / self.ticks_per_s
        self._last_event_time_s = self._ticks_total / self.ticks_per_s
        self._last_revs = revs
        return RevolutionReading(revs, self._last_event_time_s, True, d_revs, dt_s, d_revs / dt_s)

    def _restart(self, revolutions_raw: int, event_ticks_raw: int, receive_t_s: float) -> None:
        """The counter went backwards: the sensor restarted (a brown-out, a battery
        change), so its counter and its event clock both began again from zero.

        The sensor's own clock cannot bridge the restart: the unwrapped event
        time goes on by the receive-time gap since the last event, and the
        revolutions counted since the restart are added to the distance when
        they are plausible for that gap (at most :data:`MAX_RESTART_RATE_HZ`;
        more means garbage, which is not counted). The next reading then
        gives a speed from the sensor's own clock again."""
        gap_s = max(receive_t_s - self._event_receive_t_s, 0.0)
        self._ticks_total += int(round(gap_s * self.ticks_per_s))
        self._last_ticks = event_ticks_raw
        self._event_receive_t_s = receive_t_s
        self._last_event_time_s = self._ticks_total / self.ticks_per_s
        if revolutions_raw <= MAX_RESTART_RATE_HZ * gap_s + 2:
            self._revs._total += revolutions_raw
        value = self._revs.value
        self._last_revs = value if value is not None else 0

    def _rebase(self, event_ticks_raw: int, receive_t_s: float) -> None:
        d_ticks = (event_ticks_raw - (self._last_ticks or 0)) & self._tick_mask
        self._ticks_total += d_ticks
        self._last_ticks = event_ticks_raw
        self._event_receive_t_s = receive_t_s
        self._last_event_time_s = self._ticks_total / self.ticks_per_s
        value = self._revs.value
        self._last_revs = value if value is not None else 0

    def stopped(self, receive_t_s: float, timeout_s: float) -> bool:
        """True when no new revolution was seen for longer than ``timeout_s`` (s)
        of receive time, or nothing was seen yet."""
        if self._last_ticks is None:
            return True
        return receive_t_s - self._event_receive_t_s > timeout_s

    def rate_upper_bound_hz(self, receive_t_s: float) -> float | None:
        """An upper bound on the present revolution rate, 1/s: no revolution
        completed since the last event, so the rate is at most 1 / (time since it)."""
        if self._last_ticks is None:
            return None
        since_s = receive_t_s - self._event_receive_t_s
        return None if since_s <= 0.0 else 1.0 / since_s


__all__ = [
    "COUNTER_BACKWARDS",
    "CounterUnwrapper",
    "INCONSISTENT",
    "RevolutionReading",
    "RevolutionTracker",
    "cadence_rpm",
    "ticks_from_time_s",
    "wheel_speed_mps",
    "wrap_delta",
]
