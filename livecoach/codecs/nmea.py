"""NMEA 0183 GPS sentences RMC, GGA and VTG.

Source: NMEA 0183 (National Marine Electronics Association), sentence
formats RMC (recommended minimum: time, status, position, speed over ground
in knots, course, date), GGA (fix: time, position, quality, satellites,
HDOP, altitude) and VTG (course and speed over ground in knots and km/h).
The checksum is the XOR of every character between ``$`` and ``*``, written
as two hex digits. Latitude is ``ddmm.mmmm`` and longitude ``dddmm.mmmm``
with a hemisphere letter. One knot is 1852 m per hour (international
nautical mile, exact).

Decoding requires a checksum (every GPS receiver sends one); sentences of
other types decode to ``None`` (ignored, not an error).

The sentence is cut into its address field and data fields here, with the
same acceptance rules as ``pynmea2``'s parser (``$``, five word characters
for talker and type, a comma, data without ``*``, ``*`` and two hex
digits); the field split is checked against ``pynmea2`` in the tests. An
earlier version called ``pynmea2.parse`` on every sentence: at 10 Hz GPS
(two sentences per fix) that was the largest part of the decode cost per
event (benchmarks/pipeline_cost.py), for a split the codec then re-parsed
field by field anyway.
"""

from __future__ import annotations

import math
import re

from livecoach.codecs._errors import BAD_CHECKSUM, MALFORMED, NOT_UTF8, OUT_OF_RANGE, PayloadError
from livecoach.errors import EncodeError
from livecoach.stream.builders import positional_builder
from livecoach.stream.samples import GpsSample

#: m/s per knot (1852 m / 3600 s, exact).
MPS_PER_KNOT = 1852.0 / 3600.0
#: m/s per km/h.
MPS_PER_KMH = 1.0 / 3.6

SENTENCE_TYPES = ("RMC", "GGA", "VTG")

_HEX_DIGITS = frozenset("0123456789abcdefABCDEF")
#: Address field: talker (2) + sentence type (3), word characters as ``pynmea2`` accepts them.
_ADDRESS = re.compile(r"\w{5}\Z", re.ASCII)
#: Whitespace inside a sentence (fields are stripped only when there is any).
_SPACE = re.compile(r"\s")
#: Highest data-field index read (RMC mode indicator).
_MAX_FIELD = 11

#: GpsSample by position: t_s, valid, latitude_deg, longitude_deg, altitude_m,
#: speed_mps, course_deg, utc_time, utc_date, satellites, hdop.
_gps_sample = positional_builder(GpsSample)


def nmea_checksum(body: str) -> int:
    """NMEA 0183 checksum: XOR of the characters of ``body`` (between ``$`` and ``*``).

    The bytes are read as one little-endian integer and folded onto
    themselves (shifts of 64, 32, ..., 1 bytes), so byte 0 ends up as the
    XOR of them all: a few integer operations instead of one per character.
    """
    data = body.encode("ascii")
    v = int.from_bytes(data, "little")
    width = 1 << (len(data) - 1).bit_length() if data else 1   # bytes, a power of two
    while width > 1:
        width >>= 1
        v ^= v >> (8 * width)
    return v & 0xFF


def _float(text: str, what: str) -> float | None:
    """A plain decimal number (sign, digits, at most one point; no exponent,
    no ``inf``/``nan``, no ``_``), or None for an empty field."""
    if text == "":
        return None
    digits = text[1:] if text[0] in "+-" else text
    if not digits.replace(".", "", 1).isdigit():
        raise PayloadError(MALFORMED, f"{what} '{text}' is not a number")
    v = float(text)
    if not math.isfinite(v):
        raise PayloadError(MALFORMED, f"{what} '{text}' is not a finite number")
    return v


def _angle(value: str, hemisphere: str, degree_digits: int, what: str) -> float | None:
    """ddmm.mmmm / dddmm.mmmm + N/S/E/W -> signed degrees."""
    if value == "" and hemisphere == "":
        return None
    point = value.find(".")
    whole = point if point >= 0 else len(value)
    if whole != degree_digits + 2 or hemisphere not in (("N", "S") if degree_digits == 2 else ("E", "W")):
        # exactly degree_digits + 2 digits before the point: "001.0000000" is not 1 deg nor 1 min
        raise PayloadError(MALFORMED, f"{what} '{value},{hemisphere}' is not d{'d' * degree_digits}mm.mmmm,hemisphere")
    if value.replace(".", "", 1).isdigit():
        # The usual case, digits and at most one point: both parts are plain
        # unsigned numbers (what _float accepts), degrees >= 0, no sign.
        deg = float(value[:degree_digits])
        minutes = float(value[degree_digits:])
        if not minutes < 60.0:
            raise PayloadError(MALFORMED, f"{what} '{value}' has bad degrees or minutes")
    else:
        deg = _float(value[:degree_digits], what)
        minutes = _float(value[degree_digits:], what)
        if deg is None or minutes is None or deg < 0 or not 0.0 <= minutes < 60.0 or "-" in value:
            raise PayloadError(MALFORMED, f"{what} '{value}' has bad degrees or minutes")
    out = deg + minutes / 60.0
    limit = 90.0 if degree_digits == 2 else 180.0
    if out > limit:
        raise PayloadError(OUT_OF_RANGE, f"{what} {out:.6f} deg exceeds {limit:g}")
    return -out if hemisphere in ("S", "W") else out


def _speed(v: float | None, what: str) -> float | None:
    if v is not None and not 0.0 <= v < 300.0:
        raise PayloadError(OUT_OF_RANGE, f"{what} {v:g} m/s is not in 0..300")
    return v


def decode_nmea(line: bytes, t_s: float) -> GpsSample | None:
    """Decode one NMEA sentence (ASCII bytes, CR LF optional) received at ``t_s`` (s).

    Returns a :class:`GpsSample` for RMC, GGA and VTG (any talker ID), ``None``
    for other well-formed sentences. Raises :class:`livecoach.errors.DecodeError`
    for non-ASCII bytes, a missing or wrong checksum, or malformed fields.
    Speeds are converted to m/s; a void RMC/GGA/VTG gives ``valid=False``
    with no position.
    """
    try:
        text = line.decode("ascii").strip()
    except UnicodeDecodeError as exc:
        raise PayloadError(NOT_UTF8, f"non-ASCII byte 0x{line[exc.start]:02X} at offset {exc.start}") from None
    star = text.rfind("*")
    if not text.startswith("$") or star < 0 or len(text) - star != 3:
        raise PayloadError(MALFORMED, f"not a '$...*hh' NMEA sentence: '{text[:40]}'")
    hh = text[star + 1:]
    if not (hh[0] in _HEX_DIGITS and hh[1] in _HEX_DIGITS):
        raise PayloadError(MALFORMED, f"checksum '{hh}' is not two hex digits")
    want = int(hh, 16)
    body = text[1:star]
    got = nmea_checksum(body)
    if got != want:
        raise PayloadError(BAD_CHECKSUM, f"sentence says {want:02X}, the characters give {got:02X}")
    fields = body.split(",")
    address = fields[0]
    if len(fields) < 2 or not ((len(address) == 5 and address.isalnum()) or _ADDRESS.match(address)):
        raise PayloadError(MALFORMED, f"address field '{address[:12]}' is not talker + sentence type "
                                      "(five letters or digits) followed by a comma")
    if "*" in body:
        raise PayloadError(MALFORMED, "a '*' inside the sentence")
    kind = address[2:].upper()
    if kind not in SENTENCE_TYPES:
        return None
    data = fields[1:]
    if (" " in body or not body.isprintable()) and _SPACE.search(body):   # regex only when it may match
        data = [f.strip() for f in data]
    n_data = len(data)
    if n_data < _MAX_FIELD + 1:
        data += [""] * (_MAX_FIELD + 1 - n_data)   # absent optional fields read as empty

    # GpsSample fields by position (see _gps_sample); the checks run in the
    # order of the fields, so the first bad field is the one reported.
    if kind == "RMC":
        if n_data < 9:
            raise PayloadError(MALFORMED, f"RMC has {n_data} fields, needs at least 9")
        valid = data[1] == "A" and data[11] != "N"
        lat = _angle(data[2], data[3], 2, "RMC latitude")
        lon = _angle(data[4], data[5], 3, "RMC longitude")
        knots = _float(data[6], "RMC speed")
        if valid:
            speed = None if knots is None else knots * MPS_PER_KNOT
            if speed is not None and not 0.0 <= speed < 300.0:
                _speed(speed, "RMC speed")
            return _gps_sample(t_s, True, lat, lon, None, speed, _float(data[7], "RMC course"),
                               data[0] or None, data[8] or None, None, None)
        return _gps_sample(t_s, False, None, None, None, None, None,
                           data[0] or None, data[8] or None, None, None)
    if kind == "GGA":
        if n_data < 9:
            raise PayloadError(MALFORMED, f"GGA has {n_data} fields, needs at least 9")
        quality = _float(data[5], "GGA fix quality")
        valid = quality is not None and quality > 0
        lat = _angle(data[1], data[2], 2, "GGA latitude")
        lon = _angle(data[3], data[4], 3, "GGA longitude")
        sats = _float(data[6], "GGA satellites")
        if valid:
            return _gps_sample(t_s, True, lat, lon, _float(data[8], "GGA altitude"), None, None,
                               data[0] or None, None, None if sats is None else int(sats),
                               _float(data[7], "GGA HDOP"))
        return _gps_sample(t_s, False, None, None, None, None, None, data[0] or None, None,
                           None if sats is None else int(sats), _float(data[7], "GGA HDOP"))
    # VTG: true track, T, magnetic track, M, knots, N, km/h, K[, mode]
    if n_data < 8:
        raise PayloadError(MALFORMED, f"VTG has {n_data} fields, needs at least 8")
    kmh = _float(data[6], "VTG speed km/h")
    knots = _float(data[4], "VTG speed knots")
    speed = kmh * MPS_PER_KMH if kmh is not None else (None if knots is None else knots * MPS_PER_KNOT)
    mode = data[8]
    valid = speed is not None and mode != "N"
    return GpsSample(
        t_s=t_s,
        valid=valid,
        speed_mps=_speed(speed, "VTG speed") if valid else None,
        course_deg=_float(data[0], "VTG course") if valid else None,
    )


# --- encoders (simulator) ---------------------------------------------------

def _sentence(body: str) -> bytes:
    return f"${body}*{nmea_checksum(body):02X}".encode("ascii")


def _lat_text(lat_deg: float) -> tuple[str, str]:
    if not (math.isfinite(lat_deg) and -90.0 <= lat_deg <= 90.0):
        raise EncodeError(f"NMEA: latitude {lat_deg!r} deg is outside -90..90")
    a = abs(lat_deg)
    d = int(a)
    m = round((a - d) * 60.0, 5)
    if m >= 60.0:
        d, m = d + 1, 0.0
    return f"{d:02d}{m:08.5f}", ("S" if lat_deg < 0 else "N")


def _lon_text(lon_deg: float) -> tuple[str, str]:
    if not (math.isfinite(lon_deg) and -180.0 <= lon_deg <= 180.0):
        raise EncodeError(f"NMEA: longitude {lon_deg!r} deg is outside -180..180")
    a = abs(lon_deg)
    d = int(a)
    m = round((a - d) * 60.0, 5)
    if m >= 60.0:
        d, m = d + 1, 0.0
    return f"{d:03d}{m:08.5f}", ("W" if lon_deg < 0 else "E")


def utc_time_text(seconds_of_day: float) -> str:
    """``hhmmss.ss`` for a time of day in seconds (simulator helper)."""
    s = round(seconds_of_day % 86400.0, 2) % 86400.0
    h, rem = divmod(s, 3600.0)
    m, sec = divmod(rem, 60.0)
    return f"{int(h):02d}{int(m):02d}{sec:05.2f}"


def encode_rmc(
    *,
    utc_time: str,
    utc_date: str,
    latitude_deg: float,
    longitude_deg: float,
    speed_mps: float,
    course_deg: float,
    valid: bool = True,
    talker: str = "GP",
) -> bytes:
    """An RMC sentence (no CR LF) with mode indicator A (autonomous) or N when void."""
    if speed_mps < 0 or not math.isfinite(speed_mps):
        raise EncodeError(f"NMEA: speed {speed_mps!r} m/s must be finite and >= 0")
    lat, ns = _lat_text(latitude_deg)
    lon, ew = _lon_text(longitude_deg)
    knots = speed_mps / MPS_PER_KNOT
    body = (
        f"{talker}RMC,{utc_time},{'A' if valid else 'V'},{lat},{ns},{lon},{ew},"
        f"{knots:.3f},{course_deg % 360.0:.2f},{utc_date},,,{'A' if valid else 'N'}"
    )
    return _sentence(body)


def encode_gga(
    *,
    utc_time: str,
    latitude_deg: float,
    longitude_deg: float,
    altitude_m: float,
    fix_quality: int = 1,
    satellites: int = 8,
    hdop: float = 0.9,
    geoid_separation_m: float = 0.0,
    talker: str = "GP",
) -> bytes:
    """A GGA sentence (no CR LF); altitude above mean sea level in m."""
    lat, ns = _lat_text(latitude_deg)
    lon, ew = _lon_text(longitude_deg)
    body = (
        f"{talker}GGA,{utc_time},{lat},{ns},{lon},{ew},{int(fix_quality)},{int(satellites):02d},"
        f"{hdop:.1f},{altitude_m:.1f},M,{geoid_separation_m:.1f},M,,"
    )
    return _sentence(body)


def encode_vtg(*, course_deg: float, speed_mps: float, valid: bool = True, talker: str = "GP") -> bytes:
    """A VTG sentence (no CR LF): true course, speed in knots and km/h, mode A or N."""
    if speed_mps < 0 or not math.isfinite(speed_mps):
        raise EncodeError(f"NMEA: speed {speed_mps!r} m/s must be finite and >= 0")
    body = (
        f"{talker}VTG,{course_deg % 360.0:.2f},T,,M,{speed_mps / MPS_PER_KNOT:.3f},N,"
        f"{speed_mps / MPS_PER_KMH:.3f},K,{'A' if valid else 'N'}"
    )
    return _sentence(body)


__all__ = [
    "MPS_PER_KMH",
    "MPS_PER_KNOT",
    "decode_nmea",
    "encode_gga",
    "encode_rmc",
    "encode_vtg",
    "nmea_checksum",
    "utc_time_text",
]
