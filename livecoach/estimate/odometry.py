"""Distance along the course and speed for the rider and the coach, bridged over wheel gaps.

The wheel sensor is the authority on distance (revolutions x a calibrated
circumference, :mod:`livecoach.estimate.kinematics`). Between its points the
distance goes on at the wheel speed (dead reckoning from the last wheel event
at its own event time). When the wheel falls silent or sends data that do not
fit (a dropout, a disconnect, a sensor restart), the distance goes on at once
at the GPS speed, or at the last wheel speed without a fresh GPS fix, and
hands back to the wheel when it has two consistent points again.

Every change of source, and every new wheel point (whose distance differs
from the extrapolated one by the small prediction error), would make the
distance step. Instead the step is carried as an offset that is blended out
exponentially: a hand-back from a bridge slowly (time constant
:data:`BLEND_S`), the prediction error at a new wheel point within about a
notification interval (:data:`BLEND_POINT_S`). The shown distance is
continuous, and while it is ahead of its source it slows by at most
:data:`MAX_SLOWDOWN` of the speed, so it never goes backwards while moving.
This is a complementary filter in the sense of Higgins (1975, IEEE Trans.
Aerosp. Electron. Syst. AES-11:321): the wheel's distance for the long run,
the integrated speed for the short run.

The offset is a closed-form function of time from its last anchor, so the
result does not depend on how often the distance is read.
"""

from __future__ import annotations

import math

from livecoach.estimate.kinematics import SILENCE_S, WheelTrack

#: Time constant of blending a hand-back correction into the shown distance, s.
BLEND_S = 5.0
#: Time constant of blending the prediction error at a new wheel point, s.
BLEND_POINT_S = 0.5
#: While the shown distance is ahead of its source it slows by at most this share of the
#: speed (shared by the two offsets: 3/5 hand-back, 2/5 point).
MAX_SLOWDOWN = 0.25
#: Dead reckoning at the last wheel speed without any fresh speed stops after this long, s.
DEAD_RECKONING_MAX_S = 10.0
#: Shown speeds below this are shown as 0 (the wheel is taken as stopped), m/s.
STOPPED_MPS = 0.3


class Odometer:
    """The shown distance (m), speed (m/s) and their source, from a wheel track and GPS speed.

    Call :meth:`update` after every sample (receive time ``t_s``, s) and read
    :meth:`distance_m` at any later time. ``stale_s``: a wheel silent this
    long is stale (s); ``gps_fresh_s``: a GPS speed older than this is not
    used (s).
    """

    def __init__(self, wheel: WheelTrack, stale_s: float, gps_fresh_s: float) -> None:
        self.wheel = wheel
        self.stale_s = stale_s
        self.gps_fresh_s = gps_fresh_s
        self.mode: str | None = None  # "wheel" or "bridge"
        self.source: str | None = None  # "wheel" or "gps"
        self.speed_mps: float | None = None
        self.accel_mps2: float | None = None
        self._info_t_s: float | None = None  # receive time of the newest speed used, s
        # The source distance R(t): d0 + v (t - t0), t >= t0 (m, s, m/s).
        self._d0_m = 0.0
        self._t0_s = 0.0
        self._v_mps = 0.0
        # The offsets from their anchor (time s, speed at the anchor m/s): hand-back, point (m).
        self._o_m = 0.0
        self._p_m = 0.0
        self._o_t_s = 0.0
        self._o_v_mps = 0.0
        self._fed = False
        self._wheel_seen = False
        self._bridge_end = 0  # wheel track end (absolute index) when the bridge began
        self.bridges = 0

    # ---------------------------------------------------------------- reading
    def _source_m(self, t_s: float) -> float:
        return self._d0_m + self._v_mps * max(t_s - self._t0_s, 0.0)

    def offset_m(self, t_s: float) -> float:
        """The offset still being blended out at ``t_s`` (m; see the module docstring)."""
        dt = max(t_s - self._o_t_s, 0.0)
        v = self._o_v_mps
        return (_blend(self._o_m, dt, BLEND_S, 0.6 * MAX_SLOWDOWN * v)
                + _blend(self._p_m, dt, BLEND_POINT_S, 0.4 * MAX_SLOWDOWN * v))

    def stale(self, t_s: float) -> bool:
        """No speed newer than ``stale_s`` at ``t_s`` (the wheel's, or the GPS's in a gap)."""
        return self._info_t_s is None or t_s - self._info_t_s > self.stale_s

    def distance_m(self, t_s: float) -> float | None:
        """The shown distance at ``t_s`` (m), None before the first wheel point."""
        if not self._fed:
            return None
        return self._source_m(t_s) + self.offset_m(t_s)

    # --------------------------------------------------------------- updating
    def update(self, t_s: float, gps_t_s: float | None, gps_speed_mps: float | None,
               wheel_speed_mps: float | None, wheel_accel_mps2: float | None) -> None:
        """Take the state after a sample at ``t_s`` (s): the newest GPS speed and its time
        (m/s, s), and the wheel speed and acceleration fitted at the newest wheel point
        (m/s, m/s^2; None when there is none)."""
        w = self.wheel
        if not w.ts:
            return
        d_before = self.distance_m(t_s)
        was_wheel = self.mode == "wheel"
        gps_fresh = (gps_t_s is not None and gps_speed_mps is not None
                     and t_s - gps_t_s <= self.gps_fresh_s)
        last_ok = w.last_ok_rx_s if w.last_ok_rx_s is not None else t_s
        silent_s = t_s - last_ok
        wheel_ok = (not w.in_break and silent_s <= SILENCE_S and wheel_speed_mps is not None
                    and w.end - self._bridge_end >= 2 and not self._frozen(wheel_speed_mps))
        if wheel_ok:
            v = self._wheel_speed(wheel_speed_mps)  # type: ignore[arg-type]
            t_evt = w.ts[-1] + w.t_offset_s
            self._d0_m, self._t0_s, self._v_mps = w.ds[-1], t_evt, v
            self.mode, self.source = "wheel", "wheel"
            self.speed_mps = v
            self.accel_mps2 = wheel_accel_mps2 if v > 0.0 and wheel_accel_mps2 is not None else 0.0
            self._info_t_s = last_ok
        else:
            if self.mode != "bridge":
                self.bridges += 1
                self._bridge_end = w.end
                if d_before is None:  # no wheel speed yet: start from the first point
                    self._d0_m, self._t0_s, self._v_mps = w.ds[-1], t_s, 0.0
            # Continue the source distance from here at the best speed there is.
            d_now = self._source_m(t_s)
            if (not self._wheel_seen and not w.in_break and silent_s <= SILENCE_S
                    and w.last_new_point_rx_s is not None and last_ok > w.last_new_point_rx_s):
                # Before the wheel's first speed (on the start line) a wheel whose newest
                # notification said "no new event" is the authority: it has not turned
                # since its newest point, whatever speed a GPS at rest reads (its noise
                # would creep the distance forward).
                v, self.source = 0.0, "wheel"
                self._info_t_s = last_ok
            elif gps_fresh:
                # A GPS at rest reads a few tenths of a m/s of noise: below the stopped
                # threshold the vehicle stands and the distance stays put.
                v = float(gps_speed_mps)  # type: ignore[arg-type]
                v, self.source = (v if v >= STOPPED_MPS else 0.0), "gps"
                self._info_t_s = gps_t_s
            else:
                # Dead reckoning at the last speed, from the newest wheel point on (a frozen
                # sensor's repeats are no news).
                last_new = w.last_new_point_rx_s if w.last_new_point_rx_s is not None else t_s
                held = self.speed_mps if self.speed_mps is not None else 0.0
                v = held if t_s - last_new <= DEAD_RECKONING_MAX_S else 0.0
                self.source = "wheel"
                self._info_t_s = last_new
            self._d0_m, self._t0_s, self._v_mps = d_now, t_s, v
            self.mode = "bridge"
            self.speed_mps = v
            self.accel_mps2 = None
        # Carry the step as an offset: the shown distance is continuous at t_s.
        if d_before is None:
            self._o_m = self._p_m = 0.0
        else:
            dt = max(t_s - self._o_t_s, 0.0)
            v_old = self._o_v_mps
            o = _blend(self._o_m, dt, BLEND_S, 0.6 * MAX_SLOWDOWN * v_old)
            p = _blend(self._p_m, dt, BLEND_POINT_S, 0.4 * MAX_SLOWDOWN * v_old)
            step = d_before - (self._source_m(t_s) + o + p)
            if self.mode == "wheel" and not self._wheel_seen:
                # The wheel's first speed (a standing start, or the module started while
                # rolling): take its distance at once where it is ahead; nothing before
                # it knew the speed.
                o, p, step = max(o + p + step, 0.0), 0.0, 0.0
            if was_wheel and self.mode == "wheel":
                p += step  # a new wheel point's prediction error
            else:
                o += step  # a change of source
            self._o_m, self._p_m = o, p
        self._o_t_s = t_s
        self._o_v_mps = self._v_mps
        self._fed = True
        self._wheel_seen = self._wheel_seen or self.mode == "wheel"

    def _frozen(self, v_fit: float) -> bool:
        """The wheel has been quiet longer than it can be at the last speed: slowing at the
        largest plausible deceleration (``max_accel_mps2``) it would have turned more than
        two revolutions since the newest point. Its notifications repeat a frozen value."""
        w = self.wheel
        if w.last_ok_rx_s is None or v_fit <= 0.0:
            return False
        quiet = w.last_ok_rx_s - (w.ts[-1] + w.t_offset_s)
        a = w.max_accel_mps2
        q = min(quiet, v_fit / a)  # time to stop at that deceleration
        return v_fit * q - 0.5 * a * q * q > 2.0 * w.circumference_m

    def _wheel_speed(self, v_fit: float) -> float:
        """The fitted wheel speed, capped by the quiet time when the wheel slows or stops:
        the last usable notification said there was no wheel event between the newest
        point and its arrival (m/s)."""
        w = self.wheel
        v = v_fit
        t_evt = w.ts[-1] + w.t_offset_s
        rx = w.last_ok_rx_s if w.last_ok_rx_s is not None else t_evt
        quiet = rx - t_evt
        # Slowing or stopped: no wheel event for clearly longer than one revolution at
        # the last speed. The margin covers the jitter of the event-clock offset and of
        # the notification latency (a quiet time just over one period is normal at speed).
        c = w.circumference_m
        if quiet > 0.0 and (v <= 0.0 or quiet > 1.5 * c / v + 0.1):
            v = max(0.0, min(v, c / quiet))
        return 0.0 if v < STOPPED_MPS else v


def _blend(o0_m: float, dt_s: float, tau_s: float, max_rate_mps: float) -> float:
    """An offset ``o0_m`` (m) after ``dt_s`` (s) of exponential blending with time constant
    ``tau_s`` (s); a positive offset (the shown distance ahead of its source) shrinks no
    faster than ``max_rate_mps`` (m/s), first linearly at that rate, then exponentially."""
    if o0_m == 0.0:
        return 0.0
    if o0_m < 0.0:  # behind the source: catch up
        return o0_m * math.exp(-dt_s / tau_s)
    r = max_rate_mps
    if r <= 0.0:
        return o0_m  # stopped: hold (shrinking would move the distance backwards)
    if o0_m <= r * tau_s:
        return o0_m * math.exp(-dt_s / tau_s)
    t1 = (o0_m - r * tau_s) / r
    if dt_s <= t1:
        return o0_m - r * dt_s
    return r * tau_s * math.exp(-(dt_s - t1) / tau_s)
