"""Heart Rate Measurement (0x2A37) codec.

Byte vectors written by hand from the Bluetooth SIG Heart Rate Service
specification v1.0 (HRS_SPEC_V10), "Heart Rate Measurement": uint8 flags
(bit 0 value format, bits 1-2 sensor contact, bit 3 energy expended, bit 4
RR intervals), the rate as uint8 or uint16, energy expended uint16 kJ, RR
intervals uint16 in 1/1024 s, little-endian.

Independent check: the heart-rate parser of ``pycycling`` (PyPI) on random
valid payloads; it reports sensor contact as ``bool(flags & 0x06)``.
"""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from pycycling.heart_rate_service import _parse_hr_measurement

from livecoach.codecs.heart_rate import HeartRateMeasurement, decode_heart_rate, encode_heart_rate
from livecoach.errors import DecodeError, EncodeError


def test_uint8_rate():
    m = decode_heart_rate(bytes([0x00,    # Flags: uint8 format, contact not supported
                                 0x48]))  # Heart Rate Measurement Value uint8 = 72 bpm
    assert m.heart_rate_bpm == 72 and m.sensor_contact is None and m.rr_intervals_s == ()
    assert m.energy_expended_kj is None


def test_uint16_rate():
    m = decode_heart_rate(bytes([0x01,          # Flags: bit 0 = uint16 format
                                 0x2C, 0x01]))  # value uint16 = 300 bpm
    assert m.heart_rate_bpm == 300


def test_contact_and_rr_intervals():
    payload = bytes([
        0x16,        # Flags: bit 1 contact detected, bit 2 contact supported, bit 4 RR present
        0x3C,        # 60 bpm (uint8)
        0x00, 0x04,  # RR-Interval uint16 = 1024/1024 s = 1.0 s
        0x00, 0x03,  # RR-Interval uint16 = 768/1024 s = 0.75 s
    ])
    m = decode_heart_rate(payload)
    assert m.sensor_contact is True
    assert m.rr_intervals_s == (1.0, 0.75)
    assert encode_heart_rate(m) == payload
    assert m.to_dict() == {"heart_rate_bpm": 60, "energy_expended_kj": None, "rr_intervals_s": [1.0, 0.75]}


def test_contact_supported_not_detected_and_energy():
    payload = bytes([0x0C,        # Flags: bit 2 contact supported (bit 1 clear: no contact), bit 3 energy
                     0x50,        # 80 bpm
                     0x10, 0x00])  # Energy Expended uint16 = 16 kJ
    m = decode_heart_rate(payload)
    assert m.sensor_contact is False and m.energy_expended_kj == 16


@pytest.mark.parametrize(
    "payload, reason",
    [
        (b"", "truncated"),
        (b"\x00", "truncated"),
        (bytes([0x01, 0x2C]), "truncated"),                  # uint16 rate cut short
        (bytes([0x08, 0x50, 0x10]), "truncated"),            # energy cut short
        (bytes([0x10, 0x3C, 0x00]), "wrong length"),         # odd RR bytes
        (bytes([0x00, 0x3C, 0x00]), "wrong length"),         # extra byte without RR flag
        (bytes([0x20, 0x3C]), "reserved bits"),
    ],
)
def test_bad_payloads(payload, reason):
    with pytest.raises(DecodeError, match=reason):
        decode_heart_rate(payload)


def test_encode_checks():
    with pytest.raises(EncodeError, match="does not fit"):
        encode_heart_rate(HeartRateMeasurement(0x00, 300))
    with pytest.raises(EncodeError, match="RR"):
        encode_heart_rate(HeartRateMeasurement(0x00, 60, None, (1024,)))
    assert HeartRateMeasurement.make(300).flags & 0x01


@st.composite
def measurements(draw):
    flags = draw(st.integers(0, 0x1F))
    bpm = draw(st.integers(0, 0xFFFF if flags & 1 else 0xFF))
    energy = draw(st.integers(0, 0xFFFF)) if flags & 0x08 else None
    rr = tuple(draw(st.lists(st.integers(0, 0xFFFF), max_size=9))) if flags & 0x10 else ()
    return HeartRateMeasurement(flags, bpm, energy, rr)


@settings(max_examples=200, deadline=None)
@given(measurements())
def test_round_trip(m):
    assert decode_heart_rate(encode_heart_rate(m)) == m


@settings(max_examples=400, deadline=None)
@given(st.binary(max_size=24))
def test_fuzz_only_decode_error(payload):
    try:
        m = decode_heart_rate(payload)
    except DecodeError:
        return
    assert encode_heart_rate(m) == payload


@settings(max_examples=150, deadline=None)
@given(measurements())
def test_agrees_with_pycycling(m):
    # Reference: pycycling 0.4 heart_rate_service parser.
    payload = encode_heart_rate(m)
    ours = decode_heart_rate(payload)
    ref = _parse_hr_measurement(bytearray(payload))
    assert ref.bpm == ours.heart_rate_bpm
    assert ref.energy_expended == ours.energy_expended_kj
    assert tuple(ref.rr_interval) == ours.rr_intervals_raw
    assert ref.sensor_contact == bool(ours.flags & 0x06)
