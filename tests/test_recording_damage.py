"""Damaged recordings: torn tails, zero-filled tails, corruption in the middle.

The reader must never raise on damage (unless strict), must return only
records that were really written (CRC-checked), in order, and must say what
it skipped.
"""

from __future__ import annotations

import random

import pytest

from livecoach.errors import RecordingError
from livecoach.recording import RecordingHeader, RecordingReader, Recorder
from livecoach.stream.events import ALL_CHANNELS, RawEvent

HEADER = RecordingHeader(ride_text="# invented demo ride\n", software_version="0.1.0",
                         start_wall_time_unix_s=1_750_000_000.0, start_monotonic_s=1234.5)


def random_events(n: int, seed: int) -> list[RawEvent]:
    rng = random.Random(seed)
    t, out = 1234.5, []
    for _ in range(n):
        t += rng.uniform(0.0, 0.05)
        size = rng.choice([0, 1, 4, 8, 14, 20, 80])
        out.append(RawEvent(t, rng.choice(ALL_CHANNELS), bytes(rng.getrandbits(8) for _ in range(size))))
    return out


def write_recording(path, events) -> None:
    rec = Recorder(path, HEADER, flush_interval_s=0.05)
    assert rec.start()
    for ev in events:
        rec.append(ev)
    rec.close()


def _offsets(path, events):
    """File offset where each event's frame starts (the file has no outputs)."""
    reader = RecordingReader(path)
    start = reader._data_offset
    offs = []
    pos = start
    for ev in events:
        offs.append(pos)
        pos += 16 + 9 + len(ev.channel) + len(ev.payload)
    return offs, pos


@pytest.fixture
def recording(tmp_path):
    events = random_events(40, seed=5)
    path = tmp_path / "r.lcrec"
    write_recording(path, events)
    return path, events, path.read_bytes()


def test_torn_tail_at_every_byte_of_the_last_records(recording, tmp_path):
    path, events, data = recording
    offs, end_of_events = _offsets(path, events)
    for cut in range(offs[-3], end_of_events):
        p = tmp_path / "cut.lcrec"
        p.write_bytes(data[:cut])
        reader = RecordingReader(p)
        got = list(reader.events())
        whole = sum(1 for o in offs if o + 16 + 9 <= cut and _frame_end(o, events, offs) <= cut)
        assert got == events[:whole], cut
        if cut not in offs:          # a torn record is there
            assert any("torn or unreadable tail" in w for w in reader.warnings), cut
        assert any("no end record" in w for w in reader.warnings)


def _frame_end(off, events, offs):
    i = offs.index(off)
    ev = events[i]
    return off + 16 + 9 + len(ev.channel) + len(ev.payload)


def test_zero_filled_tail_after_power_cut(recording, tmp_path):
    # After a power cut, a file system may show the file longer than what was
    # written, the rest reading as zeros (common practice: delayed allocation).
    path, events, data = recording
    offs, _ = _offsets(path, events)
    p = tmp_path / "z.lcrec"
    p.write_bytes(data[:offs[30]] + bytes(4096))
    reader = RecordingReader(p)
    assert list(reader.events()) == events[:30]
    assert any("bytes " in w and "torn or unreadable tail" in w for w in reader.warnings)
    assert reader.stats["damaged_bytes"] == 4096


def test_flipped_byte_in_the_middle_resynchronises(recording, tmp_path):
    path, events, data = recording
    offs, _ = _offsets(path, events)
    for where in (0, 2, 5, 9, 13, 20, 30):     # sync, type, length, sequence, time, channel, payload
        broken = bytearray(data)
        broken[offs[17] + where] ^= 0x40
        p = tmp_path / "m.lcrec"
        p.write_bytes(bytes(broken))
        reader = RecordingReader(p)
        got = list(reader.events())
        assert got == events[:17] + events[18:], where
        assert any("damaged data skipped" in w and "1 record(s) lost" in w for w in reader.warnings)
        assert reader.stats["records_lost"] == 1
        assert reader.end is not None   # read through to the clean end


def test_inserted_garbage_loses_nothing(recording, tmp_path):
    path, events, data = recording
    offs, _ = _offsets(path, events)
    p = tmp_path / "g.lcrec"
    p.write_bytes(data[:offs[10]] + b"\xc7\x3e garbage \xc7" + data[offs[10]:])
    reader = RecordingReader(p)
    assert list(reader.events()) == events
    assert any("0 record(s) lost" in w for w in reader.warnings)


def test_lost_block_in_the_middle(recording, tmp_path):
    path, events, data = recording
    offs, _ = _offsets(path, events)
    p = tmp_path / "b.lcrec"
    p.write_bytes(data[:offs[5] + 7] + data[offs[12] + 3:])   # a chunk of records gone
    reader = RecordingReader(p)
    assert list(reader.events()) == events[:5] + events[13:]
    assert reader.stats["records_lost"] == 8


def test_strict_mode_stops_at_the_damage(recording, tmp_path):
    path, events, data = recording
    offs, _ = _offsets(path, events)
    broken = bytearray(data)
    broken[offs[3] + 14] ^= 0xFF
    p = tmp_path / "s.lcrec"
    p.write_bytes(bytes(broken))
    got = []
    with pytest.raises(RecordingError, match=f"damaged record at byte {offs[3]}: CRC-32 mismatch"):
        for ev in RecordingReader(p, strict=True).events():
            got.append(ev)
    assert got == events[:3]


def test_random_corruption_never_raises_and_returns_only_written_records(recording, tmp_path):
    path, events, data = recording
    rng = random.Random(1234)
    originals = set(events)
    for trial in range(60):
        broken = bytearray(data)
        header_end = RecordingReader(path)._data_offset
        for _ in range(rng.randint(1, 8)):
            i = rng.randrange(header_end, len(broken))
            broken[i] = rng.getrandbits(8)
        if rng.random() < 0.3:
            del broken[rng.randrange(header_end, len(broken)):]
        p = tmp_path / "f.lcrec"
        p.write_bytes(bytes(broken))
        got = list(RecordingReader(p).events())
        assert all(ev in originals for ev in got), trial
        idx = [events.index(ev) for ev in got]
        assert idx == sorted(idx), trial


def test_stale_duplicate_frames_are_skipped(recording, tmp_path):
    path, events, data = recording
    offs, end = _offsets(path, events)
    dup = data[offs[2]:offs[3]]   # a copy of an earlier frame re-appears later
    p = tmp_path / "d.lcrec"
    p.write_bytes(data[:offs[20]] + dup + data[offs[20]:])
    reader = RecordingReader(p)
    assert list(reader.events()) == events
    assert reader.stats["duplicates_skipped"] == 1
    assert any("repeated record" in w for w in reader.warnings)


def test_large_file_reads_across_chunks(tmp_path):
    # Enough records to span several 1 MiB read chunks, with damage on a chunk border.
    events = [RawEvent(float(i), "ble.csc", bytes(40)) for i in range(60_000)]
    path = tmp_path / "big.lcrec"
    write_recording(path, events)
    data = bytearray(path.read_bytes())
    data[(1 << 20) + 3] ^= 0x10
    path.write_bytes(bytes(data))
    reader = RecordingReader(path)
    got = list(reader.events())
    assert len(got) == 59_999 and reader.stats["records_lost"] == 1
    assert got[-1] == events[-1]
