"""Radio telemetry codec: COBS, CRC-16/CCITT-FALSE, the frame layout, the stream reader."""

from __future__ import annotations

import dataclasses
import math
import random
import struct

import crcmod.predefined
import pytest
from cobs import cobs as cobs_ref
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.errors import DecodeError, FrameError
from livecoach.pipeline.state import LiveState, Notice, SensorHealth
from livecoach.stream.events import CH_CSC, CH_GPS, CH_POWER
from livecoach.telemetry.cobs import cobs_decode, cobs_encode
from livecoach.telemetry.crc16 import CHECK, crc16_ccitt_false
from livecoach.telemetry.frame import (
    LinkHealth,
    NoticeFrame,
    StateFrame,
    check_crc,
    encode_body,
    notice_frame,
    pack_frame,
    parse_body,
    state_frame,
    unpack_packet,
)
from livecoach.telemetry.reader import FrameFault, FrameReader

# Outside reference: crcmod's predefined "crc-ccitt-false" (poly 0x11021,
# init 0xFFFF, not reflected, xorout 0) from PyPI.
CRCMOD_CCITT_FALSE = crcmod.predefined.mkCrcFun("crc-ccitt-false")


# ----------------------------------------------------------------------- CRC
def test_crc_check_value_from_the_catalogue():
    # Check value 0x29B1 for "123456789": RevEng "Catalogue of parametrised CRC
    # algorithms" (G. Cook), entry CRC-16/IBM-3740 alias CRC-16/CCITT-FALSE.
    assert crc16_ccitt_false(b"123456789") == 0x29B1 == CHECK
    # The same from crcmod (PyPI).
    assert CRCMOD_CCITT_FALSE(b"123456789") == 0x29B1


def test_crc_of_empty_input_is_the_init_value():
    # Catalogue parameters: init 0xFFFF, xorout 0 -> CRC of no bytes is 0xFFFF.
    assert crc16_ccitt_false(b"") == 0xFFFF == CRCMOD_CCITT_FALSE(b"")


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=300))
def test_crc_matches_crcmod(data):
    assert crc16_ccitt_false(data) == CRCMOD_CCITT_FALSE(data)


@given(st.binary(max_size=100), st.binary(max_size=100))
@settings(max_examples=100, deadline=None)
def test_crc_can_be_continued(a, b):
    assert crc16_ccitt_false(b, crc16_ccitt_false(a)) == crc16_ccitt_false(a + b)


def test_crc_residue_is_zero_with_the_crc_appended_msb_first():
    # Catalogue: residue 0x0000 for this non-reflected CRC.
    body = b"livecoach telemetry"
    assert crc16_ccitt_false(body + struct.pack(">H", crc16_ccitt_false(body))) == 0


# ---------------------------------------------------------------------- COBS
@pytest.mark.parametrize(
    "data, encoded",
    [
        # Worked examples of the COBS encoding (Cheshire & Baker 1999, Fig. 2 style;
        # the vectors usually quoted for COBS) - from memory, and each is also
        # checked against the `cobs` package below.
        (b"\x00", b"\x01\x01"),
        (b"\x00\x00", b"\x01\x01\x01"),
        (b"\x00\x11\x00", b"\x01\x02\x11\x01"),
        (b"\x11\x22\x00\x33", b"\x03\x11\x22\x02\x33"),
        (b"\x11\x22\x33\x44", b"\x05\x11\x22\x33\x44"),
        (b"\x11\x00\x00\x00", b"\x02\x11\x01\x01\x01"),
        (bytes(range(1, 255)), b"\xff" + bytes(range(1, 255))),
        (bytes(range(0, 255)), b"\x01\xff" + bytes(range(1, 255))),
        (bytes(range(1, 256)), b"\xff" + bytes(range(1, 255)) + b"\x02\xff"),
    ],
)
def test_cobs_known_vectors(data, encoded):
    assert cobs_encode(data) == encoded
    assert cobs_ref.encode(data) == encoded  # the `cobs` package (PyPI) agrees
    assert cobs_decode(encoded) == data


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=700))
def test_cobs_matches_the_cobs_package_and_round_trips(data):
    enc = cobs_encode(data)
    assert b"\x00" not in enc
    assert enc == cobs_ref.encode(data)
    assert cobs_decode(enc) == data
    # Overhead bound of the paper: at most ceil(n/254) bytes, at least 1.
    assert len(enc) - len(data) <= max(1, math.ceil(len(data) / 254))


def test_cobs_decoder_accepts_the_trailing_empty_block_form():
    data = bytes(range(1, 255))
    assert cobs_decode(b"\xff" + data + b"\x01") == data


@pytest.mark.parametrize(
    "bad, where",
    [
        (b"", "empty"),
        (b"\x05\x11\x22", "offset 0"),
        (b"\x03\x11\x00\x01", "offset 2"),
        (b"\x02\x11\x00", "offset 2"),
    ],
)
def test_cobs_decoder_names_the_problem(bad, where):
    with pytest.raises(FrameError, match=where):
        cobs_decode(bad)


# --------------------------------------------------------------------- frames
def _sensor_health(channel, stale, age):
    return SensorHealth(channel=channel, link_up=not stale, stale=stale, age_s=age, accepted=10,
                        rejected=0, gaps=0, longest_gap_s=0.0)


def _live_state(t_s=123.456):
    return LiveState(
        t_s=t_s, phase="runup", distance_m=4321.09, distance_to_trap_m=2178.91,
        speed_mps=21.234, speed_stale=False, power_w=412.4, power_stale=False,
        cadence_rpm=97.6, heart_rate_bpm=171.0, airspeed_mps=21.87, target_power_w=420.0,
        planned_speed_mps=21.5, cue="steady", cue_text="hold it", predicted_trap_speed_mps=24.31,
        planned_trap_speed_mps=24.5, w_prime_balance_j=12345.6, w_prime_j=18000.0,
        cda_m2=0.03012, cda_sd_m2=0.00123, crr=0.00352, crr_sd=0.00031,
        alarms=("drag changed",),
        sensors=(_sensor_health(CH_POWER, False, 0.25), _sensor_health(CH_CSC, False, 0.5),
                 _sensor_health(CH_GPS, True, 7.34)),
    )


def test_state_frame_round_trip_from_live_state_within_resolution():
    state = _live_state()
    wire = pack_frame(state_frame(state, 41))
    assert wire.endswith(b"\x00") and b"\x00" not in wire[:-1]
    assert len(wire) < 110  # compact: 2 frames/s fit a 9600 baud link many times over
    f = unpack_packet(wire[:-1])
    assert isinstance(f, StateFrame)
    assert f.seq == 41 and f.t_s == pytest.approx(123.456, abs=5e-4)
    assert f.phase == "runup" and f.cue == "steady" and f.alarm_active
    assert f.speed_mps == pytest.approx(21.23, abs=0.005) and not f.speed_stale
    assert f.power_w == 412.0 and f.target_power_w == 420.0 and not f.power_stale
    assert f.distance_m == pytest.approx(4321.1, abs=0.05)
    assert f.distance_to_trap_m == pytest.approx(2178.9, abs=0.05)
    assert f.w_prime_balance_j == 12346.0
    assert f.cda_m2 == pytest.approx(0.03012, rel=1e-6)
    assert f.crr_sd == pytest.approx(0.00031, rel=1e-6)
    assert f.cadence_rpm == 98.0 and f.heart_rate_bpm == 171.0
    assert f.predicted_trap_speed_mps == pytest.approx(24.31, abs=0.005)
    assert f.trap_speed_mps is None
    assert [h.channel for h in f.sensors] == [CH_POWER, CH_CSC, CH_GPS]
    assert f.sensors[2].stale and not f.sensors[2].link_up and f.sensors[2].age_s == pytest.approx(7.3)


def test_unknown_values_stay_unknown():
    f = unpack_packet(pack_frame(state_frame(LiveState(t_s=0.0), 0))[:-1])
    assert f.speed_mps is None and f.power_w is None and f.cda_m2 is None
    assert f.distance_m is None and f.w_prime_balance_j is None and f.cue is None
    assert f.speed_stale and f.power_stale and f.sensors == ()


def test_out_of_range_values_are_clamped_not_wrapped():
    f = unpack_packet(pack_frame(state_frame(
        LiveState(t_s=1.0, speed_mps=900.0, power_w=-5.0, cadence_rpm=400.0,
                  distance_m=-12.0, cda_m2=float("inf")), 1))[:-1])
    assert f.speed_mps == 655.34 and f.power_w == 0.0 and f.cadence_rpm == 254.0
    assert f.distance_m == -12.0 and f.cda_m2 is None


def test_notice_round_trip_and_long_text_cut_at_a_character_boundary():
    text = "drag changed: CdA +0.004 m² " * 10
    f = unpack_packet(pack_frame(notice_frame(Notice(12.5, "alarm", text), 9))[:-1])
    assert isinstance(f, NoticeFrame) and f.kind == "alarm" and f.seq == 9 and f.t_s == 12.5
    assert text.startswith(f.text) and len(f.text.encode()) <= 120


_u16 = st.one_of(st.none(), st.integers(0, 0xFFFE))
_i32 = st.one_of(st.none(), st.integers(-(2**31) + 1, 2**31 - 1))
_u8 = st.one_of(st.none(), st.integers(0, 0xFE))
_f32 = st.one_of(st.none(), st.floats(width=32, allow_nan=False, allow_infinity=False))


def _scaled(q, scale):
    return None if q is None else q / scale


@st.composite
def state_frames(draw):
    sensors = draw(st.lists(st.tuples(st.sampled_from([CH_POWER, CH_CSC, CH_GPS, "other"]),
                                      st.booleans(), st.booleans(), _u8), max_size=12))
    return StateFrame(
        seq=draw(st.integers(0, 0xFFFF)), t_s=draw(st.integers(0, 2**32 - 1)) / 1000.0,
        phase=draw(st.sampled_from(["waiting", "runup", "trap", "done"])),
        speed_mps=_scaled(draw(_u16), 100.0), speed_stale=draw(st.booleans()),
        power_w=_scaled(draw(_u16), 1.0), power_stale=draw(st.booleans()),
        target_power_w=_scaled(draw(_u16), 1.0), planned_speed_mps=_scaled(draw(_u16), 100.0),
        distance_m=_scaled(draw(_i32), 10.0), distance_to_trap_m=_scaled(draw(_i32), 10.0),
        predicted_trap_speed_mps=_scaled(draw(_u16), 100.0),
        planned_trap_speed_mps=_scaled(draw(_u16), 100.0),
        trap_speed_mps=_scaled(draw(_u16), 100.0), w_prime_balance_j=_scaled(draw(_i32), 1.0),
        cda_m2=draw(_f32), cda_sd_m2=draw(_f32), crr=draw(_f32), crr_sd=draw(_f32),
        cadence_rpm=_scaled(draw(_u8), 1.0), heart_rate_bpm=_scaled(draw(_u8), 1.0),
        airspeed_mps=_scaled(draw(_u16), 100.0),
        cue=draw(st.one_of(st.none(), st.text(min_size=1, max_size=6))),
        alarm_active=draw(st.booleans()),
        sensors=tuple(LinkHealth(c, up, stale, _scaled(age, 10.0)) for c, up, stale, age in sensors),
    )


@settings(max_examples=150, deadline=None)
@given(state_frames())
def test_state_frame_codec_round_trips_exactly_on_its_grid(frame):
    assert unpack_packet(pack_frame(frame)[:-1]) == frame


def test_float32_fields_keep_values_up_to_the_float32_maximum():
    # Regression (found by the round-trip property above): values between 3.4e38 and the
    # largest float32, 3.4028234663852886e38 (IEEE 754 binary32), were clamped to 3.4e38.
    big = struct.unpack("<f", struct.pack("<f", 3.4000001549684603e38))[0]
    frame = dataclasses.replace(state_frame(_live_state(), 1), crr_sd=big, cda_sd_m2=-big)
    got = unpack_packet(pack_frame(frame)[:-1])
    assert got.crr_sd == big and got.cda_sd_m2 == -big


@settings(max_examples=100, deadline=None)
@given(st.integers(0, 0xFFFF), st.integers(0, 2**32 - 1),
       st.sampled_from(["cue", "alarm", "warning", "phase"]), st.text(max_size=40))
def test_notice_frame_codec_round_trips(seq, t_ms, kind, text):
    frame = NoticeFrame(seq, t_ms / 1000.0, kind, text)
    if len(text.encode()) <= 120:
        assert unpack_packet(pack_frame(frame)[:-1]) == frame


def test_layout_errors_name_the_offset():
    body = encode_body(state_frame(_live_state(), 1))
    with pytest.raises(FrameError, match="version 7 at offset 0"):
        parse_body(b"\x07" + body[1:])
    with pytest.raises(FrameError, match="kind 9 at offset 1"):
        parse_body(body[:1] + b"\x09" + body[2:])
    with pytest.raises(FrameError, match="sensor count"):
        parse_body(body[:-1])
    with pytest.raises(FrameError, match="CRC mismatch"):
        check_crc(body + b"\x00\x00")
    assert issubclass(FrameError, DecodeError)


@settings(max_examples=300, deadline=None)
@given(st.binary(max_size=200))
def test_decoder_fuzz_only_ever_raises_frame_error(packet):
    try:
        unpack_packet(packet)
    except FrameError:
        pass


# ---------------------------------------------------------------- the reader
def _wire(frames):
    return b"".join(b"\x00" + pack_frame(f) for f in frames)


def test_reader_counts_gaps_restarts_and_duplicates():
    r = FrameReader()
    seqs = [5, 6, 9, 9, 10, 0, 1, 65535 - 1, 65535, 0, 2]
    out = r.feed(_wire([state_frame(LiveState(t_s=float(i)), s) for i, s in enumerate(seqs)]))
    assert [f.seq for f in out] == seqs
    # gaps 6->9 (2 lost), 1->65534 is a jump back (restart), 65535->0 wraps, 0->2 (1 lost)
    s = r.stats
    assert (s.lost, s.duplicates, s.restarts, s.frames_ok, s.corrupt) == (3, 1, 2, 11, 0)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(1, 40), min_size=1, max_size=30), st.randoms(use_true_random=False))
def test_reader_is_independent_of_chunking(sizes, rnd):
    frames = [state_frame(_live_state(t_s=i * 0.5), i) for i in range(12)]
    frames.insert(4, notice_frame(Notice(2.0, "cue", "push now"), 100))
    wire = _wire(frames)
    r = FrameReader()
    out, pos, i = [], 0, 0
    while pos < len(wire):
        n = sizes[i % len(sizes)]
        out += r.feed(wire[pos:pos + n])
        pos += n
        i += 1
    ref = FrameReader().feed(wire)
    assert out == ref and len(out) == 13


def test_reader_counts_injected_corruption_and_drops_exactly():
    rng = random.Random(20240607)  # seeded
    frames = [state_frame(_live_state(t_s=i * 0.5), i) for i in range(200)]
    dropped = set(rng.sample(range(1, 199), 15))
    corrupted = set(rng.sample(sorted(set(range(1, 199)) - dropped), 20))
    wire = bytearray()
    for f in frames:
        if f.seq in dropped:
            continue
        pkt = bytearray(b"\x00" + pack_frame(f))
        if f.seq in corrupted:
            i = rng.randrange(1, len(pkt) - 1)  # never the delimiters
            pkt[i] = rng.choice([b for b in range(1, 256) if b != pkt[i]])
        wire += pkt
    r = FrameReader()
    items = r.feed(bytes(wire))
    good = [x for x in items if not isinstance(x, FrameFault)]
    faults = [x for x in items if isinstance(x, FrameFault)]
    s = r.stats
    assert len(good) == 200 - 15 - 20 == s.frames_ok
    assert len(faults) == 20 == s.corrupt == s.bad_cobs + s.bad_crc + s.bad_layout
    assert s.lost == 15 + 20  # a corrupted frame is also missing from the sequence
    assert {f.seq for f in good} == set(range(200)) - dropped - corrupted


def test_reader_survives_garbage_and_resynchronises():
    r = FrameReader(max_packet_bytes=120)
    junk = bytes(random.Random(3).randrange(1, 256) for _ in range(300))
    items = []
    for i in range(0, 300, 50):  # junk with no delimiter arrives in 50-byte reads
        items += r.feed(junk[i:i + 50])
    assert r.stats.oversize == 1 and r.stats.bytes_discarded == 300 - 150
    items += r.feed(b"\x00" + pack_frame(state_frame(_live_state(), 1)) + b"\x11\x22\x00"
                    + _wire([state_frame(_live_state(), 2)]))
    assert [x.seq for x in items if isinstance(x, StateFrame)] == [1, 2]
    assert [x.kind for x in items if isinstance(x, FrameFault)] == ["oversize", "cobs"]
    assert r.stats.corrupt == 2


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=2000))
def test_reader_fuzz_never_raises_and_counts_add_up(data):
    r = FrameReader()
    items = r.feed(data)
    s = r.stats
    assert s.bytes_received == len(data)
    assert len(items) == s.frames_ok + s.corrupt
    assert s.frames_ok == s.state_frames + s.notice_frames
