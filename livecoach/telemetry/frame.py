"""The telemetry frame: our own compact binary layout (pure encode/decode).

Wire format: ``COBS(body + CRC) + 0x00``. COBS (Cheshire & Baker 1999, see
:mod:`.cobs`) removes every zero byte so the single 0x00 delimits frames; the
CRC is CRC-16/CCITT-FALSE (see :mod:`.crc16`) of ``body``, appended most
significant byte first. All multi-byte fields of ``body`` are little-endian.

Header (8 bytes, every frame)::

    offset size  field
    0      1     version            1
    1      1     kind               1 state, 2 notice
    2      2     seq                frame counter of the sender, wraps at 65536
    4      4     t_ms               module clock of the state or notice, ms (mod 2**32)

State body (kind 1), after the header::

    1  phase            0 waiting, 1 runup, 2 trap, 3 done
    1  flags            bit0 speed stale, bit1 power stale, bit2 drag alarm active
    2  speed            0.01 m/s             (0xFFFF: unknown)
    2  power            W                    (0xFFFF: unknown)
    2  target power     W
    2  planned speed    0.01 m/s
    4  distance         0.1 m, signed        (-2**31: unknown)
    4  distance to trap 0.1 m, signed
    2  predicted trap speed   0.01 m/s
    2  planned trap speed     0.01 m/s
    2  measured trap speed    0.01 m/s
    4  W' balance       J, signed
    4  CdA              m^2, IEEE 754 float32 (NaN: unknown)
    4  CdA sd           m^2, float32
    4  Crr              -, float32
    4  Crr sd           -, float32
    1  cadence          rpm                  (0xFF: unknown)
    1  heart rate       1/min                (0xFF: unknown)
    2  air speed        0.01 m/s
    1  n = cue length, then n bytes of UTF-8 cue name (n <= 24)
    1  m = sensor count, then m * 3 bytes: channel code, flags (bit0 link up,
       bit1 stale), age in 0.1 s (0xFE: 25.4 s or more, 0xFF: never seen)

Notice body (kind 2): 1 byte notice kind (1 cue, 2 alarm, 3 warning,
4 phase, 0 other), 1 byte n, n bytes of UTF-8 text (n <= 120).

A full state frame is about 70-100 bytes on the wire, so 2 frames per second
fit easily in a 9600 baud link. Out-of-range values are clamped to the
field's range; values are rounded to the field's resolution.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass

from livecoach.errors import FrameError
from livecoach.pipeline.state import (
    NOTICE_ALARM,
    NOTICE_CUE,
    NOTICE_PHASE,
    NOTICE_WARNING,
    PHASE_DONE,
    PHASE_RUNUP,
    PHASE_TRAP,
    PHASE_WAITING,
    LiveState,
    Notice,
)
from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_MCU, CH_POWER
from livecoach.telemetry.cobs import cobs_decode, cobs_encode
from livecoach.telemetry.crc16 import crc16_ccitt_false

VERSION = 1
KIND_STATE = 1
KIND_NOTICE = 2

MAX_CUE_BYTES = 24
MAX_TEXT_BYTES = 120
MAX_SENSORS = 12

_HEADER = struct.Struct("<BBHI")
_STATE = struct.Struct("<BBHHHHiiHHHiffffBBH")
_SENSOR = struct.Struct("<BBB")
_CRC = struct.Struct(">H")

_U16_NONE = 0xFFFF
_U8_NONE = 0xFF
_I32_NONE = -(2**31)

PHASE_CODES = {PHASE_WAITING: 0, PHASE_RUNUP: 1, PHASE_TRAP: 2, PHASE_DONE: 3}
_PHASE_NAMES = {v: k for k, v in PHASE_CODES.items()}

#: Sensor channel codes on the radio; 0 stands for any other channel.
CHANNEL_CODES = {CH_POWER: 1, CH_CSC: 2, CH_HEART_RATE: 3, CH_GPS: 4, CH_MCU: 5, "csv": 6}
_CHANNEL_NAMES = {v: k for k, v in CHANNEL_CODES.items()}
OTHER_CHANNEL = "other"

NOTICE_CODES = {NOTICE_CUE: 1, NOTICE_ALARM: 2, NOTICE_WARNING: 3, NOTICE_PHASE: 4}
_NOTICE_NAMES = {v: k for k, v in NOTICE_CODES.items()}
OTHER_NOTICE = "other"


@dataclass(frozen=True, slots=True)
class LinkHealth:
    """One sensor's health as sent on the radio (``age_s`` in s, 0.1 s steps)."""

    channel: str
    link_up: bool
    stale: bool
    age_s: float | None


@dataclass(frozen=True, slots=True)
class StateFrame:
    """A decoded state frame (SI units; ``None`` = unknown)."""

    seq: int
    t_s: float
    phase: str = PHASE_WAITING
    speed_mps: float | None = None
    speed_stale: bool = True
    power_w: float | None = None
    power_stale: bool = True
    target_power_w: float | None = None
    planned_speed_mps: float | None = None
    distance_m: float | None = None
    distance_to_trap_m: float | None = None
    predicted_trap_speed_mps: float | None = None
    planned_trap_speed_mps: float | None = None
    trap_speed_mps: float | None = None
    w_prime_balance_j: float | None = None
    cda_m2: float | None = None
    cda_sd_m2: float | None = None
    crr: float | None = None
    crr_sd: float | None = None
    cadence_rpm: float | None = None
    heart_rate_bpm: float | None = None
    airspeed_mps: float | None = None
    cue: str | None = None
    alarm_active: bool = False
    sensors: tuple[LinkHealth, ...] = ()


@dataclass(frozen=True, slots=True)
class NoticeFrame:
    """A decoded notice frame: a cue change, alarm, warning or phase change."""

    seq: int
    t_s: float
    kind: str
    text: str


Frame = StateFrame | NoticeFrame


# ----------------------------------------------------------------- quantisers
def _q(value: float | None, scale: float, lo: int, hi: int, none: int) -> int:
    if value is None or not math.isfinite(value):
        return none
    return min(hi, max(lo, round(value * scale)))


def _u16(value: float | None, scale: float = 1.0) -> int:
    return _q(value, scale, 0, 0xFFFE, _U16_NONE)


def _u8(value: float | None, scale: float = 1.0) -> int:
    return _q(value, scale, 0, 0xFE, _U8_NONE)


def _i32(value: float | None, scale: float = 1.0) -> int:
    return _q(value, scale, -(2**31) + 1, 2**31 - 1, _I32_NONE)


#: Largest finite IEEE 754 binary32 value, (2 - 2**-23) * 2**127.
_F32_MAX = 3.4028234663852886e38


def _f32(value: float | None) -> float:
    """A value for a float32 field: NaN for unknown, clamped to the finite
    float32 range (a clamp below it would change values float32 can hold)."""
    if value is None or not math.isfinite(value):
        return math.nan
    return min(_F32_MAX, max(-_F32_MAX, value))


def _un(q: int, none: int, scale: float = 1.0) -> float | None:
    return None if q == none else q / scale


def _fn(value: float) -> float | None:
    return None if math.isnan(value) else value


def _utf8_prefix(text: str, limit: int) -> bytes:
    raw = text.encode("utf-8")
    if len(raw) <= limit:
        return raw
    return raw[:limit].decode("utf-8", errors="ignore").encode("utf-8")


# ------------------------------------------------------------------ building
def state_frame(state: LiveState, seq: int) -> StateFrame:
    """The frame for ``state`` (values not yet quantised; :func:`encode_body` does that)."""
    sensors = tuple(
        LinkHealth(h.channel, h.link_up, h.stale, h.age_s) for h in state.sensors[:MAX_SENSORS]
    )
    return StateFrame(
        seq=seq & 0xFFFF,
        t_s=state.t_s,
        phase=state.phase,
        speed_mps=state.speed_mps,
        speed_stale=state.speed_stale,
        power_w=state.power_w,
        power_stale=state.power_stale,
        target_power_w=state.target_power_w,
        planned_speed_mps=state.planned_speed_mps,
        distance_m=state.distance_m,
        distance_to_trap_m=state.distance_to_trap_m,
        predicted_trap_speed_mps=state.predicted_trap_speed_mps,
        planned_trap_speed_mps=state.planned_trap_speed_mps,
        trap_speed_mps=state.trap_speed_mps,
        w_prime_balance_j=state.w_prime_balance_j,
        cda_m2=state.cda_m2,
        cda_sd_m2=state.cda_sd_m2,
        crr=state.crr,
        crr_sd=state.crr_sd,
        cadence_rpm=state.cadence_rpm,
        heart_rate_bpm=state.heart_rate_bpm,
        airspeed_mps=state.airspeed_mps,
        cue=state.cue or None,
        alarm_active=bool(state.alarms),
        sensors=sensors,
    )


def notice_frame(notice: Notice, seq: int) -> NoticeFrame:
    """The frame for ``notice`` (its text is cut to 120 UTF-8 bytes when sent)."""
    return NoticeFrame(seq=seq & 0xFFFF, t_s=notice.t_s, kind=notice.kind, text=notice.text)


# ------------------------------------------------------------------ encoding
def _t_ms(t_s: float) -> int:
    if not math.isfinite(t_s):
        return 0
    return round(t_s * 1000.0) % (2**32)


def encode_body(frame: Frame) -> bytes:
    """The frame's bytes before CRC and COBS (layout in the module docstring)."""
    if isinstance(frame, StateFrame):
        head = _HEADER.pack(VERSION, KIND_STATE, frame.seq & 0xFFFF, _t_ms(frame.t_s))
        flags = (1 if frame.speed_stale else 0) | (2 if frame.power_stale else 0) | (
            4 if frame.alarm_active else 0
        )
        fixed = _STATE.pack(
            PHASE_CODES.get(frame.phase, 0xFF),
            flags,
            _u16(frame.speed_mps, 100.0),
            _u16(frame.power_w),
            _u16(frame.target_power_w),
            _u16(frame.planned_speed_mps, 100.0),
            _i32(frame.distance_m, 10.0),
            _i32(frame.distance_to_trap_m, 10.0),
            _u16(frame.predicted_trap_speed_mps, 100.0),
            _u16(frame.planned_trap_speed_mps, 100.0),
            _u16(frame.trap_speed_mps, 100.0),
            _i32(frame.w_prime_balance_j),
            _f32(frame.cda_m2),
            _f32(frame.cda_sd_m2),
            _f32(frame.crr),
            _f32(frame.crr_sd),
            _u8(frame.cadence_rpm),
            _u8(frame.heart_rate_bpm),
            _u16(frame.airspeed_mps, 100.0),
        )
        cue = _utf8_prefix(frame.cue or "", MAX_CUE_BYTES)
        sensors = frame.sensors[:MAX_SENSORS]
        parts = [head, fixed, bytes([len(cue)]), cue, bytes([len(sensors)])]
        for h in sensors:
            parts.append(_SENSOR.pack(
                CHANNEL_CODES.get(h.channel, 0),
                (1 if h.link_up else 0) | (2 if h.stale else 0),
                _u8(h.age_s, 10.0),
            ))
        return b"".join(parts)
    if isinstance(frame, NoticeFrame):
        head = _HEADER.pack(VERSION, KIND_NOTICE, frame.seq & 0xFFFF, _t_ms(frame.t_s))
        text = _utf8_prefix(frame.text, MAX_TEXT_BYTES)
        return head + bytes([NOTICE_CODES.get(frame.kind, 0), len(text)]) + text
    raise TypeError(f"not a telemetry frame: {type(frame).__name__}")


def pack_frame(frame: Frame) -> bytes:
    """The wire bytes of ``frame``: COBS(body + CRC) followed by the 0x00 delimiter."""
    body = encode_body(frame)
    return cobs_encode(body + _CRC.pack(crc16_ccitt_false(body))) + b"\x00"


# ------------------------------------------------------------------ decoding
def check_crc(raw: bytes) -> bytes:
    """``raw`` = body + CRC (after COBS decoding) -> body, or :class:`FrameError`."""
    if len(raw) < _HEADER.size + _CRC.size:
        raise FrameError(f"frame of {len(raw)} bytes is shorter than the smallest frame "
                         f"({_HEADER.size + _CRC.size} bytes)")
    body, (sent,) = raw[:-2], _CRC.unpack(raw[-2:])
    got = crc16_ccitt_false(body)
    if got != sent:
        raise FrameError(f"CRC mismatch: frame says 0x{sent:04X}, bytes give 0x{got:04X}")
    return body


def _text(raw: bytes, where: str) -> str:
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise FrameError(f"{where}: not UTF-8 at byte {exc.start}") from None


def parse_body(body: bytes) -> Frame:
    """Parse a frame body (CRC already checked). Raises :class:`FrameError`
    naming the byte offset when the layout is wrong."""
    if len(body) < _HEADER.size:
        raise FrameError(f"frame of {len(body)} bytes has no complete header")
    version, kind, seq, t_ms = _HEADER.unpack_from(body, 0)
    if version != VERSION:
        raise FrameError(f"unknown frame version {version} at offset 0 (this is version {VERSION})")
    t_s = t_ms / 1000.0
    pos = _HEADER.size
    if kind == KIND_NOTICE:
        if len(body) < pos + 2:
            raise FrameError(f"notice frame of {len(body)} bytes is truncated at offset {len(body)}")
        code, n = body[pos], body[pos + 1]
        pos += 2
        if len(body) != pos + n:
            raise FrameError(f"notice frame: text length byte says {n} but {len(body) - pos} "
                             f"bytes follow at offset {pos}")
        text = _text(body[pos:], f"notice text at offset {pos}")
        return NoticeFrame(seq, t_s, _NOTICE_NAMES.get(code, OTHER_NOTICE), text)
    if kind != KIND_STATE:
        raise FrameError(f"unknown frame kind {kind} at offset 1")
    if len(body) < pos + _STATE.size + 2:
        raise FrameError(f"state frame of {len(body)} bytes is truncated (needs at least "
                         f"{pos + _STATE.size + 2})")
    (phase, flags, speed, power, target, planned, dist, to_trap, pred, plan_trap, trap,
     wbal, cda, cda_sd, crr, crr_sd, cad, hr, air) = _STATE.unpack_from(body, pos)
    pos += _STATE.size
    if phase not in _PHASE_NAMES:
        raise FrameError(f"unknown phase code {phase} at offset {_HEADER.size}")
    n = body[pos]
    pos += 1
    if n > MAX_CUE_BYTES or pos + n + 1 > len(body):
        raise FrameError(f"cue length {n} at offset {pos - 1} runs past the frame")
    cue = _text(body[pos:pos + n], f"cue at offset {pos}") or None
    pos += n
    m = body[pos]
    pos += 1
    if m > MAX_SENSORS or len(body) != pos + m * _SENSOR.size:
        raise FrameError(f"sensor count {m} at offset {pos - 1} does not match the "
                         f"{len(body) - pos} bytes that follow")
    sensors = []
    for _ in range(m):
        code, sflags, age = _SENSOR.unpack_from(body, pos)
        pos += _SENSOR.size
        sensors.append(LinkHealth(_CHANNEL_NAMES.get(code, OTHER_CHANNEL), bool(sflags & 1),
                                  bool(sflags & 2), _un(age, _U8_NONE, 10.0)))
    return StateFrame(
        seq=seq,
        t_s=t_s,
        phase=_PHASE_NAMES[phase],
        speed_mps=_un(speed, _U16_NONE, 100.0),
        speed_stale=bool(flags & 1),
        power_w=_un(power, _U16_NONE),
        power_stale=bool(flags & 2),
        target_power_w=_un(target, _U16_NONE),
        planned_speed_mps=_un(planned, _U16_NONE, 100.0),
        distance_m=_un(dist, _I32_NONE, 10.0),
        distance_to_trap_m=_un(to_trap, _I32_NONE, 10.0),
        predicted_trap_speed_mps=_un(pred, _U16_NONE, 100.0),
        planned_trap_speed_mps=_un(plan_trap, _U16_NONE, 100.0),
        trap_speed_mps=_un(trap, _U16_NONE, 100.0),
        w_prime_balance_j=_un(wbal, _I32_NONE),
        cda_m2=_fn(cda),
        cda_sd_m2=_fn(cda_sd),
        crr=_fn(crr),
        crr_sd=_fn(crr_sd),
        cadence_rpm=_un(cad, _U8_NONE),
        heart_rate_bpm=_un(hr, _U8_NONE),
        airspeed_mps=_un(air, _U16_NONE, 100.0),
        cue=cue,
        alarm_active=bool(flags & 4),
        sensors=tuple(sensors),
    )


def unpack_packet(packet: bytes) -> Frame:
    """One packet as received between two 0x00 delimiters -> frame, or :class:`FrameError`."""
    return parse_body(check_crc(cobs_decode(packet)))


def frame_to_dict(frame: Frame) -> dict:
    """A JSON-able dict of a decoded frame (``type`` is "state" or "notice")."""
    if isinstance(frame, NoticeFrame):
        return {"type": "notice", "seq": frame.seq, "t_s": frame.t_s, "kind": frame.kind,
                "text": frame.text}
    out = {"type": "state"}
    for name in StateFrame.__slots__:
        value = getattr(frame, name)
        if name == "sensors":
            value = [{"channel": h.channel, "link_up": h.link_up, "stale": h.stale,
                      "age_s": h.age_s} for h in value]
        out[name] = value
    return out
