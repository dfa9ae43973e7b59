"""Decoded measurements: what the decode layer makes of :class:`RawEvent` payloads.

The pipeline has two layers:

1. decode: RawEvent (bytes) -> zero or more samples below (codecs, pure);
2. process: samples -> kinematics -> estimator -> rider model -> coach ->
   :class:`livecoach.pipeline.state.LiveState` and notices (pure).

A CSV ride from another device enters at layer 2 as these same samples, so
the estimator and coach run the same code on it. ``t_s`` is always the
receive time on the module's monotonic clock (s); sensor-own event times,
where the protocol has one, are separate fields, already unwrapped across
16-bit rollovers by the decode layer.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class PowerSample:
    """Crank power from the power meter.

    power_w: instantaneous power as reported (W; most meters report an
    average over their report interval, so it lags by about half of it).
    crank_revolutions / crank_event_time_s: cumulative crank revolutions and
    the sensor's own time of the last crank event (s, unwrapped), if sent.
    accumulated_energy_j: cumulative crank work (J) when the meter reports
    accumulated torque with crank revolutions (torque * 2 pi * revs), else None.
    """

    t_s: float
    power_w: float
    crank_revolutions: int | None = None
    crank_event_time_s: float | None = None
    accumulated_energy_j: float | None = None
    pedal_balance_pct: float | None = None


@dataclass(frozen=True, slots=True)
class WheelSample:
    """Wheel revolution data (CSC or Cycling Power wheel fields, or the mcu hall sensor).

    wheel_revolutions: cumulative count (unwrapped, starts at the first value seen).
    wheel_event_time_s: the sensor's own time of the last wheel event, s (unwrapped).
    A repeated event time means "no new wheel event" since the last sample.
    """

    t_s: float
    wheel_revolutions: int
    wheel_event_time_s: float
    source: str = "csc"


@dataclass(frozen=True, slots=True)
class SpeedSample:
    """A ground speed (and optionally distance) given directly: CSV import, or a
    speed computed elsewhere. ``distance_m`` is along the course, if known."""

    t_s: float
    speed_mps: float
    distance_m: float | None = None
    source: str = "csv"


@dataclass(frozen=True, slots=True)
class GpsSample:
    """A GPS fix (NMEA RMC/GGA/VTG). Angles in degrees, altitude m, speed m/s."""

    t_s: float
    valid: bool
    latitude_deg: float | None = None
    longitude_deg: float | None = None
    altitude_m: float | None = None
    speed_mps: float | None = None
    course_deg: float | None = None
    utc_time: str | None = None          # hhmmss.ss as sent
    utc_date: str | None = None          # ddmmyy as sent (RMC)
    satellites: int | None = None
    hdop: float | None = None


@dataclass(frozen=True, slots=True)
class AirSample:
    """Air data from the microcontroller: any field may be absent.

    airspeed_mps: air speed along the vehicle axis (pitot), m/s.
    pressure_pa: static pressure, Pa; temperature_c: deg C; relative_humidity_pct: %.
    """

    t_s: float
    airspeed_mps: float | None = None
    pressure_pa: float | None = None
    temperature_c: float | None = None
    relative_humidity_pct: float | None = None


@dataclass(frozen=True, slots=True)
class HeartRateSample:
    t_s: float
    heart_rate_bpm: float
    rr_intervals_s: tuple[float, ...] = ()


@dataclass(frozen=True, slots=True)
class CadenceSample:
    t_s: float
    cadence_rpm: float


@dataclass(frozen=True, slots=True)
class AltitudeSample:
    """Altitude (m) or grade (rise over run) given directly, e.g. by a CSV ride."""

    t_s: float
    altitude_m: float | None = None
    grade: float | None = None


@dataclass(frozen=True, slots=True)
class MarkerSample:
    """A marker-button press (start line, surveyed mark, ...)."""

    t_s: float
    label: str = ""


@dataclass(frozen=True, slots=True)
class LinkSample:
    """A source's link state changed (``state`` in {"up", "down", "reconnecting"})."""

    t_s: float
    channel: str
    state: str


@dataclass(frozen=True, slots=True)
class Rejected:
    """A payload that could not be used, with the reason (counted, never raised)."""

    t_s: float
    channel: str
    reason: str


Sample = (
    PowerSample | WheelSample | SpeedSample | GpsSample | AirSample | HeartRateSample
    | CadenceSample | AltitudeSample | MarkerSample | LinkSample | Rejected
)
