"""The GPS receiver: NMEA 0183 RMC / GGA / VTG sentences at its fix rate.

The course is laid out as a straight line from the start point along a
fixed true heading (the simulator knows only distance along the course).
Positions go to latitude/longitude with the local radii of curvature of the
WGS 84 ellipsoid (NIMA TR8350.2, 3rd ed., 2000: a = 6 378 137 m,
f = 1/298.257223563): meridian radius M = a(1-e^2)/(1-e^2 sin^2 phi)^1.5 and
prime-vertical radius N = a/sqrt(1-e^2 sin^2 phi); over a few km the
flat-earth step error is below a millimetre.

Errors: a slowly wandering position error per axis (Ornstein-Uhlenbeck,
``position_sd_m`` over ``position_time_s``) plus fix-to-fix noise, speed over
ground (Doppler) with small white noise, and an altitude error. Sentences
leave the receiver ``latency_s`` after the fix time, one after the other at
the serial rate. Bytes from :mod:`livecoach.codecs.nmea`.
"""

from __future__ import annotations

import math
from datetime import datetime, timedelta, timezone

from livecoach.codecs.nmea import encode_gga, encode_rmc, encode_vtg, utc_time_text
from livecoach.stream.events import CH_GPS
from sim.randomness import Normals, OrnsteinUhlenbeck
from sim.scenario import GpsSettings
from sim.sensors.base import Outbox, StepInfo

WGS84_A_M = 6378137.0
WGS84_F = 1.0 / 298.257223563
WGS84_E2 = WGS84_F * (2.0 - WGS84_F)


def radii_of_curvature_m(lat_deg: float) -> tuple[float, float]:
    """(meridian M, prime vertical N) radii of curvature, m, of WGS 84 at ``lat_deg``."""
    s = math.sin(math.radians(lat_deg))
    w = 1.0 - WGS84_E2 * s * s
    n = WGS84_A_M / math.sqrt(w)
    m = WGS84_A_M * (1.0 - WGS84_E2) / (w * math.sqrt(w))
    return m, n


class CourseGeometry:
    """Distance along a straight course -> latitude/longitude, degrees."""

    def __init__(self, origin_lat_deg: float, origin_lon_deg: float, heading_deg: float) -> None:
        self.lat0 = origin_lat_deg
        self.lon0 = origin_lon_deg
        self.heading_deg = heading_deg
        h = math.radians(heading_deg)
        self.north_per_m = math.cos(h)
        self.east_per_m = math.sin(h)

    def lat_lon(self, distance_m: float, north_error_m: float = 0.0,
                east_error_m: float = 0.0) -> tuple[float, float]:
        """Latitude and longitude, deg, of the point ``distance_m`` along the course
        (plus the given north/east offsets, m)."""
        north = distance_m * self.north_per_m + north_error_m
        east = distance_m * self.east_per_m + east_error_m
        # Radii at the mid latitude of the step (second-order accurate).
        m0, _ = radii_of_curvature_m(self.lat0)
        lat_mid = self.lat0 + math.degrees(0.5 * north / m0)
        m, n = radii_of_curvature_m(lat_mid)
        lat = self.lat0 + math.degrees(north / m)
        lon = self.lon0 + math.degrees(east / (n * math.cos(math.radians(lat_mid))))
        if lon > 180.0:
            lon -= 360.0
        elif lon < -180.0:
            lon += 360.0
        return lat, lon


class GpsReceiver:
    """Emulates an NMEA GPS receiver; call :meth:`advance` once per step."""

    def __init__(self, cfg: GpsSettings, start_utc: str, seed: int) -> None:
        self.cfg = cfg
        self.geometry = CourseGeometry(cfg.origin_lat_deg, cfg.origin_lon_deg, cfg.heading_deg)
        start = datetime.fromisoformat(start_utc)
        if start.tzinfo is None:
            start = start.replace(tzinfo=timezone.utc)
        self.start = start
        self.noise = Normals(seed, "gps.noise")
        self.north_err = OrnsteinUhlenbeck(cfg.position_sd_m, cfg.position_time_s, Normals(seed, "gps.north"))
        self.east_err = OrnsteinUhlenbeck(cfg.position_sd_m, cfg.position_time_s, Normals(seed, "gps.east"))
        self.alt_err = OrnsteinUhlenbeck(cfg.altitude_sd_m, cfg.position_time_s, Normals(seed, "gps.alt"))
        self.interval_s = 1.0 / cfg.rate_hz
        # Fixes fall on whole multiples of the interval of UTC.
        start_of_day = start.hour * 3600 + start.minute * 60 + start.second + start.microsecond * 1e-6
        k = math.ceil(start_of_day / self.interval_s - 1e-9)
        self.next_fix_s = k * self.interval_s - start_of_day
        self.sentences = [s.strip().upper() for s in cfg.sentences.split(",") if s.strip()]
        self.fixes = 0
        self._last_fix_s = None

    def advance(self, step: StepInfo, outbox: Outbox) -> None:
        while self.next_fix_s <= step.t1_s:
            t = self.next_fix_s
            self._fix(t, step, outbox)
            self.next_fix_s += self.interval_s

    def _fix(self, t_s: float, step: StepInfo, outbox: Outbox) -> None:
        cfg = self.cfg
        dt = self.interval_s if self._last_fix_s is None else t_s - self._last_fix_s
        self._last_fix_s = t_s
        n_err = self.north_err.step(dt) + cfg.position_white_m * self.noise.next()
        e_err = self.east_err.step(dt) + cfg.position_white_m * self.noise.next()
        a_err = self.alt_err.step(dt)
        lat, lon = self.geometry.lat_lon(step.distance_at(t_s), n_err, e_err)
        speed = max(0.0, step.speed_at(t_s) + cfg.speed_sd_mps * self.noise.next())
        when = self.start + timedelta(seconds=t_s)
        sod = when.hour * 3600 + when.minute * 60 + when.second + when.microsecond * 1e-6
        utc_time = utc_time_text(sod)
        utc_date = when.strftime("%d%m%y")
        course = self.geometry.heading_deg
        t_send = t_s + cfg.latency_s
        for kind in self.sentences:
            if kind == "RMC":
                line = encode_rmc(utc_time=utc_time, utc_date=utc_date, latitude_deg=lat,
                                  longitude_deg=lon, speed_mps=speed, course_deg=course, talker=cfg.talker)
            elif kind == "GGA":
                line = encode_gga(utc_time=utc_time, latitude_deg=lat, longitude_deg=lon,
                                  altitude_m=step.elevation_m + a_err, satellites=cfg.satellites,
                                  hdop=cfg.hdop, geoid_separation_m=cfg.geoid_separation_m,
                                  talker=cfg.talker)
            else:
                line = encode_vtg(course_deg=course, speed_mps=speed, talker=cfg.talker)
            t_send += (len(line) + 2) * 10.0 / cfg.baud
            outbox.post(t_send, CH_GPS, line)
        self.fixes += 1
