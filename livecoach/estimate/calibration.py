"""Wheel circumference calibration: from a surveyed distance between two marker
presses, or from GPS over a long straight.

Distance along the course is wheel revolutions x circumference, so a 0.3 %
error in the circumference puts 0.3 % into every speed and about 0.9 % into
the drag area (aero power goes with v^3). The rolling circumference under
load differs from the tyre's nominal size: measure it on the course.

* Markers: the rider (or a crew member via the control channel) presses the
  marker button at two surveyed marks; circumference = surveyed distance /
  revolutions between the presses. The revolution count at each press is
  interpolated between wheel events on the receive clock.
* GPS: over a long straight, circumference = straight-line distance between
  the first and the last fix (one chord, so position noise does not add up
  as it does along a sum of short segments) / revolutions between them. The
  distance uses the local radii of curvature of the WGS-84 ellipsoid
  (NIMA TR8350.2, 2000: a = 6 378 137 m, f = 1/298.257223563; meridional
  radius M = a(1-e^2)/(1-e^2 sin^2 phi)^1.5, prime-vertical N = a/(1-e^2 sin^2 phi)^0.5),
  accurate to about 1e-6 over a few kilometres; a sphere would be off by up
  to 0.5 %.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Iterable

from livecoach.errors import LivecoachError
from livecoach.stream import samples as S

WGS84_A_M = 6378137.0
WGS84_F = 1.0 / 298.257223563
_E2 = WGS84_F * (2.0 - WGS84_F)

#: Assumed sd of a marker press against the mark, s (a rider's reaction; common practice
#: is to press as the mark passes the front wheel).
MARKER_TIMING_SD_S = 0.05
#: Assumed sd of one GPS fix's horizontal position, m (per hdop unit; common practice).
GPS_POSITION_SD_M = 2.5


class CalibrationError(LivecoachError):
    """The data do not allow a circumference calibration."""


@dataclass(frozen=True, slots=True)
class CircumferenceCalibration:
    """Result: ``circumference_m`` and its sd, how (``method``: "markers" or "gps"),
    the reference distance (m) and revolutions it rests on, and the span (s)."""

    circumference_m: float
    sd_m: float
    method: str
    reference_m: float
    revolutions: float
    t0_s: float
    t1_s: float


def wgs84_distance_m(lat1_deg: float, lon1_deg: float, lat2_deg: float, lon2_deg: float) -> float:
    """Distance (m) between two nearby points on the WGS-84 ellipsoid, from the local
    radii of curvature at the mean latitude (good to ~1e-6 relative over a few km)."""
    phi = math.radians(0.5 * (lat1_deg + lat2_deg))
    s2 = math.sin(phi) ** 2
    m = WGS84_A_M * (1.0 - _E2) / (1.0 - _E2 * s2) ** 1.5
    n = WGS84_A_M / math.sqrt(1.0 - _E2 * s2)
    dn = m * math.radians(lat2_deg - lat1_deg)
    de = n * math.cos(phi) * math.radians(lon2_deg - lon1_deg)
    return math.hypot(dn, de)


class _WheelClock:
    """Cumulative revolutions against receive time, from wheel samples."""

    def __init__(self) -> None:
        self.ts: list[float] = []
        self.revs: list[float] = []
        self._offset: float | None = None
        self._last: tuple[int, float] | None = None
        self.source: str | None = None

    def feed(self, s: S.WheelSample) -> None:
        if self.source is None:
            self.source = s.source
        if s.source != self.source or not math.isfinite(s.wheel_event_time_s):
            return
        lag = s.t_s - s.wheel_event_time_s
        self._offset = lag if self._offset is None else min(self._offset, lag)
        key = (s.wheel_revolutions, s.wheel_event_time_s)
        if self._last is not None and (key[0] <= self._last[0] or key[1] <= self._last[1]):
            return
        self._last = key
        self.ts.append(s.wheel_event_time_s)
        self.revs.append(float(s.wheel_revolutions))

    def revs_at(self, t_rx: float) -> float | None:
        """Revolutions (fractional) at receive time ``t_rx``."""
        import bisect

        if len(self.ts) < 2 or self._offset is None:
            return None
        t = t_rx - self._offset
        if t < self.ts[0] or t > self.ts[-1]:
            return None
        k = bisect.bisect_left(self.ts, t)
        if k == 0:
            return self.revs[0]
        f = (t - self.ts[k - 1]) / (self.ts[k] - self.ts[k - 1])
        return self.revs[k - 1] + f * (self.revs[k] - self.revs[k - 1])

    def speed_rps(self, t_rx: float) -> float:
        r0, r1 = self.revs_at(t_rx - 0.5), self.revs_at(t_rx + 0.5)
        return 0.0 if r0 is None or r1 is None else r1 - r0


def calibrate_circumference(
    samples: Iterable[Any],
    *,
    surveyed_m: float | None = None,
    marker_labels: tuple[str, str] | None = None,
    min_distance_m: float = 500.0,
    min_speed_mps: float = 3.0,
) -> CircumferenceCalibration:
    """Calibrate the wheel circumference (see the module docstring).

    With ``surveyed_m`` (m): between the first two marker presses (or the
    presses labelled ``marker_labels``). Without: GPS over the longest
    stretch of valid fixes above ``min_speed_mps``. Raises
    :class:`CalibrationError` naming what is missing.
    """
    wheel = _WheelClock()
    markers: list[S.MarkerSample] = []
    fixes: list[S.GpsSample] = []
    for s in samples:
        kind = type(s)
        if kind is S.WheelSample:
            wheel.feed(s)
        elif kind is S.MarkerSample:
            markers.append(s)
        elif kind is S.GpsSample and s.valid and s.latitude_deg is not None and s.longitude_deg is not None:
            fixes.append(s)
    if len(wheel.ts) < 2:
        raise CalibrationError("no wheel-sensor data: the circumference needs wheel revolutions")
    if surveyed_m is not None:
        if not (math.isfinite(surveyed_m) and surveyed_m > 0.0):
            raise CalibrationError(f"surveyed distance {surveyed_m!r} m must be a positive number")
        if marker_labels is not None:
            pick = [next((m for m in markers if m.label == lab), None) for lab in marker_labels]
            if None in pick:
                raise CalibrationError(f"marker presses labelled {marker_labels!r} not found "
                                       f"(labels seen: {sorted({m.label for m in markers})})")
            m0, m1 = pick  # type: ignore[misc]
        else:
            if len(markers) < 2:
                raise CalibrationError(f"need two marker presses, found {len(markers)}")
            m0, m1 = markers[0], markers[1]
        r0, r1 = wheel.revs_at(m0.t_s), wheel.revs_at(m1.t_s)
        if r0 is None or r1 is None or r1 - r0 <= 0.0:
            raise CalibrationError("no wheel revolutions between the two marker presses")
        c = surveyed_m / (r1 - r0)
        v0 = wheel.speed_rps(m0.t_s) * c
        v1 = wheel.speed_rps(m1.t_s) * c
        sd = c * math.hypot(v0, v1) * MARKER_TIMING_SD_S / surveyed_m
        return CircumferenceCalibration(c, sd, "markers", surveyed_m, r1 - r0, m0.t_s, m1.t_s)
    # GPS: the longest run of consecutive moving fixes.
    best: tuple[int, int] | None = None
    start = None
    for i, f in enumerate(fixes + [None]):  # type: ignore[operator]
        moving = f is not None and f.speed_mps is not None and f.speed_mps >= min_speed_mps
        if moving and start is None:
            start = i
        if not moving and start is not None:
            if best is None or (i - 1 - start) > (best[1] - best[0]):
                best = (start, i - 1)
            start = None
    if best is None:
        raise CalibrationError(f"no GPS fixes while moving above {min_speed_mps:g} m/s")
    f0, f1 = fixes[best[0]], fixes[best[1]]
    while best[0] < best[1] and wheel.revs_at(f0.t_s) is None:
        best = (best[0] + 1, best[1])
        f0 = fixes[best[0]]
    while best[1] > best[0] and wheel.revs_at(f1.t_s) is None:
        best = (best[0], best[1] - 1)
        f1 = fixes[best[1]]
    dist = wgs84_distance_m(f0.latitude_deg, f0.longitude_deg, f1.latitude_deg, f1.longitude_deg)  # type: ignore[arg-type]
    if dist < min_distance_m:
        raise CalibrationError(
            f"the GPS straight is only {dist:.0f} m; need at least {min_distance_m:g} m")
    r0, r1 = wheel.revs_at(f0.t_s), wheel.revs_at(f1.t_s)
    if r0 is None or r1 is None or r1 - r0 <= 0.0:
        raise CalibrationError("no wheel revolutions during the GPS straight")
    c = dist / (r1 - r0)
    pos_sd = GPS_POSITION_SD_M * max(f0.hdop or 1.0, f1.hdop or 1.0)
    sd = c * math.sqrt(2.0) * pos_sd / dist
    return CircumferenceCalibration(c, sd, "gps", dist, r1 - r0, f0.t_s, f1.t_s)
