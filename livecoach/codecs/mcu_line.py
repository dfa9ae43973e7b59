"""The livecoach sensor line protocol ("lsl1"), spoken by the sensor microcontroller.

One record per line, ASCII, terminated by LF (a CR before it is tolerated)::

    lsl1 <kind> <t_us> [<key>=<value> ...] #<crc>

* ``lsl1``: protocol name and version 1.
* ``kind``: ``hlo`` (hello, sent at boot), ``air`` (air data), ``whl``
  (wheel hall sensor), ``btn`` (button press).
* ``t_us``: the microcontroller's microsecond clock when the line was
  composed, unsigned 32-bit decimal (wraps after 2**32 us, about 71.6 min).
* fields, separated by single spaces, each ``key=value``; numbers are plain
  decimals (``-12.5``, no exponent); words are 1-32 characters of
  ``A-Z a-z 0-9 _ . -``.
* ``#<crc>``: four upper-case hex digits, the CRC-16/CCITT-FALSE (polynomial
  0x1021, initial value 0xFFFF, no reflection, no final XOR; check value of
  ``"123456789"`` is 0x29B1) of every byte before the single space that
  precedes ``#``.

Fields by kind (all optional ones may be left out, at least one must be present):

=====  ===========================================================  ===========
kind   fields                                                       units
=====  ===========================================================  ===========
hlo    ``fw`` firmware word (required)                              -
air    ``as`` air speed along the vehicle axis, ``p`` static        m/s, Pa,
       pressure, ``t`` air temperature, ``rh`` relative humidity    deg C, %
whl    ``n`` cumulative hall-sensor revolutions (uint32), ``e``      -, us
       time of the last revolution on the ``t_us`` clock (uint32)
btn    ``id`` which button (``start``, ``mark``, ...)               -
=====  ===========================================================  ===========

The full description with example lines and the microcontroller-side CRC
code is in ``hardware_notes/mcu_line_protocol.md``.
"""

from __future__ import annotations

import binascii
import math
import re
from dataclasses import dataclass

from livecoach.codecs._errors import (
    BAD_CHECKSUM,
    MALFORMED,
    NOT_UTF8,
    OUT_OF_RANGE,
    UNSUPPORTED,
    PayloadError,
)
from livecoach.errors import EncodeError
from livecoach.stream.builders import positional_builder

PREFIX = "lsl1"
_U32 = 0xFFFFFFFF
#: Microcontroller clock ticks per second (the ``t_us`` and ``e`` fields).
TICKS_PER_S = 1_000_000

_NUMBER = re.compile(r"-?[0-9]+(\.[0-9]+)?\Z")
_WORD = re.compile(r"[A-Za-z0-9_.\-]{1,32}\Z")
_UINT = re.compile(r"[0-9]{1,10}\Z")
_HEX4 = re.compile(rb"[0-9A-F]{4}\Z")


def crc16_ccitt_false(data: bytes) -> int:
    """CRC-16/CCITT-FALSE of ``data`` (poly 0x1021, init 0xFFFF, unreflected, xorout 0)."""
    return binascii.crc_hqx(data, 0xFFFF)


@dataclass(frozen=True, slots=True)
class McuHello:
    """The microcontroller (re)started: counters and clock start afresh."""

    t_us: int
    firmware: str


@dataclass(frozen=True, slots=True)
class McuAir:
    """Air data: air speed m/s, static pressure Pa, temperature deg C, humidity % (any may be None)."""

    t_us: int
    airspeed_mps: float | None = None
    pressure_pa: float | None = None
    temperature_c: float | None = None
    relative_humidity_pct: float | None = None


@dataclass(frozen=True, slots=True)
class McuWheel:
    """Hall sensor: cumulative revolutions (uint32) and the time of the last one (us, uint32)."""

    t_us: int
    revolutions: int
    event_time_us: int


@dataclass(frozen=True, slots=True)
class McuButton:
    """A button press; ``button`` names it (e.g. ``start`` or ``mark``)."""

    t_us: int
    button: str


McuRecord = McuHello | McuAir | McuWheel | McuButton

# By position (the decoder makes one per line): McuAir(t_us, as, p, t, rh), McuWheel(t_us, n, e).
_mcu_air = positional_builder(McuAir)
_mcu_wheel = positional_builder(McuWheel)

# key -> (attribute, lo, hi, decimals when encoding)
_AIR_KEYS = {
    "as": ("airspeed_mps", -50.0, 200.0, 3),
    "p": ("pressure_pa", 10_000.0, 120_000.0, 1),
    "t": ("temperature_c", -60.0, 80.0, 2),
    "rh": ("relative_humidity_pct", 0.0, 100.0, 1),
}
_AIR_INDEX = {key: (i, lo, hi) for i, (key, (_, lo, hi, _d)) in enumerate(_AIR_KEYS.items())}
_KINDS = {"hlo": ("fw",), "air": tuple(_AIR_KEYS), "whl": ("n", "e"), "btn": ("id",)}


def _fields(items: list[str], kind: str) -> dict[str, str]:
    out: dict[str, str] = {}
    allowed = _KINDS[kind]
    for item in items:
        key, sep, value = item.partition("=")
        if not sep or not value:
            raise PayloadError(MALFORMED, f"'{item}' in a {kind} record is not key=value")
        if key not in allowed:
            raise PayloadError(MALFORMED, f"unknown key '{key}' in a {kind} record (allowed: {', '.join(allowed)})")
        if key in out:
            raise PayloadError(MALFORMED, f"key '{key}' repeated in a {kind} record")
        out[key] = value
    return out


def _uint32(value: str, what: str) -> int:
    if not _UINT.match(value):
        raise PayloadError(MALFORMED, f"{what} '{value}' is not an unsigned decimal integer")
    n = int(value)
    if n > _U32:
        raise PayloadError(OUT_OF_RANGE, f"{what} {n} exceeds 32 bits")
    return n


def decode_mcu_line(line: bytes) -> McuRecord:
    """Decode one lsl1 line (without the LF; a trailing CR is ignored).

    Raises :class:`livecoach.errors.DecodeError` (a :class:`PayloadError`)
    naming what was wrong: missing or bad checksum, non-ASCII bytes (with the
    offset), a wrong prefix, unknown kind or key, a malformed or
    out-of-range number.
    """
    if line.endswith(b"\r"):
        line = line[:-1]
    cut = line.rfind(b" #")
    if cut < 0:
        raise PayloadError(MALFORMED, "no ' #<crc>' checksum at the end of the line")
    body, crc_text = line[:cut], line[cut + 2:]
    if not _HEX4.match(crc_text):
        raise PayloadError(MALFORMED, f"checksum {crc_text!r} is not four upper-case hex digits")
    want = int(crc_text, 16)
    got = crc16_ccitt_false(body)
    if got != want:
        raise PayloadError(BAD_CHECKSUM, f"line says {want:04X}, the bytes give {got:04X}")
    try:
        text = body.decode("ascii")
    except UnicodeDecodeError as exc:
        raise PayloadError(NOT_UTF8, f"non-ASCII byte 0x{body[exc.start]:02X} at offset {exc.start}") from None
    parts = text.split(" ")
    if len(parts) < 3 or parts[0] != PREFIX:
        raise PayloadError(MALFORMED, f"expected '{PREFIX} <kind> <t_us> ...', got '{text[:40]}'")
    kind = parts[1]
    if kind not in _KINDS:
        raise PayloadError(UNSUPPORTED, f"unknown record kind '{kind}' (known: {', '.join(_KINDS)})")
    t_us = _uint32(parts[2], "time t_us")
    f = _fields(parts[3:], kind)
    if kind == "air":
        if not f:
            raise PayloadError(MALFORMED, "an air record needs at least one of as, p, t, rh")
        values: list[float | None] = [None, None, None, None]
        for key, raw in f.items():
            index, lo, hi = _AIR_INDEX[key]
            if not _NUMBER.match(raw):
                raise PayloadError(MALFORMED, f"air {key}='{raw}' is not a decimal number")
            v = float(raw)
            if not lo <= v <= hi:
                raise PayloadError(OUT_OF_RANGE, f"air {key}={raw} is outside {lo:g}..{hi:g}")
            values[index] = v
        return _mcu_air(t_us, *values)
    if kind == "whl":
        if "n" not in f or "e" not in f:
            raise PayloadError(MALFORMED, "a whl record needs both n and e")
        return _mcu_wheel(t_us, _uint32(f["n"], "whl n"), _uint32(f["e"], "whl e"))
    key = "fw" if kind == "hlo" else "id"
    word = f.get(key)
    if word is None:
        raise PayloadError(MALFORMED, f"a {kind} record needs {key}=")
    if not _WORD.match(word):
        raise PayloadError(MALFORMED, f"{kind} {key}='{word}' is not a 1-32 character word")
    return McuHello(t_us, word) if kind == "hlo" else McuButton(t_us, word)


def _check_u32(value: int, what: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not 0 <= value <= _U32:
        raise EncodeError(f"lsl1: {what}={value!r} is not an unsigned 32-bit integer")
    return value


def encode_mcu_line(record: McuRecord) -> bytes:
    """Encode a record as one lsl1 line, without the line terminator.

    Air values are written with fixed decimals (as 3, p 1, t 2, rh 1), so they
    come back rounded to those. Raises :class:`EncodeError` for values the
    protocol cannot carry (out of range, not finite, a bad word).
    """
    t_us = _check_u32(record.t_us, "t_us")
    if isinstance(record, McuAir):
        items = []
        for key, (attr, lo, hi, decimals) in _AIR_KEYS.items():
            v = getattr(record, attr)
            if v is None:
                continue
            if not (math.isfinite(v) and lo <= v <= hi):
                raise EncodeError(f"lsl1: air {attr}={v!r} is outside {lo:g}..{hi:g}")
            text = f"{v:.{decimals}f}"
            if text.startswith("-") and float(text) == 0.0:
                text = text[1:]
            items.append(f"{key}={text}")
        if not items:
            raise EncodeError("lsl1: an air record needs at least one value")
        body = f"{PREFIX} air {t_us} " + " ".join(items)
    elif isinstance(record, McuWheel):
        n = _check_u32(record.revolutions, "revolutions")
        e = _check_u32(record.event_time_us, "event_time_us")
        body = f"{PREFIX} whl {t_us} n={n} e={e}"
    elif isinstance(record, (McuHello, McuButton)):
        kind, key, word = (
            ("hlo", "fw", record.firmware) if isinstance(record, McuHello) else ("btn", "id", record.button)
        )
        if not _WORD.match(word):
            raise EncodeError(f"lsl1: {kind} {key}={word!r} is not a 1-32 character word of A-Z a-z 0-9 _ . -")
        body = f"{PREFIX} {kind} {t_us} {key}={word}"
    else:
        raise EncodeError(f"lsl1: cannot encode {type(record).__name__}")
    raw = body.encode("ascii")
    return raw + b" #" + f"{crc16_ccitt_false(raw):04X}".encode("ascii")


__all__ = [
    "McuAir",
    "McuButton",
    "McuHello",
    "McuRecord",
    "McuWheel",
    "PREFIX",
    "TICKS_PER_S",
    "crc16_ccitt_false",
    "decode_mcu_line",
    "encode_mcu_line",
]
