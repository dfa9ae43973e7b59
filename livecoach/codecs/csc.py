"""CSC Measurement (Bluetooth SIG, Cycling Speed and Cadence service 0x1816,
characteristic 0x2A5B).

Source: Bluetooth SIG, *Cycling Speed and Cadence Service* specification
v1.0 (CSCS_SPEC_V10) and the GATT Specification Supplement, "CSC
Measurement". Little-endian:

====  ================================  ========  ===========
bit   field (present when bit set)      format    unit
====  ================================  ========  ===========
 -    Flags                             uint8
 0    Cumulative Wheel Revolutions      uint32    revolutions
      Last Wheel Event Time             uint16    1/1024 s
 1    Cumulative Crank Revolutions      uint16    revolutions
      Last Crank Event Time             uint16    1/1024 s
2-7   reserved for future use (must be 0)
====  ================================  ========  ===========
"""

from __future__ import annotations

import struct
from dataclasses import dataclass

from livecoach.codecs._errors import RESERVED_BITS, TRUNCATED, WRONG_LENGTH, PayloadError
from livecoach.errors import EncodeError

SERVICE_UUID16 = 0x1816
CHARACTERISTIC_UUID16 = 0x2A5B

FLAG_WHEEL_REVOLUTIONS = 1 << 0
FLAG_CRANK_REVOLUTIONS = 1 << 1
RESERVED_MASK = 0xFC

#: Time base of both event times, ticks per second.
TICKS_PER_S = 1024

_WHEEL = struct.Struct("<IH")
_CRANK = struct.Struct("<HH")
_BOTH = struct.Struct("<IHHH")


@dataclass(frozen=True, slots=True)
class CscMeasurement:
    """One CSC Measurement with the raw protocol values.

    ``wheel_revolutions`` uint32, ``last_wheel_event_ticks`` uint16 in
    1/1024 s, ``crank_revolutions`` uint16, ``last_crank_event_ticks`` uint16
    in 1/1024 s; a pair is ``None`` exactly when its flag bit is clear.
    """

    flags: int
    wheel_revolutions: int | None = None
    last_wheel_event_ticks: int | None = None
    crank_revolutions: int | None = None
    last_crank_event_ticks: int | None = None

    @property
    def last_wheel_event_time_s(self) -> float | None:
        """Last wheel event time, s (wrapped, period 64 s)."""
        t = self.last_wheel_event_ticks
        return None if t is None else t / TICKS_PER_S

    @property
    def last_crank_event_time_s(self) -> float | None:
        """Last crank event time, s (wrapped, period 64 s)."""
        t = self.last_crank_event_ticks
        return None if t is None else t / TICKS_PER_S

    def to_dict(self) -> dict[str, object]:
        """The SI view used by ``livecoach decode 2A5B --json``."""
        return {
            "wheel_revolutions": self.wheel_revolutions,
            "last_wheel_event_time_s": self.last_wheel_event_time_s,
            "crank_revolutions": self.crank_revolutions,
            "last_crank_event_time_s": self.last_crank_event_time_s,
        }

    @classmethod
    def make(
        cls, *, wheel: tuple[int, int] | None = None, crank: tuple[int, int] | None = None
    ) -> "CscMeasurement":
        """A measurement with flags set from the pairs given, each
        (cumulative revolutions, last event time in 1/1024 s ticks); values
        may be unwrapped and are wrapped to uint32/uint16 here."""
        flags = 0
        w = t_w = c = t_c = None
        if wheel is not None:
            flags |= FLAG_WHEEL_REVOLUTIONS
            w, t_w = int(wheel[0]) & 0xFFFFFFFF, int(wheel[1]) & 0xFFFF
        if crank is not None:
            flags |= FLAG_CRANK_REVOLUTIONS
            c, t_c = int(crank[0]) & 0xFFFF, int(crank[1]) & 0xFFFF
        return cls(flags, w, t_w, c, t_c)


def decode_csc(payload: bytes) -> CscMeasurement:
    """Decode a CSC Measurement notification value.

    Raises :class:`livecoach.errors.DecodeError` for an empty or short
    payload (``truncated``), extra bytes (``wrong length``) or reserved flag
    bits 2-7 set.
    """
    n = len(payload)
    if n < 1:
        raise PayloadError(TRUNCATED, "2A5B payload is empty (no flags byte)")
    flags = payload[0]
    if flags & RESERVED_MASK:
        raise PayloadError(RESERVED_BITS, f"2A5B flags 0x{flags:02X} set reserved bits 2-7")
    has_w = flags & FLAG_WHEEL_REVOLUTIONS
    has_c = flags & FLAG_CRANK_REVOLUTIONS
    need = 1 + (6 if has_w else 0) + (4 if has_c else 0)
    if n != need:
        kind = TRUNCATED if n < need else WRONG_LENGTH
        raise PayloadError(kind, f"2A5B flags 0x{flags:02X} need {need} bytes, got {n}")
    if has_w and has_c:
        w, tw, c, tc = _BOTH.unpack_from(payload, 1)
        return CscMeasurement(flags, w, tw, c, tc)
    if has_w:
        w, tw = _WHEEL.unpack_from(payload, 1)
        return CscMeasurement(flags, w, tw)
    if has_c:
        c, tc = _CRANK.unpack_from(payload, 1)
        return CscMeasurement(flags, None, None, c, tc)
    return CscMeasurement(flags)


def encode_csc(m: CscMeasurement) -> bytes:
    """Encode a CSC Measurement (inverse of :func:`decode_csc`).

    Raises :class:`EncodeError` when a pair's presence disagrees with its
    flag bit or a value is outside its protocol range.
    """
    flags = m.flags
    if not 0 <= flags <= 0xFF or flags & RESERVED_MASK:
        raise EncodeError(f"2A5B: flags 0x{flags:X} are not a uint8 with bits 2-7 clear")
    out = bytearray((flags,))
    for bit, names, st in (
        (FLAG_WHEEL_REVOLUTIONS, ("wheel_revolutions", "last_wheel_event_ticks"), _WHEEL),
        (FLAG_CRANK_REVOLUTIONS, ("crank_revolutions", "last_crank_event_ticks"), _CRANK),
    ):
        values = [getattr(m, nm) for nm in names]
        present = bool(flags & bit)
        for nm, v in zip(names, values):
            if present != (v is not None):
                raise EncodeError(f"2A5B: flag bit for {nm} is {'set' if present else 'clear'} but the field is {v!r}")
        if present:
            try:
                out += st.pack(*values)
            except struct.error as exc:
                raise EncodeError(f"2A5B: {names} = {values} out of range ({exc})") from None
    return bytes(out)


__all__ = ["CHARACTERISTIC_UUID16", "CscMeasurement", "SERVICE_UUID16", "TICKS_PER_S", "decode_csc", "encode_csc"]
