"""The recorder: never blocks the caller; disk full, read-only file system and
stalled disks stop recording with a warning; nothing written is lost.

Real file systems where the test can make them (root: a small tmpfs for
"disk full", a loop-mounted ext4 image forced read-only through the kernel's
ext4 error path for "read-only during recording"); injected OSErrors through
the recorder's ``opener`` otherwise and in addition.
"""

from __future__ import annotations

import errno
import os
import threading
import time
from pathlib import Path

import pytest

from livecoach.recording import Recorder, RecordingHeader, RecordingReader, recording_path
from livecoach.stream.events import RawEvent

HEADER = RecordingHeader(ride_text="# invented demo ride\n", software_version="0.1.0",
                         start_wall_time_unix_s=1_750_000_000.0, start_monotonic_s=0.0)


def ev(i: int, size: int = 8) -> RawEvent:
    return RawEvent(i * 0.01, "ble.cycling_power", i.to_bytes(4, "little") + bytes(size - 4))


def wait_for(cond, timeout_s: float = 5.0) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if cond():
            return True
        time.sleep(0.01)
    return cond()


class FaultyFile:
    """A real unbuffered file that fails like a full disk after ``limit`` bytes:
    one short write, then OSError(errno) (as write(2) behaves on ENOSPC)."""

    def __init__(self, path: Path, limit: int, err: int = errno.ENOSPC) -> None:
        self.real = open(path, "xb", buffering=0)
        self.limit, self.err, self.total = limit, err, 0

    def write(self, data) -> int:
        room = self.limit - self.total
        if room <= 0:
            raise OSError(self.err, os.strerror(self.err))
        n = self.real.write(data[:room])
        self.total += n
        return n

    def fileno(self) -> int:
        return self.real.fileno()

    def close(self) -> None:
        self.real.close()


class GatedFile:
    """A real file whose writes after the first ``free_writes`` wait for ``gate`` (a stuck SD card)."""

    def __init__(self, path: Path, gate: threading.Event, free_writes: int = 1) -> None:
        self.real = open(path, "xb", buffering=0)
        self.gate, self.free = gate, free_writes

    def write(self, data) -> int:
        if self.free <= 0:
            self.gate.wait()
        self.free -= 1
        return self.real.write(data)

    def fileno(self) -> int:
        return self.real.fileno()

    def close(self) -> None:
        self.real.close()


# --------------------------------------------------------------------- basics
def test_records_reach_the_disk_within_the_flush_interval(tmp_path):
    path = tmp_path / "f.lcrec"
    rec = Recorder(path, HEADER, flush_interval_s=0.2)
    assert rec.start()
    for i in range(100):
        rec.append(ev(i))
    # Readable by another reader while still recording (no close, no end record).
    assert wait_for(lambda: len(list(RecordingReader(path).events())) == 100, 3.0)
    assert rec.ok and wait_for(lambda: rec.syncs >= 2)    # header + at least one batch
    rec.close()
    assert rec.status == "closed"
    reader = RecordingReader(path)
    assert list(reader.events()) == [ev(i) for i in range(100)]
    assert reader.end.events == 100 and reader.warnings == []


def test_existing_recording_is_never_overwritten(tmp_path):
    path = tmp_path / "x.lcrec"
    path.write_bytes(b"an earlier ride")
    warnings: list[str] = []
    rec = Recorder(path, HEADER, on_warning=warnings.append)
    assert rec.start() is False
    rec.append(ev(1))
    rec.close()
    assert path.read_bytes() == b"an earlier ride"
    assert rec.status == "failed" and "exists already" in warnings[0]


def test_recording_path_is_new_and_dated(tmp_path):
    p1 = recording_path(tmp_path, 1_750_000_000.0)
    assert p1.name == "ride-20250615-150640.lcrec"
    p1.write_bytes(b"")
    assert recording_path(tmp_path, 1_750_000_000.0).name == "ride-20250615-150640-2.lcrec"


def test_unencodable_record_is_skipped_and_the_rest_kept(tmp_path):
    path = tmp_path / "u.lcrec"
    rec = Recorder(path, HEADER, flush_interval_s=0.05)
    assert rec.start()
    rec.append(ev(1))
    rec.append(RawEvent(0.02, "kanäl", b"x"))     # channel names are ASCII
    rec.append(ev(3))
    rec.close()
    assert list(RecordingReader(path).events()) == [ev(1), ev(3)]
    assert rec.dropped == 1 and "could not be encoded" in rec.warnings[0]


# --------------------------------------------------------------------- never blocks
def test_append_never_blocks_on_a_stuck_disk_and_the_watchdog_stops_recording(tmp_path):
    gate = threading.Event()
    warnings: list[str] = []
    path = tmp_path / "stuck.lcrec"
    rec = Recorder(path, HEADER, flush_interval_s=0.05, stall_limit_s=0.3,
                   on_warning=warnings.append, opener=lambda p: GatedFile(p, gate))
    assert rec.start()
    rec.append(ev(0))
    assert wait_for(lambda: rec.queued == 0)       # the writer took it and is now stuck in write()
    for i in range(1, 5001):                       # the live loop keeps appending
        rec.append(ev(i))
    assert not gate.is_set() and rec.queued == 5000
    time.sleep(0.4)
    assert rec.check() is False                    # the watchdog call a tick makes
    assert rec.status == "failed" and "not keeping up" in warnings[0]
    assert rec.queued == 0                         # memory released
    rec.append(ev(6000))                           # still no exception
    gate.set()                                     # the card wakes up: the write in flight completes
    rec.close()
    got = list(RecordingReader(path).events())
    assert got == [ev(0)]                          # what was written is kept
    assert rec.dropped >= 5000


def test_writer_thread_crash_proof_warning_callback(tmp_path):
    def bad_callback(msg: str) -> None:
        raise RuntimeError("display gone")

    rec = Recorder(tmp_path / "c.lcrec", HEADER, flush_interval_s=0.05, on_warning=bad_callback,
                   opener=lambda p: FaultyFile(p, limit=600))
    assert rec.start()
    for i in range(200):
        rec.append(ev(i))
    assert wait_for(lambda: rec.status == "failed")
    rec.close()
    assert "disk is full" in rec.failure


# --------------------------------------------------------------------- disk full
def _check_disk_full(path: Path, rec: Recorder, warnings: list[str], appended: int) -> None:
    assert rec.status == "failed"
    assert any("disk is full" in w and "coaching goes on" in w for w in warnings)
    reader = RecordingReader(path)
    got = list(reader.events())
    # Everything the recorder reported as written is there, in order; the
    # partly written record was cut off, so no torn tail remains.
    assert got == [ev(i, 200) for i in range(rec.events_written)]
    assert 0 < rec.events_written < appended
    assert not any("torn" in w for w in reader.warnings)


def test_disk_full_injected(tmp_path):
    warnings: list[str] = []
    path = tmp_path / "full.lcrec"
    rec = Recorder(path, HEADER, flush_interval_s=0.05, on_warning=warnings.append,
                   opener=lambda p: FaultyFile(p, limit=20_000))
    assert rec.start()
    for i in range(300):
        rec.append(ev(i, 200))
        if i % 50 == 0:
            time.sleep(0.06)
    assert wait_for(lambda: rec.status == "failed")
    for i in range(300, 400):
        rec.append(ev(i, 200))                     # the caller goes on
    rec.close()
    _check_disk_full(path, rec, warnings, 400)


def test_disk_full_on_a_real_tmpfs(mounted):
    mnt = mounted("small", ["-t", "tmpfs", "-o", "size=64k", "tmpfs"])
    warnings: list[str] = []
    path = mnt / "full.lcrec"
    rec = Recorder(path, HEADER, flush_interval_s=0.05, on_warning=warnings.append)
    assert rec.start()
    i = 0
    while rec.status == "recording" and i < 5000:
        rec.append(ev(i, 200))
        i += 1
        if i % 40 == 0:
            time.sleep(0.06)
    assert wait_for(lambda: rec.status == "failed")
    rec.close()
    _check_disk_full(path, rec, warnings, i)


# --------------------------------------------------------------------- read-only
def test_read_only_file_system_at_start(mounted):
    mnt = mounted("ro", ["-t", "tmpfs", "-o", "ro,size=64k", "tmpfs"])
    warnings: list[str] = []
    rec = Recorder(mnt / "r.lcrec", HEADER, on_warning=warnings.append)
    assert rec.start() is False
    rec.append(ev(1))
    rec.close()
    assert "read-only" in warnings[0] and rec.dropped == 1


def test_read_only_injected_during_recording(tmp_path):
    warnings: list[str] = []
    path = tmp_path / "ro.lcrec"
    rec = Recorder(path, HEADER, flush_interval_s=0.05, on_warning=warnings.append,
                   opener=lambda p: FaultyFile(p, limit=3000, err=errno.EROFS))
    assert rec.start()
    for i in range(100):
        rec.append(ev(i, 50))
    assert wait_for(lambda: rec.status == "failed")
    rec.close()
    assert "read-only" in warnings[0]
    assert list(RecordingReader(path).events()) == [ev(i, 50) for i in range(rec.events_written)]


@pytest.mark.slow
def test_read_only_during_recording_on_a_real_ext4(tmp_path, failing_card):
    # ext4 mounted with errors=remount-ro turns read-only on a storage error,
    # as an SD card failing mid-run does; the kernel's trigger_fs_error file
    # raises such an error on purpose (Linux ext4 sysfs interface).
    mnt, trigger = failing_card
    warnings: list[str] = []
    path = mnt / "ride.lcrec"
    rec = Recorder(path, HEADER, flush_interval_s=0.05, on_warning=warnings.append)
    assert rec.start()
    for i in range(50):
        rec.append(ev(i))
    assert wait_for(lambda: rec.events_written == 50)
    trigger.write_text("livecoach test: simulated card failure")
    for i in range(50, 100):
        rec.append(ev(i))
    assert wait_for(lambda: rec.status == "failed")
    rec.close()
    assert "read-only" in warnings[0]
    got = list(RecordingReader(path).events())
    assert got[:50] == [ev(i) for i in range(50)]   # nothing written before is lost
