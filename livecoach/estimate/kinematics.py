"""Kinematics: distance, speed and acceleration from the wheel sensor (or CSV speed).

Wheel path: each new wheel event gives an exact point (sensor event time,
revolutions x circumference). Speed and acceleration come from a local
quadratic fit of distance against the sensor's own event times (not arrival
times), which the Bluetooth CSC measurement carries at 1/1024 s (Bluetooth
SIG, Cycling Speed and Cadence Service 1.0). The sensor clock is mapped to
the module's receive clock by the lower envelope of (receive time - event
time): the smallest delay seen is the radio latency plus the least wait for
a notification, a standard one-way clock-offset estimate (as in NTP's
minimum-delay filter, Mills 1991, IEEE Trans. Commun. 39:1482).

CSV path: speed samples (and distance, when given) on the receive clock;
the node speed is a local quadratic fit of speed against time.

A sensor restart (brown-out, battery change) breaks the counter and the
event clock: the interval that spans the restart counts only the
revolutions since it and is set aside. Once the next interval confirms a
plausible speed, the track restarts at the first sample after the break,
its distance carried over the break by dead reckoning (trapezoid of the
speeds on both sides), so the distance never steps back or jumps.

The distance and speed shown to the rider and the coach, bridged over
wheel gaps, come from :mod:`livecoach.estimate.odometry`.
"""

from __future__ import annotations

import math

from livecoach.estimate.fit import LocalFit, quadratic_fit

#: Event-time resolution of the CSC measurement, s (Bluetooth SIG CSCS: 1/1024 s).
CSC_TIME_RESOLUTION_S = 1.0 / 1024.0
#: sd of a uniformly quantised event time, s (resolution / sqrt(12)).
EVENT_TIME_SD_S = CSC_TIME_RESOLUTION_S / math.sqrt(12.0)
#: How fast the clock-offset estimate may creep up (sensor clock running slow), s/s.
CLOCK_DRIFT_ALLOWANCE = 2.0e-4
#: Wheel notifications missing this long mean a gap (not a slow wheel, which still notifies), s.
SILENCE_S = 1.5
#: Consecutive rejected wheel samples after which the track restarts from the new value.
RESYNC_AFTER = 3
#: Longest mismatch of the sensor-clock and receive-clock gaps across a break for the
#: sensor clock to be taken as continuous, s.
CLOCK_BREAK_S = 1.0


class PointTrack:
    """Distance points for the energy windows, indexed by an absolute index.

    ``ts``: times on the track's own clock (s), ``ds``: distance along the
    course (m), ``vs``: measured speed at the point (m/s; CSV path only).
    ``t_offset_s`` maps the track clock to the receive clock.
    """

    kind = "points"

    def __init__(self) -> None:
        self.ts: list[float] = []
        self.ds: list[float] = []
        self.vs: list[float] = []
        self.base = 0
        self.t_offset_s = 0.0
        self.generation = 0  # bumped when the track restarts (resync)

    # --- indexing -------------------------------------------------------------
    @property
    def end(self) -> int:
        """One past the last absolute index."""
        return self.base + len(self.ts)

    def t(self, i: int) -> float:
        """Receive-clock time of point ``i``, s."""
        return self.ts[i - self.base] + self.t_offset_s

    def d(self, i: int) -> float:
        return self.ds[i - self.base]

    def prune(self, keep_from: int) -> None:
        """Drop points before absolute index ``keep_from``."""
        k = keep_from - self.base
        if k > 64:
            del self.ts[:k]
            del self.ds[:k]
            if self.vs:
                del self.vs[:k]
            self.base = keep_from

    def reset(self) -> None:
        self.base = self.end
        self.ts.clear()
        self.ds.clear()
        self.vs.clear()
        self.generation += 1

    def span(self, t_center_s: float, half_s: float, lo_idx: int) -> tuple[int, int]:
        """Local indices [lo, hi) of points within ``half_s`` of ``t_center_s`` (track clock)."""
        ts = self.ts
        lo = max(0, lo_idx - self.base)
        while lo < len(ts) and ts[lo] < t_center_s - half_s:
            lo += 1
        hi = lo
        while hi < len(ts) and ts[hi] <= t_center_s + half_s:
            hi += 1
        return lo, hi

    # --- per-segment values for the window integrals ---------------------------
    def segment(self, j: int) -> tuple[float, float, float]:
        """(duration s, distance m, mean speed m/s) between points j and j+1."""
        k = j - self.base
        dt = self.ts[k + 1] - self.ts[k]
        dd = self.ds[k + 1] - self.ds[k]
        return dt, dd, dd / dt if dt > 0.0 else 0.0


class WheelTrack(PointTrack):
    """Wheel-sensor points and the clock mapping (see the module docstring)."""

    kind = "wheel"

    def __init__(self, circumference_m: float, max_accel_mps2: float, half_span_s: float = 1.5) -> None:
        super().__init__()
        self.circumference_m = circumference_m
        self.max_accel_mps2 = max_accel_mps2
        self.half_span_s = half_span_s
        self.source: str | None = None
        self._revs0: int | None = None
        self._d_origin_m = 0.0
        self._last_revs: int | None = None
        self._last_event_s: float | None = None
        self._last_rx_s: float | None = None
        self._offset_s: float | None = None
        self._bad_run = 0
        self._pending: list[tuple[float, int, float]] = []  # rejected run: (rx s, revs, event s)
        self.last_new_point_rx_s: float | None = None
        #: Receive time of the last notification that was usable (a new point, or "no new
        #: event"), s: rejected notifications say nothing about the wheel.
        self.last_ok_rx_s: float | None = None
        self.resyncs = 0

    @property
    def in_break(self) -> bool:
        """Rejected samples since the last accepted one: the wheel is not to be trusted now."""
        return self._bad_run > 0

    def feed(self, t_s: float, revolutions: int, event_time_s: float) -> str | None:
        """Take one wheel sample. Returns a rejection reason, or None if accepted.

        ``t_s``: receive time (s); ``revolutions``: cumulative count;
        ``event_time_s``: the sensor's time of the last event (s, unwrapped).
        """
        if not (math.isfinite(t_s) and math.isfinite(event_time_s)):
            return "wheel_nonfinite"
        # Clock offset: lower envelope of receive time - event time.
        lag = t_s - event_time_s
        if self._offset_s is None or self._last_rx_s is None:
            self._offset_s = lag
        else:
            self._offset_s = min(self._offset_s + CLOCK_DRIFT_ALLOWANCE * max(0.0, t_s - self._last_rx_s), lag)
        self._last_rx_s = t_s
        self.t_offset_s = self._offset_s
        if self._revs0 is None:
            self._start(revolutions, event_time_s, t_s)
            self.last_ok_rx_s = t_s
            return None
        d_revs = revolutions - self._last_revs  # type: ignore[operator]
        d_evt = event_time_s - self._last_event_s  # type: ignore[operator]
        if d_revs == 0 and d_evt == 0.0:
            if not self._bad_run:
                self.last_ok_rx_s = t_s
            return None  # no new event: stopped or slow
        if self._pending and self._pending[-1][1:] == (revolutions, event_time_s):
            return None  # the rejected sample again (a repeated notification)
        reason = None
        if d_revs < 0:
            reason = "wheel_counter_backwards"
        elif d_evt <= 0.0:
            reason = "wheel_time_backwards"
        elif d_revs == 0:
            reason = "wheel_inconsistent"
        else:
            v_new = d_revs * self.circumference_m / d_evt
            if v_new > 60.0:
                reason = "wheel_implausible_speed"
            elif len(self.ts) >= 2:
                dt_prev = self.ts[-1] - self.ts[-2]
                v_prev = (self.ds[-1] - self.ds[-2]) / dt_prev
                dt_mid = 0.5 * (dt_prev + d_evt)
                if abs(v_new - v_prev) > self.max_accel_mps2 * dt_mid + 0.5:
                    reason = "wheel_implausible_jump"
        if reason is not None:
            self._bad_run += 1
            self._pending.append((t_s, revolutions, event_time_s))
            if self._confirmed_restart():
                return None
            if self._bad_run >= RESYNC_AFTER:
                # Several in a row, not consistent among themselves either: restart
                # from the newest, the distance carried over at the last speed.
                first = self._pending[-1]
                self._restart_at(first, self._bridge_m(first[0], None, t_s_based=True), True)
                return reason + "_resync"
            return reason
        self._bad_run = 0
        self._pending.clear()
        self._append(t_s, revolutions, event_time_s)
        return None

    def _append(self, t_s: float, revolutions: int, event_time_s: float) -> None:
        self._last_revs = revolutions
        self._last_event_s = event_time_s
        self.ts.append(event_time_s)
        self.ds.append(self._d_origin_m + (revolutions - self._revs0) * self.circumference_m)
        self._note_point(t_s)

    def _note_point(self, t_s: float) -> None:
        self.last_new_point_rx_s = t_s
        self.last_ok_rx_s = t_s

    def _speed(self, a: tuple[float, int, float], b: tuple[float, int, float]) -> float | None:
        """Speed between two samples (rx s, revs, event s), m/s; None if not a plausible interval."""
        d_revs, d_evt = b[1] - a[1], b[2] - a[2]
        if d_revs <= 0 or d_evt <= 0.0:
            return None
        v = d_revs * self.circumference_m / d_evt
        return v if v <= 60.0 else None

    def _last_speed(self) -> float | None:
        if len(self.ts) < 2:
            return None
        dt = self.ts[-1] - self.ts[-2]
        return (self.ds[-1] - self.ds[-2]) / dt if dt > 0.0 else None

    def _confirmed_restart(self) -> bool:
        """The last two rejected samples make a plausible interval whose speed fits the
        speed before the break: the interval into the break was the bad one (a sensor
        restart counts only the revolutions since it). Restart the track at the first
        of the two, its distance carried over the break."""
        if len(self._pending) < 2 or not self.ds:
            return False
        a, b = self._pending[-2], self._pending[-1]
        v_new = self._speed(a, b)
        v_old = self._last_speed()
        if v_new is None or v_old is None or self.last_new_point_rx_s is None:
            return False
        elapsed = b[0] - self.last_new_point_rx_s
        if abs(v_new - v_old) > self.max_accel_mps2 * elapsed + 0.5:
            return False
        # The sensor clock is continuous over the break when its gap matches the receive-clock gap.
        clock_ok = abs((a[2] - self._last_event_s) - (a[0] - self.last_new_point_rx_s)) <= CLOCK_BREAK_S
        self._restart_at(a, self._bridge_m(a[0], v_new, t_s_based=not clock_ok, evt_s=a[2]),
                         not clock_ok)
        self._append(*b)
        return True

    def _bridge_m(self, rx_s: float, v_new: float | None, *, t_s_based: bool,
                  evt_s: float | None = None) -> float:
        """Distance over a break up to a sample (receive time ``rx_s``, event time ``evt_s``):
        the trapezoid of the speeds before and after it (the last speed when the one after is
        unknown) over the sensor-clock gap, or the receive-clock gap when the sensor clock broke."""
        v_old = self._last_speed() or 0.0
        v_new = v_old if v_new is None else v_new
        if t_s_based or evt_s is None:
            last_rx = self.last_new_point_rx_s if self.last_new_point_rx_s is not None else rx_s
            gap = rx_s - last_rx
        else:
            gap = evt_s - self._last_event_s  # type: ignore[operator]
        return self.ds[-1] + 0.5 * (v_old + v_new) * max(gap, 0.0)

    def _restart_at(self, sample: tuple[float, int, float], d_origin_m: float, clock_broke: bool) -> None:
        rx_s, revolutions, event_time_s = sample
        if clock_broke:
            # A new sensor clock: map it afresh (lower envelope from this sample on).
            k = self._pending.index(sample) if sample in self._pending else len(self._pending)
            lags = [p[0] - p[2] for p in self._pending[k:]] or [rx_s - event_time_s]
            self._offset_s = min(lags)
            self.t_offset_s = self._offset_s
        self.reset()
        self._bad_run = 0
        self._pending.clear()
        self.resyncs += 1
        self._start(revolutions, event_time_s, rx_s, d_origin_m)

    def _start(self, revolutions: int, event_time_s: float, t_s: float, d_origin_m: float = 0.0) -> None:
        self._revs0 = revolutions
        self._d_origin_m = d_origin_m
        self._last_revs = revolutions
        self._last_event_s = event_time_s
        self.ts.append(event_time_s)
        self.ds.append(d_origin_m)
        self._note_point(t_s)

    def node(self, i: int) -> tuple[float, float, float] | None:
        """(speed m/s, its variance (m/s)^2, acceleration m/s^2) at point ``i``
        from a quadratic fit of distance over +-half_span_s (None: too few points)."""
        t0 = self.ts[i - self.base]
        lo, hi = self.span(t0, self.half_span_s, self.base)
        f = quadratic_fit(self.ts, self.ds, lo, hi, t0)
        if f is None:
            return None
        v = f.c1
        var_v = (abs(v) * EVENT_TIME_SD_S) ** 2 * max(f.inv[1][1], 0.0)
        return v, var_v, 2.0 * f.c2

    def ready(self, i: int) -> bool:
        """Enough points after ``i`` for a centred fit."""
        return self.ts[-1] >= self.ts[i - self.base] + self.half_span_s

    def recent_fit(self, span_s: float = 2.0) -> LocalFit | None:
        """One-sided quadratic over the last ``span_s`` of points, at the last point."""
        if len(self.ts) < 2:
            return None
        t_last = self.ts[-1]
        lo = len(self.ts) - 1
        while lo > 0 and self.ts[lo - 1] >= t_last - span_s:
            lo -= 1
        lo = min(lo, len(self.ts) - 2)
        return quadratic_fit(self.ts, self.ds, lo, len(self.ts), t_last)


class SpeedTrack(PointTrack):
    """Speed samples given directly (CSV import), with distance given or integrated."""

    kind = "speed"

    def __init__(self, half_span_s: float = 2.0) -> None:
        super().__init__()
        self.half_span_s = half_span_s
        self.noise_var = 0.0  # running estimate of the speed noise, (m/s)^2
        self._noise_n = 0.0
        self.last_new_point_rx_s: float | None = None

    def feed(self, t_s: float, speed_mps: float, distance_m: float | None) -> str | None:
        if not (math.isfinite(t_s) and math.isfinite(speed_mps)):
            return "speed_nonfinite"
        if speed_mps < 0.0 or speed_mps > 60.0:
            return "speed_implausible"
        if distance_m is not None and not math.isfinite(distance_m):
            distance_m = None
        if self.ts:
            dt = t_s - self.ts[-1]
            if dt <= 0.0:
                return "speed_time_backwards"
            if distance_m is not None:
                if distance_m < self.ds[-1] - 0.5:
                    return "distance_backwards"
                d = max(distance_m, self.ds[-1])
            else:
                d = self.ds[-1] + 0.5 * (speed_mps + self.vs[-1]) * dt
        else:
            d = 0.0 if distance_m is None else distance_m
        self.ts.append(t_s)
        self.ds.append(d)
        self.vs.append(speed_mps)
        self.last_new_point_rx_s = t_s
        return None

    def segment(self, j: int) -> tuple[float, float, float]:
        """(duration, distance, mean speed): the speed is the trapezoid mean, so
        the aero integral stays consistent with the speed samples."""
        k = j - self.base
        dt = self.ts[k + 1] - self.ts[k]
        v = 0.5 * (self.vs[k] + self.vs[k + 1])
        return dt, v * dt, v

    def node(self, i: int) -> tuple[float, float, float] | None:
        t0 = self.ts[i - self.base]
        lo, hi = self.span(t0, self.half_span_s, self.base)
        f = quadratic_fit(self.ts, self.vs, lo, hi, t0)
        if f is None:
            return None
        dof = f.n - (3 if f.c2 != 0.0 or f.n >= 4 else 2)
        if dof > 0:
            # Running mean of the residual variance: the speed noise.
            w = min(dof, 3)
            self.noise_var = (self.noise_var * self._noise_n + f.rss / dof * w) / (self._noise_n + w)
            self._noise_n = min(self._noise_n + w, 300.0)
        var_v = self.noise_var * max(f.inv[0][0], 0.0)
        return f.c0, var_v, f.c1

    def ready(self, i: int) -> bool:
        return self.ts[-1] >= self.ts[i - self.base] + self.half_span_s
