"""NMEA 0183 RMC/GGA/VTG decoding (through pynmea2) and the simulator's encoders.

Reference sentences: the classic NMEA 0183 examples widely reproduced in
NMEA reference texts (position 48 deg 07.038' N, 11 deg 31.000' E; from
memory, checksums confirmed by pynmea2's own check). Independent reference
for the encoders: ``pynmea2`` parsing (PyPI) of what they write.
"""

from __future__ import annotations

import pynmea2
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.codecs.nmea import (
    MPS_PER_KNOT,
    decode_nmea,
    encode_gga,
    encode_rmc,
    encode_vtg,
    nmea_checksum,
    utc_time_text,
)
from livecoach.errors import DecodeError

RMC = b"$GPRMC,123519,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W*6A"
GGA = b"$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47"
VTG = b"$GPVTG,054.7,T,034.4,M,005.5,N,010.2,K*48"


def test_reference_rmc():
    s = decode_nmea(RMC, 12.5)
    assert s.valid and s.t_s == 12.5
    assert s.latitude_deg == pytest.approx(48 + 7.038 / 60, abs=1e-9)
    assert s.longitude_deg == pytest.approx(11 + 31.0 / 60, abs=1e-9)
    assert s.speed_mps == pytest.approx(22.4 * 1852 / 3600)   # knot = 1852 m/h (exact)
    assert s.course_deg == 84.4
    assert (s.utc_time, s.utc_date) == ("123519", "230394")


def test_reference_gga():
    s = decode_nmea(GGA, 1.0)
    assert s.valid and s.altitude_m == 545.4 and s.satellites == 8 and s.hdop == 0.9
    assert s.latitude_deg == pytest.approx(48.1173)


def test_reference_vtg_prefers_kmh():
    s = decode_nmea(VTG, 1.0)
    assert s.valid and s.speed_mps == pytest.approx(10.2 / 3.6) and s.course_deg == 54.7


def test_void_fix_has_no_position():
    body = "GPRMC,,V,,,,,,,,,,N"
    s = decode_nmea(f"${body}*{nmea_checksum(body):02X}\r\n".encode(), 2.0)
    assert not s.valid and s.latitude_deg is None and s.speed_mps is None
    body = "GPGGA,123520,,,,,0,00,99.9,,M,,M,,"
    s = decode_nmea(f"${body}*{nmea_checksum(body):02X}".encode(), 2.0)
    assert not s.valid and s.latitude_deg is None


def test_other_sentence_types_are_ignored():
    body = "GPGSA,A,3,04,05,,09,12,,,24,,,,,2.5,1.3,2.1"
    assert decode_nmea(f"${body}*{nmea_checksum(body):02X}".encode(), 0.0) is None


def test_other_talkers_accepted():
    body = RMC[3:RMC.index(b"*")].decode()
    line = f"$GN{body}*{nmea_checksum('GN' + body):02X}".encode()
    assert decode_nmea(line, 0.0).valid


@pytest.mark.parametrize(
    "line, reason",
    [
        (RMC[:-2] + b"6B", "bad checksum"),
        (RMC[:-3], "not a '\\$...\\*hh'"),
        (b"GPRMC,123519,A*00", "not a '\\$...\\*hh'"),
        (RMC.replace(b"4807", b"48\xb07"), "not UTF-8"),
        (b"$GPRMC*ZZ", "not two hex digits"),
    ],
)
def test_bad_sentences(line, reason):
    with pytest.raises(DecodeError, match=reason):
        decode_nmea(line, 0.0)


def _signed(body: str) -> bytes:
    return f"${body}*{nmea_checksum(body):02X}".encode()


@pytest.mark.parametrize(
    "body, reason",
    [
        ("GPRMC,123519,A,48x7.038,N,01131.000,E,022.4,084.4,230394,,", "degrees or minutes|not a number"),
        ("GPRMC,123519,A,4807.038,Q,01131.000,E,022.4,084.4,230394,,", "hemisphere"),
        ("GPRMC,123519,A,9107.038,N,01131.000,E,022.4,084.4,230394,,", "exceeds 90"),
        ("GPRMC,123519,A,4807.038,N,01131.000,E,fast,084.4,230394,,", "RMC speed"),
        ("GPRMC,123519,A,4807.038,N,01131.000,E,-2,084.4,230394,,", "RMC speed"),
        ("GPRMC,123519,A", "fields"),
        ("GPVTG,054.7,T,034.4,M,005.5,N,1_0,K", "not a number"),
    ],
)
def test_bad_fields_name_the_problem(body, reason):
    with pytest.raises(DecodeError, match=reason):
        decode_nmea(_signed(body), 0.0)


lat = st.floats(-89.999, 89.999, allow_nan=False)
lon = st.floats(-179.999, 179.999, allow_nan=False)
speed = st.floats(0.0, 60.0, allow_nan=False)
course = st.floats(0.0, 359.99, allow_nan=False)
tod = st.floats(0.0, 86399.0, allow_nan=False)


@settings(max_examples=150, deadline=None)
@given(lat, lon, speed, course, tod)
def test_rmc_encoder_checked_by_pynmea2(lat_deg, lon_deg, v, c, t):
    line = encode_rmc(utc_time=utc_time_text(t), utc_date="150626", latitude_deg=lat_deg,
                      longitude_deg=lon_deg, speed_mps=v, course_deg=c)
    ref = pynmea2.parse(line.decode(), check=True)  # independent parser checks checksum and fields
    assert ref.latitude == pytest.approx(lat_deg, abs=1e-6)
    assert ref.longitude == pytest.approx(lon_deg, abs=1e-6)
    assert float(ref.spd_over_grnd) * MPS_PER_KNOT == pytest.approx(v, abs=3e-4)
    s = decode_nmea(line, 1.0)
    assert s.valid
    assert s.latitude_deg == pytest.approx(lat_deg, abs=1e-6)   # 1e-5 arc-minute resolution
    assert s.longitude_deg == pytest.approx(lon_deg, abs=1e-6)
    assert s.speed_mps == pytest.approx(v, abs=3e-4)


@settings(max_examples=100, deadline=None)
@given(lat, lon, st.floats(-400.0, 8000.0, allow_nan=False), tod)
def test_gga_encoder_checked_by_pynmea2(lat_deg, lon_deg, alt, t):
    line = encode_gga(utc_time=utc_time_text(t), latitude_deg=lat_deg, longitude_deg=lon_deg, altitude_m=alt)
    ref = pynmea2.parse(line.decode(), check=True)
    assert ref.altitude == pytest.approx(alt, abs=0.051)
    assert ref.latitude == pytest.approx(lat_deg, abs=1e-6)
    s = decode_nmea(line, 1.0)
    assert s.altitude_m == pytest.approx(alt, abs=0.051) and s.satellites == 8


@settings(max_examples=100, deadline=None)
@given(speed, course)
def test_vtg_encoder_checked_by_pynmea2(v, c):
    line = encode_vtg(course_deg=c, speed_mps=v)
    ref = pynmea2.parse(line.decode(), check=True)
    assert float(ref.spd_over_grnd_kmph) / 3.6 == pytest.approx(v, abs=3e-4)
    assert decode_nmea(line, 0.0).speed_mps == pytest.approx(v, abs=3e-4)


def test_void_rmc_encoder():
    line = encode_rmc(utc_time="000000.00", utc_date="010126", latitude_deg=0.0, longitude_deg=0.0,
                      speed_mps=0.0, course_deg=0.0, valid=False)
    assert not decode_nmea(line, 0.0).valid


@settings(max_examples=400, deadline=None)
@given(st.binary(max_size=90))
def test_fuzz_random_bytes(line):
    try:
        decode_nmea(line, 0.0)
    except DecodeError:
        pass


@settings(max_examples=300, deadline=None)
@given(st.lists(st.text(alphabet="0123456789.-NSEWAVTMKN ", max_size=9), min_size=0, max_size=14),
       st.sampled_from(["GPRMC", "GPGGA", "GPVTG", "GNRMC", "XXRMC"]))
def test_fuzz_well_signed_garbage_fields(fields, head):
    try:
        decode_nmea(_signed(",".join([head, *fields])), 0.0)
    except DecodeError:
        pass


@settings(max_examples=300, deadline=None)
@given(st.text(alphabet=st.characters(min_codepoint=32, max_codepoint=126), max_size=300))
def test_checksum_is_the_xor_of_every_character(body):
    # the definition (NMEA 0183): XOR of the characters between '$' and '*', one by one
    want = 0
    for ch in body:
        want ^= ord(ch)
    assert nmea_checksum(body) == want
