"""Crank work on the receive clock from power reports that are interval averages.

Most power meters report the mean power over their report interval (for a
crank meter, typically over the last crank revolution or the last report
period; Bluetooth SIG Cycling Power Service 1.1 leaves the averaging to the
device). A report received at t_k is therefore taken as the mean over
(t_{k-1}, t_k]: the cumulative work W(t) is piecewise linear between reports,
and the work over any window is W(t1) - W(t0). Seen as a point value this
report lags the wheel by about half an interval; modelled this way it does
not. Any remaining delay (radio latency, a meter that averages longer) is
estimated by the drag estimator as a lag between the two time bases.

A missing report (a gap longer than 1.5 report intervals) leaves its span
unknown: it is filled with the mean of the neighbouring reports and counted
as gap time, so windows that contain much of it are set aside.
"""

from __future__ import annotations

import bisect
import math


class PowerTrack:
    """Cumulative crank work (J, before drivetrain losses) against receive time (s)."""

    def __init__(self) -> None:
        self.ts: list[float] = []   # knot times, s
        self.ws: list[float] = []   # cumulative work at the knots, J
        self.ps: list[float] = []   # power over the segment ending at each knot, W
        self.filled: list[bool] = []  # segment ending at the knot was filled in (unknown)
        self._recent_dt: list[float] = []
        self.nominal_interval_s: float | None = None
        self._fresh = True  # next report starts a new stretch (start or after link loss)
        self.last_rx_s: float | None = None
        self.last_power_w: float | None = None

    @property
    def t_end(self) -> float | None:
        return self.ts[-1] if self.ts else None

    def link_down(self) -> None:
        """The power link dropped: the next report's interval is unknown."""
        self._fresh = True

    def feed(self, t_s: float, power_w: float) -> str | None:
        """Add one report (receive time s, power W). Returns a rejection reason or None."""
        if not (math.isfinite(t_s) and math.isfinite(power_w)):
            return "power_nonfinite"
        if power_w < -50.0 or power_w > 3000.0:
            return "power_implausible"
        p = max(power_w, 0.0)  # a freewheel passes no negative crank power to the wheel
        self.last_rx_s = t_s
        if not self.ts:
            self._knot(t_s, 0.0, p, False)
            self._fresh = False
            self.last_power_w = p
            return None
        dt = t_s - self.ts[-1]
        nominal = self.nominal_interval_s
        if dt <= 0.0 or (nominal is not None and dt < 0.3 * nominal):
            return "power_duplicate"
        self._recent_dt.append(dt)
        if len(self._recent_dt) > 9:
            del self._recent_dt[0]
        self.nominal_interval_s = sorted(self._recent_dt)[len(self._recent_dt) // 2]
        nominal = self.nominal_interval_s
        prev_p = self.ps[-1] if self.ps else p
        if self._fresh or dt > 1.5 * nominal:
            # The report covers only its own interval; the span before it is unknown.
            own = min(nominal, dt)
            gap = dt - own
            if gap > 0.0:
                fill = 0.5 * (prev_p + p)
                self._knot(self.ts[-1] + gap, self.ws[-1] + fill * gap, fill, True)
            self._knot(t_s, self.ws[-1] + p * own, p, False)
            self._fresh = False
        else:
            self._knot(t_s, self.ws[-1] + p * dt, p, False)
        self.last_power_w = p
        return None

    def _knot(self, t: float, w: float, p: float, filled: bool) -> None:
        self.ts.append(t)
        self.ws.append(w)
        self.ps.append(p)
        self.filled.append(filled)

    def work_at(self, t: float) -> float | None:
        """Cumulative work at ``t`` (s), J; None outside the known span."""
        ts = self.ts
        if not ts or t < ts[0] or t > ts[-1]:
            return None
        k = bisect.bisect_left(ts, t)
        if ts[k] == t:
            return self.ws[k]
        f = (t - ts[k - 1]) / (ts[k] - ts[k - 1])
        return self.ws[k - 1] + f * (self.ws[k] - self.ws[k - 1])

    def stats(self, t0: float, t1: float, rel_sd: float, abs_sd_w: float) -> tuple[float, float]:
        """(variance of the work over [t0, t1] in J^2, filled-in gap time in s).

        Each report's error (sd = rel_sd * P + abs_sd_w, independent between
        reports) weighs by the overlap of its interval with the window.
        """
        ts = self.ts
        k = max(1, bisect.bisect_right(ts, t0))
        var = 0.0
        gap = 0.0
        n = len(ts)
        while k < n and ts[k - 1] < t1:
            a = max(t0, ts[k - 1])
            b = min(t1, ts[k])
            if b > a:
                ov = b - a
                if self.filled[k]:
                    gap += ov
                    sd = 0.25 * self.ps[k] + abs_sd_w
                else:
                    sd = rel_sd * self.ps[k] + abs_sd_w
                var += (sd * ov) ** 2
            k += 1
        return var, gap

    def prune(self, before_t: float) -> None:
        """Forget knots older than ``before_t`` (s), keeping one before it."""
        k = bisect.bisect_left(self.ts, before_t) - 1
        if k > 64:
            del self.ts[:k]
            del self.ws[:k]
            del self.ps[:k]
            del self.filled[:k]
