"""LCREC recording format: framing, CRC, header, round trip, and an independent
reader written only from docs/recording_format.md."""

from __future__ import annotations

import json
import random
import struct
import zlib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.errors import RecordingError
from livecoach.recording import (
    MAGIC,
    RecordingHeader,
    RecordingReader,
    Recorder,
    SensorIdentity,
    is_recording,
    read_recording,
)
from livecoach.recording.format import SYNC, TYPE_EVENT, event_body, frame
from livecoach.stream.events import ALL_CHANNELS, RawEvent

HEADER = RecordingHeader(
    ride_text="# demo ride (invented)\n[vehicle]\nmass_kg = 98.0\n",
    software_version="0.1.0",
    start_wall_time_unix_s=1_750_000_000.25,
    start_monotonic_s=1234.5,
    sensors=(SensorIdentity("ble.cycling_power", "ble", address="C0:FF:EE:00:00:01"),
             SensorIdentity("serial.gps", "serial", port="/dev/ttyUSB0", baud=9600)),
    ride_source="/tmp/ride.toml",
    course_profile=((0.0, 1405.0), (6700.0, 1381.0)),
    flush_interval_s=0.5,
)


def random_events(n: int, seed: int) -> list[RawEvent]:
    rng = random.Random(seed)
    t = 1234.5
    out = []
    for _ in range(n):
        t += rng.uniform(0.0, 0.05)
        size = rng.choice([0, 1, 4, 8, 14, 20, 80])
        out.append(RawEvent(t, rng.choice(ALL_CHANNELS), bytes(rng.getrandbits(8) for _ in range(size))))
    return out


def write_recording(path: Path, events: list[RawEvent], outputs=(), close=True) -> Recorder:
    rec = Recorder(path, HEADER, flush_interval_s=0.05)
    assert rec.start()
    for ev in events:
        rec.append(ev)
    for t_s, kind, value in outputs:
        rec.append_output(t_s, kind, value)
    if close:
        rec.close()
    return rec


def test_crc_is_crc32_iso_hdlc():
    # CRC-32/ISO-HDLC check value for "123456789" is 0xCBF43926
    # (Greg Cook, "Catalogue of parametrised CRC algorithms"; ITU-T V.42 / IEEE 802.3 CRC).
    assert zlib.crc32(b"123456789") == 0xCBF43926
    f = frame(TYPE_EVENT, 7, b"abc")
    assert f[:2] == SYNC
    assert struct.unpack_from("<I", f, len(f) - 4)[0] == zlib.crc32(f[2:-4])


def test_round_trip_header_events_outputs(tmp_path):
    events = random_events(500, seed=1)
    outputs = [(1300.0, "notice", {"kind": "cue", "text": "hold", "data": {"target_power_w": 412.5}}),
               (1301.0, "state", {"cda_m2": 0.0301, "x": float("nan")})]
    path = tmp_path / "a.lcrec"
    rec = write_recording(path, events, outputs)
    assert rec.status == "closed" and rec.events_written == 500 and rec.outputs_written == 2
    reader = RecordingReader(path)
    assert reader.header == HEADER
    got = list(reader.records())
    assert [r for r in got if type(r) is RawEvent] == events   # bit-exact t_s and payloads
    outs = [r for r in got if type(r).__name__ == "OutputRecord"]
    assert [(o.t_s, o.kind) for o in outs] == [(1300.0, "notice"), (1301.0, "state")]
    assert outs[0].value == outputs[0][2]
    assert reader.end is not None and reader.end.events == 500 and reader.end.dropped == 0
    assert reader.warnings == []
    assert reader.stats["events"] == 500
    assert is_recording(path)
    assert read_recording(path)[1] == events


def test_empty_recording_has_header_and_end(tmp_path):
    path = tmp_path / "empty.lcrec"
    write_recording(path, [])
    header, events, warnings = read_recording(path)
    assert header.sensors == HEADER.sensors and events == [] and warnings == []


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.floats(allow_nan=False, width=64), st.sampled_from(ALL_CHANNELS),
                          st.binary(max_size=300)), max_size=30))
def test_round_trip_property(tmp_path_factory, items):
    path = tmp_path_factory.mktemp("rt") / "p.lcrec"
    events = [RawEvent(t, ch, p) for t, ch, p in items]
    write_recording(path, events)
    assert read_recording(path)[1] == events


def _independent_read(path: Path) -> tuple[dict, list[tuple[float, str, bytes]]]:
    """A reader written from docs/recording_format.md alone (no livecoach code)."""
    data = path.read_bytes()
    assert data[:8] == b"LCREC01\n"
    pos, header, events = 8, None, []
    while pos + 16 <= len(data):
        sync, rtype, flags, n, seq = struct.unpack_from("<2sBBII", data, pos)
        body = data[pos + 12:pos + 12 + n]
        (crc,) = struct.unpack_from("<I", data, pos + 12 + n)
        assert sync == b"\xc7\x3e" and flags == 0 and zlib.crc32(data[pos + 2:pos + 12 + n]) == crc
        if rtype == ord("H"):
            header = json.loads(body)
        elif rtype == ord("E"):
            (t_s,) = struct.unpack_from("<d", body, 0)
            k = body[8]
            events.append((t_s, body[9:9 + k].decode("ascii"), body[9 + k:]))
        pos += 16 + n
    assert pos == len(data)
    return header, events


def test_documented_layout_readable_without_livecoach(tmp_path):
    events = random_events(50, seed=2)
    path = tmp_path / "doc.lcrec"
    write_recording(path, events, [(1240.0, "notice", {"a": 1})])
    header, got = _independent_read(path)
    assert got == [(e.t_s, e.channel, e.payload) for e in events]
    assert header["format"] == "livecoach-recording" and header["format_version"] == 1
    assert header["ride_file"] == HEADER.ride_text
    assert header["sensors"][1]["port"] == "/dev/ttyUSB0"
    assert header["start_wall_time_utc"].startswith("2025-06-15T15:06:40.250")
    # The doc describes this very layout.
    doc = (Path(__file__).parents[1] / "docs" / "recording_format.md").read_text(encoding="utf-8")
    assert "LCREC01" in doc and "0xC7 0x3E" in doc and "CRC-32" in doc


@pytest.mark.parametrize("content, words", [
    (b"", "empty"),
    (b"time_s,power_w,speed_mps\n0,100,5\n", "not a livecoach recording"),
    (b"LCREC02\n" + bytes(40), "format '02' is not supported"),
    (MAGIC, "header record is incomplete"),
    (MAGIC + frame(0x48, 0, b"{}")[:10], "header record is incomplete"),
    (MAGIC + frame(0x48, 0, b"not json"), "not valid UTF-8 JSON"),
    (MAGIC + frame(0x48, 0, b'{"format": "other"}'), "does not describe a livecoach recording"),
    (MAGIC + frame(0x48, 0, json.dumps({"format": "livecoach-recording", "format_version": 1}).encode()),
     "incomplete or malformed"),
    (MAGIC + frame(0x45, 0, event_body(0.0, "tick", b"")), "bad header record"),
])
def test_not_a_recording_gives_clear_error(tmp_path, content, words):
    path = tmp_path / "bad.lcrec"
    path.write_bytes(content)
    with pytest.raises(RecordingError, match=words) as info:
        RecordingReader(path)
    assert str(path) in str(info.value)


def test_header_crc_damage_and_missing_files(tmp_path):
    path = tmp_path / "h.lcrec"
    write_recording(path, [])
    data = bytearray(path.read_bytes())
    data[30] ^= 0x01
    path.write_bytes(bytes(data))
    with pytest.raises(RecordingError, match="CRC-32"):
        RecordingReader(path)
    with pytest.raises(RecordingError, match="not found"):
        RecordingReader(tmp_path / "nope.lcrec")
    with pytest.raises(RecordingError, match="folder"):
        RecordingReader(tmp_path)
