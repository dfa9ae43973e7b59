"""Cycling Power Measurement (Bluetooth SIG, service 0x1818, characteristic 0x2A63).

Source: Bluetooth SIG, *Cycling Power Service* specification v1.1 (CPS_v1.1)
and the GATT Specification Supplement, "Cycling Power Measurement". All
fields are little-endian; optional fields follow the instantaneous power in
the order of their flag bits:

==== ============================== ========= ====================================
bit  field (present when bit set)    format    unit
==== ============================== ========= ====================================
 0   Pedal Power Balance             uint8     1/2 %
 1   (Pedal Power Balance Reference: 0 unknown, 1 left)   flag only
 2   Accumulated Torque              uint16    1/32 N*m
 3   (Accumulated Torque Source: 0 wheel based, 1 crank based)  flag only
 4   Cumulative Wheel Revolutions    uint32    revolutions
     Last Wheel Event Time           uint16    1/2048 s
 5   Cumulative Crank Revolutions    uint16    revolutions
     Last Crank Event Time           uint16    1/1024 s
 6   Maximum / Minimum Force Magnitude   sint16 + sint16   N
 7   Maximum / Minimum Torque Magnitude  sint16 + sint16   1/32 N*m
 8   Maximum / Minimum Angle         uint12 + uint12 (3 bytes)   degrees
 9   Top Dead Spot Angle             uint16    degrees
10   Bottom Dead Spot Angle          uint16    degrees
11   Accumulated Energy              uint16    kJ
12   (Offset Compensation Indicator)  flag only
13-15 reserved for future use (must be 0)
==== ============================== ========= ====================================

The flags (uint16) come first, then Instantaneous Power (sint16, W). In the
3-byte extreme-angles field the first 12 bits (little-endian) are the
maximum angle and the last 12 bits the minimum angle.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass, replace

from livecoach.codecs._errors import RESERVED_BITS, TRUNCATED, WRONG_LENGTH, PayloadError
from livecoach.errors import EncodeError

#: 16-bit UUIDs (Bluetooth SIG Assigned Numbers).
SERVICE_UUID16 = 0x1818
CHARACTERISTIC_UUID16 = 0x2A63

# Flag bits (CPS v1.1, Cycling Power Measurement flags field).
FLAG_PEDAL_POWER_BALANCE = 1 << 0
FLAG_PEDAL_POWER_BALANCE_LEFT = 1 << 1
FLAG_ACCUMULATED_TORQUE = 1 << 2
FLAG_ACCUMULATED_TORQUE_CRANK = 1 << 3
FLAG_WHEEL_REVOLUTIONS = 1 << 4
FLAG_CRANK_REVOLUTIONS = 1 << 5
FLAG_EXTREME_FORCE = 1 << 6
FLAG_EXTREME_TORQUE = 1 << 7
FLAG_EXTREME_ANGLES = 1 << 8
FLAG_TOP_DEAD_SPOT = 1 << 9
FLAG_BOTTOM_DEAD_SPOT = 1 << 10
FLAG_ACCUMULATED_ENERGY = 1 << 11
FLAG_OFFSET_COMPENSATION = 1 << 12
RESERVED_MASK = 0xE000

#: Time base of the event times, ticks per second.
WHEEL_TICKS_PER_S = 2048
CRANK_TICKS_PER_S = 1024

# (flag bit, [(field name, struct code)]) in specification order. The extreme
# angles are handled apart (code "A": 3 bytes -> two 12-bit values).
_LAYOUT: tuple[tuple[int, tuple[tuple[str, str], ...]], ...] = (
    (FLAG_PEDAL_POWER_BALANCE, (("pedal_power_balance_raw", "B"),)),
    (FLAG_ACCUMULATED_TORQUE, (("accumulated_torque_raw", "H"),)),
    (FLAG_WHEEL_REVOLUTIONS, (("wheel_revolutions", "I"), ("last_wheel_event_ticks", "H"))),
    (FLAG_CRANK_REVOLUTIONS, (("crank_revolutions", "H"), ("last_crank_event_ticks", "H"))),
    (FLAG_EXTREME_FORCE, (("max_force_n", "h"), ("min_force_n", "h"))),
    (FLAG_EXTREME_TORQUE, (("max_torque_raw", "h"), ("min_torque_raw", "h"))),
    (FLAG_EXTREME_ANGLES, (("max_angle_deg", "A"), ("min_angle_deg", "A"))),
    (FLAG_TOP_DEAD_SPOT, (("top_dead_spot_angle_deg", "H"),)),
    (FLAG_BOTTOM_DEAD_SPOT, (("bottom_dead_spot_angle_deg", "H"),)),
    (FLAG_ACCUMULATED_ENERGY, (("accumulated_energy_kj", "H"),)),
)

_RANGES = {"B": (0, 0xFF), "H": (0, 0xFFFF), "I": (0, 0xFFFFFFFF), "h": (-0x8000, 0x7FFF), "A": (0, 0xFFF)}


@dataclass(frozen=True, slots=True)
class CyclingPowerMeasurement:
    """One Cycling Power Measurement, holding the raw protocol values.

    ``flags`` is the 16-bit flags field as sent; a field is ``None`` exactly
    when its presence bit is clear. Raw units: ``instantaneous_power_w`` W;
    ``pedal_power_balance_raw`` 1/2 %; ``accumulated_torque_raw`` and the
    torque magnitudes 1/32 N*m; ``last_wheel_event_ticks`` 1/2048 s;
    ``last_crank_event_ticks`` 1/1024 s; forces N; angles degrees;
    ``accumulated_energy_kj`` kJ. Counters and event times are the wrapped
    protocol values (uint32 wheel revolutions, uint16 everything else).
    """

    flags: int
    instantaneous_power_w: int
    pedal_power_balance_raw: int | None = None
    accumulated_torque_raw: int | None = None
    wheel_revolutions: int | None = None
    last_wheel_event_ticks: int | None = None
    crank_revolutions: int | None = None
    last_crank_event_ticks: int | None = None
    max_force_n: int | None = None
    min_force_n: int | None = None
    max_torque_raw: int | None = None
    min_torque_raw: int | None = None
    max_angle_deg: int | None = None
    min_angle_deg: int | None = None
    top_dead_spot_angle_deg: int | None = None
    bottom_dead_spot_angle_deg: int | None = None
    accumulated_energy_kj: int | None = None

    # --- SI views -----------------------------------------------------------
    @property
    def pedal_power_balance_pct(self) -> float | None:
        """Pedal power balance, % (raw / 2); of the left pedal when
        :attr:`pedal_power_balance_left` is true, else reference unknown."""
        raw = self.pedal_power_balance_raw
        return None if raw is None else raw / 2.0

    @property
    def pedal_power_balance_left(self) -> bool:
        """Flag bit 1: the balance refers to the left pedal."""
        return bool(self.flags & FLAG_PEDAL_POWER_BALANCE_LEFT)

    @property
    def accumulated_torque_nm(self) -> float | None:
        """Accumulated torque, N*m (raw / 32)."""
        raw = self.accumulated_torque_raw
        return None if raw is None else raw / 32.0

    @property
    def accumulated_torque_crank_based(self) -> bool:
        """Flag bit 3: accumulated torque is crank based (else wheel based)."""
        return bool(self.flags & FLAG_ACCUMULATED_TORQUE_CRANK)

    @property
    def offset_compensation(self) -> bool:
        """Flag bit 12: the sensor reports it is in offset compensation."""
        return bool(self.flags & FLAG_OFFSET_COMPENSATION)

    @property
    def last_wheel_event_time_s(self) -> float | None:
        """Last wheel event time, s (wrapped, period 32 s)."""
        t = self.last_wheel_event_ticks
        return None if t is None else t / WHEEL_TICKS_PER_S

    @property
    def last_crank_event_time_s(self) -> float | None:
        """Last crank event time, s (wrapped, period 64 s)."""
        t = self.last_crank_event_ticks
        return None if t is None else t / CRANK_TICKS_PER_S

    @property
    def max_torque_nm(self) -> float | None:
        """Maximum torque magnitude, N*m."""
        return None if self.max_torque_raw is None else self.max_torque_raw / 32.0

    @property
    def min_torque_nm(self) -> float | None:
        """Minimum torque magnitude, N*m."""
        return None if self.min_torque_raw is None else self.min_torque_raw / 32.0

    @property
    def accumulated_energy_j(self) -> float | None:
        """Accumulated energy, J."""
        e = self.accumulated_energy_kj
        return None if e is None else e * 1000.0

    def to_dict(self) -> dict[str, object]:
        """The SI view used by ``livecoach decode 2A63 --json`` (absent fields are None)."""
        return {
            "instantaneous_power_w": self.instantaneous_power_w,
            "pedal_power_balance_pct": self.pedal_power_balance_pct,
            "accumulated_torque_nm": self.accumulated_torque_nm,
            "wheel_revolutions": self.wheel_revolutions,
            "last_wheel_event_time_s": self.last_wheel_event_time_s,
            "crank_revolutions": self.crank_revolutions,
            "last_crank_event_time_s": self.last_crank_event_time_s,
        }

    # --- construction for the simulator -------------------------------------
    @classmethod
    def make(
        cls,
        power_w: float,
        *,
        wheel: tuple[int, int] | None = None,
        crank: tuple[int, int] | None = None,
        pedal_balance_pct: float | None = None,
        balance_left: bool = False,
        accumulated_torque_nm: float | None = None,
        torque_crank_based: bool = False,
        accumulated_energy_kj: int | None = None,
    ) -> "CyclingPowerMeasurement":
        """A measurement with the flags set from the fields given.

        ``power_w`` is rounded to whole watts. ``wheel`` = (cumulative wheel
        revolutions, last wheel event time in 1/2048 s ticks) and ``crank`` =
        (cumulative crank revolutions, last crank event time in 1/1024 s
        ticks) may be given unwrapped: they are wrapped to the protocol's
        uint32/uint16 ranges here. ``accumulated_torque_nm`` is wrapped to
        its uint16 range of 1/32 N*m (2048 N*m). Raises :class:`EncodeError`
        for a power outside the sint16 range.
        """
        power = int(round(power_w))
        if not -0x8000 <= power <= 0x7FFF:
            raise EncodeError(f"2A63: power {power_w!r} W is outside the sint16 range")
        flags = 0
        kw: dict[str, int | None] = {}
        if pedal_balance_pct is not None:
            flags |= FLAG_PEDAL_POWER_BALANCE | (FLAG_PEDAL_POWER_BALANCE_LEFT if balance_left else 0)
            raw = int(round(pedal_balance_pct * 2.0))
            if not 0 <= raw <= 0xFF:
                raise EncodeError(f"2A63: pedal balance {pedal_balance_pct!r} % is outside 0..127.5 %")
            kw["pedal_power_balance_raw"] = raw
        if accumulated_torque_nm is not None:
            flags |= FLAG_ACCUMULATED_TORQUE | (FLAG_ACCUMULATED_TORQUE_CRANK if torque_crank_based else 0)
            kw["accumulated_torque_raw"] = int(round(accumulated_torque_nm * 32.0)) & 0xFFFF
        if wheel is not None:
            flags |= FLAG_WHEEL_REVOLUTIONS
            kw["wheel_revolutions"] = int(wheel[0]) & 0xFFFFFFFF
            kw["last_wheel_event_ticks"] = int(wheel[1]) & 0xFFFF
        if crank is not None:
            flags |= FLAG_CRANK_REVOLUTIONS
            kw["crank_revolutions"] = int(crank[0]) & 0xFFFF
            kw["last_crank_event_ticks"] = int(crank[1]) & 0xFFFF
        if accumulated_energy_kj is not None:
            flags |= FLAG_ACCUMULATED_ENERGY
            kw["accumulated_energy_kj"] = int(accumulated_energy_kj) & 0xFFFF
        return cls(flags=flags, instantaneous_power_w=power, **kw)

    def with_flags(self, flags: int) -> "CyclingPowerMeasurement":
        """A copy with another flags value (for tests of inconsistent input)."""
        return replace(self, flags=flags)


_HEADER = struct.Struct("<Hh")
_PLANS: dict[int, tuple[struct.Struct, tuple[str, ...], int]] = {}


def _plan(flags: int) -> tuple[struct.Struct, tuple[str, ...], int]:
    """(struct for the optional fields, their names, index of the angle bytes or -1)."""
    plan = _PLANS.get(flags)
    if plan is not None:
        return plan
    codes = ["<"]
    names: list[str] = []
    angle_at = -1
    for bit, items in _LAYOUT:
        if not flags & bit:
            continue
        if bit == FLAG_EXTREME_ANGLES:
            angle_at = len(names)
            codes.append("3s")
            names.append("_angles")
            continue
        for name, code in items:
            codes.append(code)
            names.append(name)
    plan = (struct.Struct("".join(codes)), tuple(names), angle_at)
    _PLANS[flags] = plan
    return plan


def decode_cycling_power(payload: bytes) -> CyclingPowerMeasurement:
    """Decode a Cycling Power Measurement notification value.

    Raises :class:`livecoach.errors.DecodeError` (a :class:`PayloadError`) when
    the payload is shorter than its flags require (``truncated``), longer
    (``wrong length``), or has reserved flag bits 13-15 set.
    """
    n = len(payload)
    if n < 4:
        raise PayloadError(TRUNCATED, f"2A63 needs at least 4 bytes (flags + power), got {n}")
    flags, power = _HEADER.unpack_from(payload, 0)
    if flags & RESERVED_MASK:
        raise PayloadError(RESERVED_BITS, f"2A63 flags 0x{flags:04X} set reserved bits 13-15")
    st, names, angle_at = _plan(flags)
    need = 4 + st.size
    if n != need:
        kind = TRUNCATED if n < need else WRONG_LENGTH
        raise PayloadError(kind, f"2A63 flags 0x{flags:04X} need {need} bytes, got {n}")
    values = st.unpack_from(payload, 4)
    kw = dict(zip(names, values))
    if angle_at >= 0:
        raw3 = kw.pop("_angles")
        v = raw3[0] | (raw3[1] << 8) | (raw3[2] << 16)
        kw["max_angle_deg"] = v & 0xFFF
        kw["min_angle_deg"] = v >> 12
    return CyclingPowerMeasurement(flags=flags, instantaneous_power_w=power, **kw)


def encode_cycling_power(m: CyclingPowerMeasurement) -> bytes:
    """Encode a measurement to its notification bytes (inverse of :func:`decode_cycling_power`).

    Raises :class:`EncodeError` when a field's presence disagrees with its
    flag bit, a value is outside its protocol range, or reserved bits are set.
    """
    flags = m.flags
    if not 0 <= flags <= 0xFFFF or flags & RESERVED_MASK:
        raise EncodeError(f"2A63: flags 0x{flags:X} are not a uint16 with bits 13-15 clear")
    if not -0x8000 <= m.instantaneous_power_w <= 0x7FFF:
        raise EncodeError(f"2A63: instantaneous_power_w={m.instantaneous_power_w} is outside sint16")
    out = bytearray(_HEADER.pack(flags, m.instantaneous_power_w))
    for bit, items in _LAYOUT:
        present = bool(flags & bit)
        for name, code in items:
            value = getattr(m, name)
            if present != (value is not None):
                state = "set" if present else "clear"
                raise EncodeError(f"2A63: flag bit for {name} is {state} but the field is {value!r}")
            if value is None:
                continue
            lo, hi = _RANGES[code]
            if not isinstance(value, int) or not lo <= value <= hi:
                raise EncodeError(f"2A63: {name}={value!r} is outside {lo}..{hi}")
        if not present:
            continue
        if bit == FLAG_EXTREME_ANGLES:
            v = m.max_angle_deg | (m.min_angle_deg << 12)  # type: ignore[operator]
            out += v.to_bytes(3, "little")
        else:
            out += struct.pack("<" + "".join(c for _, c in items), *(getattr(m, nm) for nm, _ in items))
    return bytes(out)


__all__ = [
    "CHARACTERISTIC_UUID16",
    "CRANK_TICKS_PER_S",
    "CyclingPowerMeasurement",
    "SERVICE_UUID16",
    "WHEEL_TICKS_PER_S",
    "decode_cycling_power",
    "encode_cycling_power",
]
