"""Is each configured sensor there and sending plausible values? (pure)

Each judge decodes what one sensor sent while the check listened (with the
project's codecs, the same the live loop uses), and answers with
:class:`~livecoach.setup_check.result.CheckResult` lines: found or not, the
message rate, the share of messages that could not be decoded, and whether
the values are physically plausible for a vehicle standing at the start
line (or rolling slowly). Plausibility limits are common practice for
human-powered vehicles, chosen wide so that only a broken or misconfigured
sensor fails.
"""

from __future__ import annotations

import calendar
from collections import Counter
from typing import Any, Callable, Iterable

from livecoach.codecs import csc, cycling_power, heart_rate, mcu_line, nmea
from livecoach.codecs.revolutions import wrap_delta
from livecoach.errors import DecodeError
from livecoach.setup_check.facts import BLE, SensorTraffic
from livecoach.setup_check.result import GO, NO_GO, WARN, CheckResult

#: Highest plausible ground or wheel speed, m/s (common practice: the fastest
#: human-powered vehicles reach about 40 m/s; above 50 m/s a sensor or the
#: configured circumference is wrong).
MAX_PLAUSIBLE_SPEED_MPS = 50.0
#: Lowest and highest plausible crank power reading, W (small negative values
#: are a meter's zero offset; common practice).
MIN_PLAUSIBLE_POWER_W = -50.0
MAX_PLAUSIBLE_POWER_W = 3000.0
#: Plausible heart rate, beats/min (common practice).
HEART_RATE_RANGE_BPM = (25.0, 240.0)
#: An air-speed probe reading above this at the start line is suspicious, m/s.
MAX_STANDING_AIRSPEED_MPS = 10.0

_LABELS = {
    "power": "power meter",
    "speed": "wheel-speed sensor",
    "heart_rate": "heart-rate strap",
    "gps": "GPS",
    "mcu": "sensor microcontroller",
}


def label(role: str) -> str:
    """Human name of a sensor role."""
    return _LABELS.get(role, role)


def _decode_all(
    traffic: SensorTraffic, decode: Callable[[Any], Any]
) -> tuple[list[tuple[float, Any]], Counter]:
    """Decoded (t_s, value) pairs and a Counter of rejection reasons."""
    good: list[tuple[float, Any]] = []
    reasons: Counter = Counter()
    for ev in traffic.events:
        try:
            value = decode(ev)
        except DecodeError as exc:
            reasons[getattr(exc, "kind", None) or str(exc).split(":")[0]] += 1
            continue
        except (ValueError, TypeError, OverflowError) as exc:  # a codec bug: count, never crash
            reasons[f"{type(exc).__name__}"] += 1
            continue
        good.append((ev.t_s, value))
    return good, reasons


def _fail_status(traffic: SensorTraffic) -> str:
    return NO_GO if traffic.spec.required else WARN


def _link_result(traffic: SensorTraffic, cfg: Any) -> CheckResult | None:
    """A failing result when the sensor was not found, silent or too slow, else None."""
    spec = traffic.spec
    name = f"{label(spec.role)} {spec.where}"
    if not traffic.connected:
        if spec.transport == BLE:
            hint = ("wake the sensor (turn the cranks, spin the wheel), check its address with "
                    "`livecoach scan`, and switch off other receivers that may hold the connection")
        else:
            hint = "check the cable, the port name in [sensors] and the udev rules (hardware_notes/)"
        return CheckResult(name, _fail_status(traffic), f"not found: {traffic.error or 'no link'}", hint)
    n = len(traffic.events)
    if n == 0:
        return CheckResult(name, _fail_status(traffic),
                           f"link up but nothing received in {traffic.window_s:.0f} s",
                           "wake the sensor; for serial, check the baud rate and the TX/RX wiring")
    window = max(traffic.window_s, 1e-9)
    rate_hz = n / window
    if rate_hz < cfg.min_rate_hz:
        return CheckResult(name, _fail_status(traffic),
                           f"{n} messages in {traffic.window_s:.0f} s ({rate_hz:.2f}/s, need "
                           f">= {cfg.min_rate_hz:g}/s)",
                           "weak link or a sensor going to sleep: move the antenna, wake the sensor")
    return None


def _reject_result(traffic: SensorTraffic, good: int, reasons: Counter, cfg: Any) -> CheckResult | None:
    bad = sum(reasons.values())
    total = good + bad
    if total == 0 or 100.0 * bad / total <= cfg.max_rejected_pct:
        return None
    spec = traffic.spec
    top, count = reasons.most_common(1)[0]
    hint = ("wrong baud rate or electrical noise on the line" if spec.transport != BLE
            else "a sensor speaking another format: check the address belongs to this sensor")
    return CheckResult(f"{label(spec.role)} {spec.where}", _fail_status(traffic),
                       f"{bad} of {total} messages rejected (most: {top}, {count}x)", hint)


def _decoded(
    traffic: SensorTraffic, cfg: Any, decode: Callable[[Any], Any]
) -> tuple[list[tuple[float, Any]], CheckResult | None]:
    """Decoded (t_s, value) pairs, and the row to report instead when the link
    is down, too slow, or too many messages are rejected (else None)."""
    link = _link_result(traffic, cfg)
    if link is not None:
        return [], link
    good, reasons = _decode_all(traffic, decode)
    return good, _reject_result(traffic, len(good), reasons, cfg)


def _rate_text(traffic: SensorTraffic) -> str:
    return f"{len(traffic.events) / max(traffic.window_s, 1e-9):.1f}/s"


def _range_text(values: list[float], unit: str, fmt: str = ".1f") -> str:
    return f"{min(values):{fmt}}..{max(values):{fmt}} {unit}"


def _wheel_speeds(pairs: Iterable[tuple[int, int]], rev_bits: int, time_bits: int,
                  ticks_per_s: float, circumference_m: float) -> list[float]:
    """Speeds, m/s, between consecutive (revolutions, event ticks) readings that advanced."""
    speeds: list[float] = []
    prev: tuple[int, int] | None = None
    for revs, ticks in pairs:
        if prev is not None:
            d_rev = wrap_delta(revs, prev[0], rev_bits)
            d_t = wrap_delta(ticks, prev[1], time_bits) / ticks_per_s
            if d_rev == 0:
                speeds.append(0.0)
            elif d_t > 0.0:
                speeds.append(d_rev * circumference_m / d_t)
        prev = (revs, ticks)
    return speeds


def _speed_problem(speeds: list[float]) -> str | None:
    if speeds and max(speeds) > MAX_PLAUSIBLE_SPEED_MPS:
        return (f"wheel speed up to {max(speeds):.1f} m/s is implausible (> "
                f"{MAX_PLAUSIBLE_SPEED_MPS:g} m/s)")
    return None


_SPEED_HINT = ("check wheel_circumference_m in [vehicle] and that the sensor watches that wheel "
               "with one magnet")


def judge_power(traffic: SensorTraffic, ride: Any, cfg: Any) -> list[CheckResult]:
    """The crank power meter (Cycling Power Measurement 0x2A63)."""
    name = f"{label('power')} {traffic.spec.where}"
    good, problem = _decoded(traffic, cfg, lambda ev: cycling_power.decode_cycling_power(ev.payload))
    if problem is not None:
        return [problem]
    powers = [float(m.instantaneous_power_w) for _, m in good]
    hi = max(MAX_PLAUSIBLE_POWER_W, 2.0 * float(ride.rider.pmax_w))
    bad = [p for p in powers if not MIN_PLAUSIBLE_POWER_W <= p <= hi]
    if bad:
        return [CheckResult(name, NO_GO, f"power reading {bad[0]:.0f} W is outside "
                                         f"{MIN_PLAUSIBLE_POWER_W:g}..{hi:g} W",
                            "zero the power meter (its offset calibration) with the cranks unloaded")]
    wheel = [(m.wheel_revolutions, m.last_wheel_event_ticks) for _, m in good
             if m.wheel_revolutions is not None]
    speeds = _wheel_speeds(wheel, 32, 16, cycling_power.WHEEL_TICKS_PER_S,
                           ride.vehicle.wheel_circumference_m)
    problem = _speed_problem(speeds)
    if problem:
        return [CheckResult(name, NO_GO, problem, _SPEED_HINT)]
    crank = "with crank data" if any(m.crank_revolutions is not None for _, m in good) else "no crank data"
    return [CheckResult(name, GO, f"{_rate_text(traffic)}, power {_range_text(powers, 'W', '.0f')}, {crank}")]


def judge_speed(traffic: SensorTraffic, ride: Any, cfg: Any) -> list[CheckResult]:
    """The wheel-speed sensor (CSC Measurement 0x2A5B): must carry wheel data."""
    name = f"{label('speed')} {traffic.spec.where}"
    good, problem = _decoded(traffic, cfg, lambda ev: csc.decode_csc(ev.payload))
    if problem is not None:
        return [problem]
    wheel = [(m.wheel_revolutions, m.last_wheel_event_ticks) for _, m in good
             if m.wheel_revolutions is not None]
    if not wheel:
        return [CheckResult(name, NO_GO, "sends no wheel data (crank/cadence only?)",
                            "set the sensor to speed mode or mount it on the wheel")]
    speeds = _wheel_speeds(wheel, 32, 16, csc.TICKS_PER_S, ride.vehicle.wheel_circumference_m)
    problem = _speed_problem(speeds)
    if problem:
        return [CheckResult(name, NO_GO, problem, _SPEED_HINT)]
    shown = _range_text(speeds, "m/s") if speeds else "no speed yet"
    return [CheckResult(name, GO, f"{_rate_text(traffic)}, speed {shown}")]


def judge_heart_rate(traffic: SensorTraffic, ride: Any, cfg: Any) -> list[CheckResult]:
    """The heart-rate strap (Heart Rate Measurement 0x2A37); optional, so problems warn."""
    name = f"{label('heart_rate')} {traffic.spec.where}"
    good, problem = _decoded(traffic, cfg, lambda ev: heart_rate.decode_heart_rate(ev.payload))
    if problem is not None:
        return [problem]
    rates = [float(m.heart_rate_bpm) for _, m in good]
    lo, hi = HEART_RATE_RANGE_BPM
    if any(not lo <= r <= hi for r in rates):
        return [CheckResult(name, _fail_status(traffic),
                            f"heart rate {_range_text(rates, 'bpm', '.0f')} outside {lo:g}..{hi:g}",
                            "moisten the strap's electrodes and check it sits snugly")]
    return [CheckResult(name, GO, f"{_rate_text(traffic)}, {_range_text(rates, 'bpm', '.0f')}")]


def gps_utc_epoch_s(sample: Any) -> float | None:
    """UTC, s since 1970, of an RMC fix (``utc_date`` ddmmyy + ``utc_time`` hhmmss.ss), else None.

    NMEA 0183 RMC carries a two-digit year; years 00-79 are read as 2000-2079
    and 80-99 as 1980-1999 (common practice).
    """
    date, hms = getattr(sample, "utc_date", None), getattr(sample, "utc_time", None)
    if not date or not hms or len(date) != 6 or len(hms) < 6:
        return None
    try:
        day, month, yy = int(date[0:2]), int(date[2:4]), int(date[4:6])
        hour, minute = int(hms[0:2]), int(hms[2:4])
        second = float(hms[4:])
    except ValueError:
        return None
    year = 2000 + yy if yy < 80 else 1900 + yy
    if not (1 <= month <= 12 and 1 <= day <= 31 and hour < 24 and minute < 60 and 0 <= second < 61):
        return None
    return float(calendar.timegm((year, month, day, hour, minute, 0, 0, 0, 0))) + second


def _gps_samples(traffic: SensorTraffic) -> tuple[list[tuple[float, Any]], Counter]:
    good, reasons = _decode_all(traffic, lambda ev: nmea.decode_nmea(ev.payload, ev.t_s))
    return [(t, s) for t, s in good if s is not None], reasons


def latest_gps_time(traffic: SensorTraffic | None) -> tuple[float, float] | None:
    """(receive time t_s, GPS UTC s since 1970) of the last valid RMC fix, or None."""
    if traffic is None or not traffic.connected:
        return None
    samples, _ = _gps_samples(traffic)
    for t_s, s in reversed(samples):
        if s.valid:
            utc = gps_utc_epoch_s(s)
            if utc is not None:
                return t_s, utc
    return None


def judge_gps(traffic: SensorTraffic, ride: Any, cfg: Any) -> list[CheckResult]:
    """The GPS receiver (NMEA 0183 RMC/GGA/VTG): a valid fix with enough satellites."""
    name = f"{label('gps')} {traffic.spec.where}"
    link = _link_result(traffic, cfg)
    if link is not None:
        return [link]
    samples, reasons = _gps_samples(traffic)
    rej = _reject_result(traffic, len(samples), reasons, cfg)
    if rej is not None:
        return [rej]
    fix_status = NO_GO if cfg.require_gps_fix else WARN
    valid = [s for _, s in samples if s.valid]
    if not valid:
        return [CheckResult(name, fix_status, f"{_rate_text(traffic)}, no fix yet",
                            "give it open sky and a few minutes; the antenna must see out of the shell")]
    last = valid[-1]
    positions = [s for s in valid if s.latitude_deg is not None and s.longitude_deg is not None]
    if positions and all(abs(s.latitude_deg) < 1e-6 and abs(s.longitude_deg) < 1e-6 for s in positions):
        return [CheckResult(name, fix_status, "fix reports position 0, 0", "the receiver is not ready")]
    gga = [s for s in valid if s.satellites is not None]
    detail = f"{_rate_text(traffic)}, fix"
    if gga:
        sats, hdop = gga[-1].satellites, gga[-1].hdop
        detail += f", {sats} satellites"
        if hdop is not None:
            detail += f", HDOP {hdop:.1f}"
        if sats < cfg.min_satellites:
            return [CheckResult(name, fix_status, detail + f" (need >= {cfg.min_satellites})",
                                "wait for more satellites; keep the antenna clear of carbon and metal")]
        if hdop is not None and hdop > cfg.max_hdop:
            return [CheckResult(name, fix_status, detail + f" (need HDOP <= {cfg.max_hdop:g})",
                                "wait for a better fix")]
    if last.latitude_deg is not None and last.longitude_deg is not None:
        detail += f", {abs(last.latitude_deg):.5f}{'N' if last.latitude_deg >= 0 else 'S'} " \
                  f"{abs(last.longitude_deg):.5f}{'E' if last.longitude_deg >= 0 else 'W'}"
    return [CheckResult(name, GO, detail)]


def judge_mcu(traffic: SensorTraffic, ride: Any, cfg: Any) -> list[CheckResult]:
    """The sensor microcontroller (lsl1 lines): air data, hall-sensor wheel, buttons."""
    name = f"{label('mcu')} {traffic.spec.where}"
    good, problem = _decoded(traffic, cfg, lambda ev: mcu_line.decode_mcu_line(ev.payload))
    if problem is not None:
        return [problem]
    records = [r for _, r in good]
    air = [r for r in records if isinstance(r, mcu_line.McuAir)]
    wheel = [(r.revolutions, r.event_time_us) for r in records if isinstance(r, mcu_line.McuWheel)]
    out: list[CheckResult] = []
    parts = [_rate_text(traffic)]
    airspeeds = [r.airspeed_mps for r in air if r.airspeed_mps is not None]
    if ride.sensors.has_airspeed_probe:
        if not airspeeds:
            return [CheckResult(name, NO_GO, "no air-speed readings (has_airspeed_probe = true)",
                                "check the probe's tubes and the pressure sensor's wiring")]
        parts.append(f"air speed {_range_text(airspeeds, 'm/s')}")
        if max(abs(a) for a in airspeeds) > MAX_STANDING_AIRSPEED_MPS:
            out.append(CheckResult("air-speed probe", WARN,
                                   f"reads up to {max(abs(a) for a in airspeeds):.1f} m/s at the start",
                                   "shield the probe from wind and re-zero it; check for a kinked tube"))
    if wheel:
        speeds = _wheel_speeds(wheel, 32, 32, mcu_line.TICKS_PER_S, ride.vehicle.wheel_circumference_m)
        problem = _speed_problem(speeds)
        if problem:
            return [CheckResult(name, NO_GO, problem, _SPEED_HINT)]
        parts.append("wheel " + (_range_text(speeds, "m/s") if speeds else "no speed yet"))
    pressures = [r.pressure_pa for r in air if r.pressure_pa is not None]
    temps = [r.temperature_c for r in air if r.temperature_c is not None]
    if pressures:
        p_meas = pressures[-1]
        p_ride = ride.air.station_pressure_pa
        diff_pct = 100.0 * (p_meas - p_ride) / p_ride
        parts.append(f"pressure {p_meas:.0f} Pa")
        if abs(diff_pct) > cfg.max_pressure_diff_pct:
            out.append(CheckResult("air in the ride file", WARN,
                                   f"measured {p_meas:.0f} Pa, ride file {p_ride:.0f} Pa ({diff_pct:+.1f} %)",
                                   "update [air] pressure_pa (the prior air density uses it)"))
    if temps:
        t_meas = temps[-1]
        parts.append(f"{t_meas:.1f} deg C")
        if abs(t_meas - ride.air.temperature_c) > cfg.max_temperature_diff_c:
            out.append(CheckResult("air in the ride file", WARN,
                                   f"measured {t_meas:.1f} deg C, ride file {ride.air.temperature_c:.1f} deg C",
                                   "update [air] temperature_c"))
    return [CheckResult(name, GO, ", ".join(parts))] + out


def provides_wheel_speed(traffic: SensorTraffic) -> bool:
    """Whether this traffic carries wheel revolutions (CSC, Cycling Power or mcu hall sensor)."""
    role = traffic.spec.role
    decoders: dict[str, Callable[[bytes], bool]] = {
        "speed": lambda p: csc.decode_csc(p).wheel_revolutions is not None,
        "power": lambda p: cycling_power.decode_cycling_power(p).wheel_revolutions is not None,
        "mcu": lambda p: isinstance(mcu_line.decode_mcu_line(p), mcu_line.McuWheel),
    }
    has = decoders.get(role)
    if has is None or not traffic.connected:
        return False
    for ev in traffic.events:
        try:
            if has(ev.payload):
                return True
        except DecodeError:
            continue
    return False


JUDGES: dict[str, Callable[[SensorTraffic, Any, Any], list[CheckResult]]] = {
    "power": judge_power,
    "speed": judge_speed,
    "heart_rate": judge_heart_rate,
    "gps": judge_gps,
    "mcu": judge_mcu,
}
