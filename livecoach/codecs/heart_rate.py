"""Heart Rate Measurement (Bluetooth SIG, Heart Rate service 0x180D,
characteristic 0x2A37).

Source: Bluetooth SIG, *Heart Rate Service* specification v1.0 (HRS_SPEC_V10)
and the GATT Specification Supplement, "Heart Rate Measurement".
Little-endian:

=====  ===========================================  ==========  ========
bit    meaning                                      format      unit
=====  ===========================================  ==========  ========
 -     Flags                                        uint8
 0     Heart Rate Value Format: 0 uint8, 1 uint16
 1     Sensor Contact detected (valid when bit 2 set)
 2     Sensor Contact feature supported
 3     Energy Expended present                      uint16      kJ
 4     RR-Interval present (one or more)            uint16 each 1/1024 s
5-7    reserved for future use (must be 0)
=====  ===========================================  ==========  ========

Field order: flags, heart rate value, energy expended, RR intervals.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass

from livecoach.codecs._errors import RESERVED_BITS, TRUNCATED, WRONG_LENGTH, PayloadError
from livecoach.errors import EncodeError

SERVICE_UUID16 = 0x180D
CHARACTERISTIC_UUID16 = 0x2A37

FLAG_UINT16 = 1 << 0
FLAG_CONTACT_DETECTED = 1 << 1
FLAG_CONTACT_SUPPORTED = 1 << 2
FLAG_ENERGY_EXPENDED = 1 << 3
FLAG_RR_INTERVALS = 1 << 4
RESERVED_MASK = 0xE0

#: RR-interval resolution, ticks per second.
RR_TICKS_PER_S = 1024


@dataclass(frozen=True, slots=True)
class HeartRateMeasurement:
    """One Heart Rate Measurement with the raw protocol values.

    ``heart_rate_bpm`` beats/min (uint8 or uint16 per flag bit 0);
    ``energy_expended_kj`` kJ or ``None`` (flag bit 3); ``rr_intervals_raw``
    in 1/1024 s (empty unless flag bit 4).
    """

    flags: int
    heart_rate_bpm: int
    energy_expended_kj: int | None = None
    rr_intervals_raw: tuple[int, ...] = ()

    @property
    def rr_intervals_s(self) -> tuple[float, ...]:
        """RR intervals, s (raw / 1024)."""
        return tuple(r / RR_TICKS_PER_S for r in self.rr_intervals_raw)

    @property
    def sensor_contact_supported(self) -> bool:
        return bool(self.flags & FLAG_CONTACT_SUPPORTED)

    @property
    def sensor_contact(self) -> bool | None:
        """True/False when the strap reports skin contact, ``None`` when unsupported."""
        if not self.flags & FLAG_CONTACT_SUPPORTED:
            return None
        return bool(self.flags & FLAG_CONTACT_DETECTED)

    def to_dict(self) -> dict[str, object]:
        """The SI view used by ``livecoach decode 2A37 --json``."""
        return {
            "heart_rate_bpm": self.heart_rate_bpm,
            "energy_expended_kj": self.energy_expended_kj,
            "rr_intervals_s": list(self.rr_intervals_s),
        }

    @classmethod
    def make(
        cls,
        heart_rate_bpm: float,
        *,
        rr_intervals_s: tuple[float, ...] = (),
        energy_expended_kj: int | None = None,
        contact: bool | None = None,
    ) -> "HeartRateMeasurement":
        """A measurement with flags set from the fields given: uint16 format
        only when the rate exceeds 255; ``contact`` None means "contact
        feature not supported"."""
        bpm = int(round(heart_rate_bpm))
        flags = FLAG_UINT16 if bpm > 0xFF else 0
        if contact is not None:
            flags |= FLAG_CONTACT_SUPPORTED | (FLAG_CONTACT_DETECTED if contact else 0)
        if energy_expended_kj is not None:
            flags |= FLAG_ENERGY_EXPENDED
        rr = tuple(int(round(r * RR_TICKS_PER_S)) for r in rr_intervals_s)
        if rr:
            flags |= FLAG_RR_INTERVALS
        return cls(flags, bpm, energy_expended_kj, rr)


def decode_heart_rate(payload: bytes) -> HeartRateMeasurement:
    """Decode a Heart Rate Measurement notification value.

    Raises :class:`livecoach.errors.DecodeError` when the payload is shorter
    than its flags require, has an odd number of RR-interval bytes or bytes
    left over without the RR flag (``wrong length``), or reserved bits 5-7 set.
    """
    n = len(payload)
    if n < 2:
        raise PayloadError(TRUNCATED, f"2A37 needs at least 2 bytes (flags + rate), got {n}")
    flags = payload[0]
    if flags & RESERVED_MASK:
        raise PayloadError(RESERVED_BITS, f"2A37 flags 0x{flags:02X} set reserved bits 5-7")
    pos = 1
    fixed = 1 + (2 if flags & FLAG_UINT16 else 1) + (2 if flags & FLAG_ENERGY_EXPENDED else 0)
    if n < fixed:
        raise PayloadError(TRUNCATED, f"2A37 flags 0x{flags:02X} need at least {fixed} bytes, got {n}")
    if flags & FLAG_UINT16:
        bpm = payload[1] | (payload[2] << 8)
        pos = 3
    else:
        bpm = payload[1]
        pos = 2
    energy = None
    if flags & FLAG_ENERGY_EXPENDED:
        energy = payload[pos] | (payload[pos + 1] << 8)
        pos += 2
    rest = n - pos
    rr: tuple[int, ...] = ()
    if flags & FLAG_RR_INTERVALS:
        if rest % 2:
            raise PayloadError(WRONG_LENGTH, f"2A37 RR intervals take {rest} bytes, not a multiple of 2")
        rr = struct.unpack_from(f"<{rest // 2}H", payload, pos)
    elif rest:
        raise PayloadError(WRONG_LENGTH, f"2A37 flags 0x{flags:02X} need {pos} bytes, got {n}")
    return HeartRateMeasurement(flags, bpm, energy, rr)


def encode_heart_rate(m: HeartRateMeasurement) -> bytes:
    """Encode a Heart Rate Measurement (inverse of :func:`decode_heart_rate`).

    Raises :class:`EncodeError` for a rate that does not fit the chosen
    format, fields disagreeing with the flags, or values out of range.
    """
    flags = m.flags
    if not 0 <= flags <= 0xFF or flags & RESERVED_MASK:
        raise EncodeError(f"2A37: flags 0x{flags:X} are not a uint8 with bits 5-7 clear")
    hi = 0xFFFF if flags & FLAG_UINT16 else 0xFF
    if not 0 <= m.heart_rate_bpm <= hi:
        raise EncodeError(f"2A37: heart_rate_bpm={m.heart_rate_bpm} does not fit 0..{hi}")
    out = bytearray((flags,))
    out += m.heart_rate_bpm.to_bytes(2 if flags & FLAG_UINT16 else 1, "little")
    has_e = bool(flags & FLAG_ENERGY_EXPENDED)
    if has_e != (m.energy_expended_kj is not None):
        raise EncodeError(f"2A37: energy flag is {'set' if has_e else 'clear'} but energy is {m.energy_expended_kj!r}")
    if has_e:
        if not 0 <= m.energy_expended_kj <= 0xFFFF:  # type: ignore[operator]
            raise EncodeError(f"2A37: energy_expended_kj={m.energy_expended_kj} is outside uint16")
        out += m.energy_expended_kj.to_bytes(2, "little")  # type: ignore[union-attr]
    if m.rr_intervals_raw and not flags & FLAG_RR_INTERVALS:
        raise EncodeError("2A37: RR intervals given but the RR flag is clear")
    for r in m.rr_intervals_raw:
        if not 0 <= r <= 0xFFFF:
            raise EncodeError(f"2A37: RR interval {r}/1024 s is outside uint16")
        out += r.to_bytes(2, "little")
    return bytes(out)


__all__ = [
    "CHARACTERISTIC_UUID16",
    "HeartRateMeasurement",
    "RR_TICKS_PER_S",
    "SERVICE_UUID16",
    "decode_heart_rate",
    "encode_heart_rate",
]
