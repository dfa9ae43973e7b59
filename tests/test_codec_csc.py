"""CSC Measurement (0x2A5B) codec.

Byte vectors written by hand from the Bluetooth SIG Cycling Speed and
Cadence Service specification v1.0 (CSCS_SPEC_V10), "CSC Measurement":
uint8 flags, then wheel data (uint32 revolutions, uint16 event time in
1/1024 s) and crank data (uint16 revolutions, uint16 event time in 1/1024 s),
little-endian.
"""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from pycycling.cycling_speed_cadence_service import _parse_csc_measurement

from livecoach.codecs.csc import CscMeasurement, decode_csc, encode_csc
from livecoach.errors import DecodeError, EncodeError


def test_wheel_and_crank_vector():
    payload = bytes([
        0x03,                    # Flags: bit 0 wheel data, bit 1 crank data
        0x45, 0x23, 0x01, 0x00,  # Cumulative Wheel Revolutions uint32 = 0x00012345 = 74565
        0xFF, 0xFF,              # Last Wheel Event Time uint16 = 65535 (1/1024 s)
        0x02, 0x01,              # Cumulative Crank Revolutions uint16 = 258
        0x00, 0x04,              # Last Crank Event Time uint16 = 1024 = 1.0 s
    ])
    m = decode_csc(payload)
    assert (m.wheel_revolutions, m.last_wheel_event_ticks) == (74565, 65535)
    assert m.last_wheel_event_time_s == pytest.approx(65535 / 1024)
    assert (m.crank_revolutions, m.last_crank_event_time_s) == (258, 1.0)
    assert encode_csc(m) == payload
    assert m.to_dict() == {
        "wheel_revolutions": 74565,
        "last_wheel_event_time_s": 65535 / 1024,
        "crank_revolutions": 258,
        "last_crank_event_time_s": 1.0,
    }


def test_wheel_only_and_crank_only_and_empty():
    # Flags 0x01: wheel only; revs 10, event 512 (0.5 s)
    m = decode_csc(bytes([0x01, 0x0A, 0x00, 0x00, 0x00, 0x00, 0x02]))
    assert m.wheel_revolutions == 10 and m.last_wheel_event_time_s == 0.5 and m.crank_revolutions is None
    # Flags 0x02: crank only; revs 7, event 2048 (2 s)
    m = decode_csc(bytes([0x02, 0x07, 0x00, 0x00, 0x08]))
    assert m.crank_revolutions == 7 and m.last_crank_event_time_s == 2.0 and m.wheel_revolutions is None
    # Flags 0x00: no data (legal per the flags)
    assert decode_csc(b"\x00") == CscMeasurement(0)


@pytest.mark.parametrize(
    "payload, reason",
    [
        (b"", "truncated"),
        (bytes([0x01, 0x0A, 0x00, 0x00]), "truncated"),
        (bytes([0x02, 0x07, 0x00, 0x00, 0x08, 0x00]), "wrong length"),
        (bytes([0x04]), "reserved bits"),
        (bytes([0x81, 0x0A, 0x00, 0x00, 0x00, 0x00, 0x02]), "reserved bits"),
    ],
)
def test_bad_payloads(payload, reason):
    with pytest.raises(DecodeError, match=reason):
        decode_csc(payload)


def test_encode_checks_flags():
    with pytest.raises(EncodeError, match="wheel_revolutions"):
        encode_csc(CscMeasurement(0x00, wheel_revolutions=1, last_wheel_event_ticks=1))
    with pytest.raises(EncodeError, match="out of range"):
        encode_csc(CscMeasurement(0x02, crank_revolutions=70000, last_crank_event_ticks=1))


@st.composite
def measurements(draw):
    wheel = draw(st.none() | st.tuples(st.integers(0, 2**32 - 1), st.integers(0, 0xFFFF)))
    crank = draw(st.none() | st.tuples(st.integers(0, 0xFFFF), st.integers(0, 0xFFFF)))
    return CscMeasurement.make(wheel=wheel, crank=crank)


@settings(max_examples=200, deadline=None)
@given(measurements())
def test_round_trip(m):
    assert decode_csc(encode_csc(m)) == m


@settings(max_examples=400, deadline=None)
@given(st.binary(max_size=16))
def test_fuzz_only_decode_error(payload):
    try:
        m = decode_csc(payload)
    except DecodeError:
        return
    assert encode_csc(m) == payload


@settings(max_examples=150, deadline=None)
@given(measurements())
def test_agrees_with_pycycling(m):
    # Reference: pycycling 0.4 cycling_speed_cadence_service parser.
    payload = encode_csc(m)
    ours = decode_csc(payload)
    ref = _parse_csc_measurement(bytearray(payload))
    assert ref.cumulative_wheel_revs == ours.wheel_revolutions
    assert ref.last_wheel_event_time == ours.last_wheel_event_ticks
    assert ref.cumulative_crank_revs == ours.crank_revolutions
    assert ref.last_crank_event_time == ours.last_crank_event_ticks
