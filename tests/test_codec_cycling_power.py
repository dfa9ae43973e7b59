"""Cycling Power Measurement (0x2A63) codec.

Byte vectors are written out by hand from the Bluetooth SIG Cycling Power
Service specification v1.1 (CPS_v1.1), section "Cycling Power Measurement",
and the GATT Specification Supplement field formats; each byte group is
labelled with its specification field. All values little-endian.

Independent check: ``pycycling`` (PyPI), a general-purpose BLE fitness-sensor
library whose parsers run without a device, on random valid payloads. Its
known differences are accounted for: it reads Instantaneous Power and the
extreme force/torque magnitudes as unsigned (CPS v1.1 says sint16) and skips
the 3-byte extreme angles without returning them; it does not check lengths,
so only valid payloads are compared.
"""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from pycycling.cycling_power_service import _parse_cycling_power_measurement

from livecoach.codecs._errors import RESERVED_BITS, TRUNCATED, WRONG_LENGTH
from livecoach.codecs.cycling_power import (
    CyclingPowerMeasurement,
    decode_cycling_power,
    encode_cycling_power,
)
from livecoach.errors import DecodeError, EncodeError


def test_wheel_and_crank_vector():
    # CPS v1.1 Cycling Power Measurement:
    payload = bytes([
        0x30, 0x00,              # Flags uint16: bit 4 wheel rev data, bit 5 crank rev data
        0xFA, 0x00,              # Instantaneous Power sint16 = 250 W
        0xE8, 0x03, 0x00, 0x00,  # Cumulative Wheel Revolutions uint32 = 1000
        0x88, 0x13,              # Last Wheel Event Time uint16 = 5000 (1/2048 s)
        0x2C, 0x01,              # Cumulative Crank Revolutions uint16 = 300
        0x00, 0x0C,              # Last Crank Event Time uint16 = 3072 (1/1024 s)
    ])
    m = decode_cycling_power(payload)
    assert m.flags == 0x0030
    assert m.instantaneous_power_w == 250
    assert m.wheel_revolutions == 1000
    assert m.last_wheel_event_ticks == 5000
    assert m.last_wheel_event_time_s == pytest.approx(5000 / 2048)
    assert m.crank_revolutions == 300
    assert m.last_crank_event_time_s == pytest.approx(3.0)
    assert m.pedal_power_balance_pct is None and m.accumulated_torque_nm is None
    assert encode_cycling_power(m) == payload


def test_negative_power_is_signed():
    # Flags 0x0000, Instantaneous Power sint16 0xFFFB = -5 W (CPS v1.1: sint16)
    m = decode_cycling_power(bytes([0x00, 0x00, 0xFB, 0xFF]))
    assert m.instantaneous_power_w == -5


def test_every_optional_field_in_spec_order():
    payload = bytes([
        0xFF, 0x1F,              # Flags: bits 0-12 set (all fields + balance ref left, torque crank based, offset comp.)
        0x2C, 0x01,              # Instantaneous Power = 300 W
        0x65,                    # Pedal Power Balance uint8 = 101 (1/2 %) = 50.5 %
        0x90, 0x01,              # Accumulated Torque uint16 = 400 (1/32 N*m) = 12.5 N*m
        0x04, 0x03, 0x02, 0x01,  # Cumulative Wheel Revolutions uint32 = 0x01020304
        0x00, 0x08,              # Last Wheel Event Time = 2048 (1/2048 s) = 1.0 s
        0x10, 0x00,              # Cumulative Crank Revolutions = 16
        0x00, 0x04,              # Last Crank Event Time = 1024 (1/1024 s) = 1.0 s
        0x2C, 0x01,              # Maximum Force Magnitude sint16 = 300 N
        0xCE, 0xFF,              # Minimum Force Magnitude sint16 = -50 N
        0x40, 0x06,              # Maximum Torque Magnitude sint16 = 1600 (1/32 N*m) = 50 N*m
        0xE0, 0xFF,              # Minimum Torque Magnitude sint16 = -32 = -1 N*m
        0xB4, 0xE0, 0x10,        # Extreme Angles: uint12 max = 0x0B4 = 180 deg, uint12 min = 0x10E = 270 deg
        0x0A, 0x00,              # Top Dead Spot Angle uint16 = 10 deg
        0xBE, 0x00,              # Bottom Dead Spot Angle uint16 = 190 deg
        0x2A, 0x00,              # Accumulated Energy uint16 = 42 kJ
    ])
    m = decode_cycling_power(payload)
    assert m.instantaneous_power_w == 300
    assert m.pedal_power_balance_pct == 50.5 and m.pedal_power_balance_left
    assert m.accumulated_torque_nm == 12.5 and m.accumulated_torque_crank_based
    assert m.wheel_revolutions == 0x01020304 and m.last_wheel_event_time_s == 1.0
    assert m.crank_revolutions == 16 and m.last_crank_event_time_s == 1.0
    assert (m.max_force_n, m.min_force_n) == (300, -50)
    assert (m.max_torque_nm, m.min_torque_nm) == (50.0, -1.0)
    assert (m.max_angle_deg, m.min_angle_deg) == (180, 270)
    assert (m.top_dead_spot_angle_deg, m.bottom_dead_spot_angle_deg) == (10, 190)
    assert m.accumulated_energy_kj == 42 and m.accumulated_energy_j == 42000.0
    assert m.offset_compensation
    assert encode_cycling_power(m) == payload


def test_balance_and_torque_without_reference_bits():
    payload = bytes([0x05, 0x00,   # Flags: bit 0 balance present, bit 2 accumulated torque present
                     0x64, 0x00,   # 100 W
                     0x50,         # balance 80/2 = 40 %
                     0x20, 0x00])  # accumulated torque 32/32 = 1 N*m
    m = decode_cycling_power(payload)
    assert m.pedal_power_balance_pct == 40.0 and not m.pedal_power_balance_left
    assert m.accumulated_torque_nm == 1.0 and not m.accumulated_torque_crank_based


@pytest.mark.parametrize(
    "payload, kind",
    [
        (b"", TRUNCATED),
        (bytes([0x00, 0x00, 0xFA]), TRUNCATED),
        (bytes([0x10, 0x00, 0xFA, 0x00, 0xE8, 0x03, 0x00, 0x00]), TRUNCATED),   # wheel data cut short
        (bytes([0x00, 0x00, 0xFA, 0x00, 0x01]), WRONG_LENGTH),                  # a byte too many
        (bytes([0x00, 0x20, 0xFA, 0x00]), RESERVED_BITS),                        # bit 13 reserved
        (bytes([0x00, 0x80, 0xFA, 0x00]), RESERVED_BITS),                        # bit 15 reserved
    ],
)
def test_bad_payloads_raise_decode_error_with_reason(payload, kind):
    with pytest.raises(DecodeError, match=kind) as info:
        decode_cycling_power(payload)
    assert info.value.kind == kind
    assert "2A63" in str(info.value)


def test_make_sets_flags_and_wraps_counters():
    m = CyclingPowerMeasurement.make(
        412.4, wheel=(2**32 + 5, 65536 + 7), crank=(65536 + 3, 70000), pedal_balance_pct=49.5,
        accumulated_torque_nm=3000.0, accumulated_energy_kj=12,
    )
    assert m.flags == 0x0001 | 0x0004 | 0x0010 | 0x0020 | 0x0800
    assert m.instantaneous_power_w == 412
    assert (m.wheel_revolutions, m.last_wheel_event_ticks) == (5, 7)
    assert (m.crank_revolutions, m.last_crank_event_ticks) == (3, 70000 - 65536)
    assert m.accumulated_torque_raw == (3000 * 32) % 65536
    assert decode_cycling_power(encode_cycling_power(m)) == m


def test_encode_rejects_inconsistent_or_out_of_range():
    base = CyclingPowerMeasurement.make(100, wheel=(1, 2))
    with pytest.raises(EncodeError, match="wheel_revolutions"):
        encode_cycling_power(base.with_flags(0))
    with pytest.raises(EncodeError, match="reserved|bits 13-15"):
        encode_cycling_power(base.with_flags(base.flags | 0x4000))
    with pytest.raises(EncodeError, match="sint16"):
        CyclingPowerMeasurement.make(40000)
    with pytest.raises(EncodeError, match="outside"):
        encode_cycling_power(CyclingPowerMeasurement(0x0020, 10, crank_revolutions=70000, last_crank_event_ticks=1))


u8 = st.integers(0, 0xFF)
u16 = st.integers(0, 0xFFFF)
s16 = st.integers(-0x8000, 0x7FFF)
u12 = st.integers(0, 0xFFF)


@st.composite
def measurements(draw):
    flags = draw(st.integers(0, 0x1FFF))
    kw = {}
    if flags & 0x0001:
        kw["pedal_power_balance_raw"] = draw(u8)
    if flags & 0x0004:
        kw["accumulated_torque_raw"] = draw(u16)
    if flags & 0x0010:
        kw["wheel_revolutions"] = draw(st.integers(0, 0xFFFFFFFF))
        kw["last_wheel_event_ticks"] = draw(u16)
    if flags & 0x0020:
        kw["crank_revolutions"] = draw(u16)
        kw["last_crank_event_ticks"] = draw(u16)
    if flags & 0x0040:
        kw["max_force_n"], kw["min_force_n"] = draw(s16), draw(s16)
    if flags & 0x0080:
        kw["max_torque_raw"], kw["min_torque_raw"] = draw(s16), draw(s16)
    if flags & 0x0100:
        kw["max_angle_deg"], kw["min_angle_deg"] = draw(u12), draw(u12)
    if flags & 0x0200:
        kw["top_dead_spot_angle_deg"] = draw(u16)
    if flags & 0x0400:
        kw["bottom_dead_spot_angle_deg"] = draw(u16)
    if flags & 0x0800:
        kw["accumulated_energy_kj"] = draw(u16)
    return CyclingPowerMeasurement(flags=flags, instantaneous_power_w=draw(s16), **kw)


@settings(max_examples=300, deadline=None)
@given(measurements())
def test_round_trip_encode_decode(m):
    payload = encode_cycling_power(m)
    assert decode_cycling_power(payload) == m
    assert encode_cycling_power(decode_cycling_power(payload)) == payload


@settings(max_examples=500, deadline=None)
@given(st.binary(max_size=48))
def test_fuzz_only_decode_error(payload):
    try:
        m = decode_cycling_power(payload)
    except DecodeError:
        return
    assert encode_cycling_power(m) == payload


def _u16(v):
    return None if v is None else v & 0xFFFF


@settings(max_examples=200, deadline=None)
@given(measurements())
def test_agrees_with_pycycling(m):
    # Reference: pycycling 0.4 cycling_power_service parser (see module docstring).
    payload = encode_cycling_power(m)
    ours = decode_cycling_power(payload)
    ref = _parse_cycling_power_measurement(bytearray(payload))
    assert ref.instantaneous_power == ours.instantaneous_power_w & 0xFFFF
    assert ref.pedal_power_balance == ours.pedal_power_balance_raw
    assert ref.accumulated_torque == ours.accumulated_torque_raw
    assert ref.cumulative_wheel_revs == ours.wheel_revolutions
    assert ref.last_wheel_event_time == ours.last_wheel_event_ticks
    assert ref.cumulative_crank_revs == ours.crank_revolutions
    assert ref.last_crank_event_time == ours.last_crank_event_ticks
    assert ref.maximum_force_magnitude == _u16(ours.max_force_n)
    assert ref.minimum_force_magnitude == _u16(ours.min_force_n)
    assert ref.maximum_torque_magnitude == _u16(ours.max_torque_raw)
    assert ref.minimum_torque_magnitude == _u16(ours.min_torque_raw)
    assert ref.top_dead_spot_angle == ours.top_dead_spot_angle_deg
    assert ref.bottom_dead_spot_angle == ours.bottom_dead_spot_angle_deg
    assert ref.accumulated_energy == ours.accumulated_energy_kj
