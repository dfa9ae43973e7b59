"""The ground station over a real pseudo-terminal: injected corruption and
dropped frames are counted exactly, the record keeps every packet, a vanished
modem is survived, and `livecoach ground` does the same end to end."""

from __future__ import annotations

import json
import os
import random
import subprocess
import sys
import threading
import time
import tty

import pytest

from livecoach.errors import RecordingError, SourceError
from livecoach.pipeline.state import LiveState, Notice, SensorHealth
from livecoach.telemetry.frame import StateFrame, notice_frame, pack_frame, state_frame
from livecoach.telemetry.ground import GroundStation, read_ground_log


def _state(i: int) -> LiveState:
    return LiveState(
        t_s=100.0 + i * 0.5, phase="runup", distance_m=10.0 * i, distance_to_trap_m=6500 - 10.0 * i,
        speed_mps=15.0 + 0.01 * i, speed_stale=False, power_w=400.0, power_stale=False,
        cda_m2=0.031, cda_sd_m2=0.002, crr=0.0035, crr_sd=0.0004, cue="steady",
        sensors=(SensorHealth("ble.cycling_power", True, False, 0.3, i, 0, 0, 0.0),
                 SensorHealth("serial.gps", False, True, 9.0, i, 0, 1, 9.0)),
    )


def scripted_stream(n: int, seed: int, n_drop: int, n_corrupt: int):
    """Wire bytes of ``n`` frames (every 10th a notice) with frames dropped
    and single bytes changed (never into a delimiter); returns (chunks, dropped, corrupted)."""
    rng = random.Random(seed)
    dropped = set(rng.sample(range(1, n - 1), n_drop))
    corrupted = set(rng.sample(sorted(set(range(1, n - 1)) - dropped), n_corrupt))
    chunks = []
    for seq in range(n):
        if seq % 10 == 5:
            frame = notice_frame(Notice(100.0 + seq * 0.5, "cue", f"ease off {seq}"), seq)
        else:
            frame = state_frame(_state(seq), seq)
        if seq in dropped:
            continue
        pkt = bytearray(b"\x00" + pack_frame(frame))
        if seq in corrupted:
            i = rng.randrange(1, len(pkt) - 1)
            pkt[i] = rng.choice([b for b in range(1, 256) if b != pkt[i]])
        chunks.append(bytes(pkt))
    return chunks, dropped, corrupted


class Pty:
    def __init__(self) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        self.path = os.ttyname(self.slave)

    def close(self) -> None:
        for fd in (self.master, self.slave):
            try:
                os.close(fd)
            except OSError:
                pass


def _poll_until(station, pred, timeout_s=10.0):
    end = time.monotonic() + timeout_s
    while time.monotonic() < end and not pred():
        station.poll()
    return pred()


def test_counts_dropped_and_corrupted_frames_exactly_and_records_everything(tmp_path):
    pty = Pty()
    record = tmp_path / "chase.jsonl"
    station = GroundStation(pty.path, 57600, record=record, read_timeout_s=0.05)
    chunks, dropped, corrupted = scripted_stream(120, seed=7, n_drop=9, n_corrupt=11)
    try:
        station.open()
        wire = b"".join(chunks)
        for i in range(0, len(wire), 97):  # odd-sized writes: frames straddle reads
            os.write(pty.master, wire[i:i + 97])
        good = 120 - 9 - 11
        assert _poll_until(station, lambda: station.reader.stats.frames_ok + station.reader.stats.corrupt
                           >= good + 11)
    finally:
        station.close()
        pty.close()
    s = station.summary()
    assert s["frames_ok"] == good and s["corrupt"] == 11 and s["lost"] == 9 + 11
    assert s["notice_frames"] == len([q for q in range(120) if q % 10 == 5
                                      and q not in dropped and q not in corrupted])
    assert isinstance(station.latest, StateFrame) and station.latest.seq == 119
    assert station.latest.sensors[1].stale and not station.latest.sensors[0].stale
    lines = read_ground_log(record)
    assert lines[0]["format"] == "livecoach-ground-log" and lines[0]["port"] == pty.path
    oks = [x for x in lines[1:] if x.get("ok")]
    bad = [x for x in lines[1:] if x.get("ok") is False]
    assert len(oks) == good and len(bad) == 11
    # every packet's bytes are kept as received, good and bad
    assert sorted(bytes.fromhex(x["raw_hex"]) for x in oks + bad) == sorted(c[1:-1] for c in chunks)
    assert {x["frame"]["seq"] for x in oks} == set(range(120)) - dropped - corrupted


def test_survives_the_modem_disappearing_and_reads_again_when_it_is_back(tmp_path):
    link = tmp_path / "livecoach-radio"
    first = Pty()
    os.symlink(first.path, link)
    station = GroundStation(str(link), record=tmp_path / "g.jsonl", read_timeout_s=0.05,
                            reopen_interval_s=0.1)
    second = None
    try:
        station.open()
        os.write(first.master, b"\x00" + pack_frame(state_frame(_state(0), 0)))
        assert _poll_until(station, lambda: station.reader.stats.frames_ok == 1)
        os.write(first.master, b"\x00" + pack_frame(state_frame(_state(1), 1))[:20])  # torn frame
        time.sleep(0.05)
        first.close()  # unplugged
        assert _poll_until(station, lambda: station.port_drops == 1 and not station.port_up)
        for _ in range(5):  # polling without a port neither raises nor spins
            assert station.poll() == []
        second = Pty()
        os.unlink(link)
        os.symlink(second.path, link)
        assert _poll_until(station, lambda: station.port_up)
        os.write(second.master, b"\x00" + pack_frame(state_frame(_state(2), 2)))
        assert _poll_until(station, lambda: station.reader.stats.frames_ok == 2)
    finally:
        station.close()
        first.close()
        if second is not None:
            second.close()
    s = station.summary()
    assert s["lost"] == 1 and s["corrupt"] == 0  # the torn frame was dropped at the reopen
    events = [x.get("port") for x in read_ground_log(tmp_path / "g.jsonl") if "port" in x]
    assert events[-2:] == ["lost", "back"]


def test_open_errors_are_clear(tmp_path):
    with pytest.raises(SourceError, match="cannot open radio port '/nonexistent/modem'"):
        GroundStation("/nonexistent/modem").open()
    with pytest.raises(RecordingError, match="cannot open ground record"):
        GroundStation("/dev/null", record=tmp_path / "no" / "such" / "dir.jsonl")


def test_a_torn_last_record_line_is_skipped_and_a_damaged_one_named(tmp_path):
    p = tmp_path / "g.jsonl"
    p.write_text('{"format": "livecoach-ground-log", "version": 1}\n{"ok": true}\n{"ok": tr')
    assert len(read_ground_log(p)) == 2
    p.write_text('{"format": "livecoach-ground-log", "version": 1}\nxx\n{"ok": true}\n')
    with pytest.raises(RecordingError, match=r"g.jsonl:2: not a JSON line"):
        read_ground_log(p)


def _run_ground(args, chunks, pty, timeout_s=60):
    """Start `livecoach ground`, wait until it listens, then send the chunks."""
    proc = subprocess.Popen([sys.executable, "-m", "livecoach", "ground", *args],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    first = proc.stderr.readline()
    assert "listening on" in first, first

    def send():
        for c in chunks:
            os.write(pty.master, c)
            time.sleep(0.002)

    t = threading.Thread(target=send, daemon=True)
    t.start()
    try:
        out, err = proc.communicate(timeout=timeout_s)
    finally:
        if proc.poll() is None:
            proc.kill()
    t.join(5)
    return proc.returncode, out, first + err


def test_cli_json_lines_record_and_exact_counts(tmp_path):
    pty = Pty()
    chunks, dropped, corrupted = scripted_stream(60, seed=11, n_drop=4, n_corrupt=6)
    good = 60 - 4 - 6
    record = tmp_path / "ground.jsonl"
    try:
        code, out, err = _run_ground(["--port", pty.path, "--json", "--record", str(record),
                                      "--frames", str(good), "--duration", "50"], chunks, pty)
    finally:
        pty.close()
    assert code == 0, err
    lines = [json.loads(x) for x in out.splitlines()]
    summary = lines[-1]
    assert summary["type"] == "summary"
    assert (summary["frames_ok"], summary["corrupt"], summary["lost"]) == (good, 6, 10)
    assert [x["type"] for x in lines[:-1]].count("fault") == 6
    states = [x for x in lines if x["type"] == "state"]
    assert states[-1]["seq"] == 59 and states[-1]["speed_mps"] == pytest.approx(15.59)
    assert states[-1]["sensors"][1] == {"channel": "serial.gps", "link_up": False, "stale": True,
                                        "age_s": 9.0}
    assert len(read_ground_log(record)) == 1 + good + 6


def test_cli_plain_lines_flag_stale_values(tmp_path):
    pty = Pty()
    state = LiveState(t_s=3.0, phase="trap", speed_mps=24.0, speed_stale=True, power_w=500.0,
                      power_stale=False, cue="hold")
    chunks = [b"\x00" + pack_frame(state_frame(state, 0)),
              b"\x00" + pack_frame(notice_frame(Notice(3.1, "alarm", "drag changed"), 1))]
    try:
        code, out, err = _run_ground(["--port", pty.path, "--frames", "2", "--duration", "50"],
                                     chunks, pty)
    finally:
        pty.close()
    assert code == 0, err
    assert "24.00 m/s (86.4 km/h) STALE" in out and "500/-- W" in out
    assert "ALARM: drag changed" in out
    assert "ground: 2 frames (1 state, 1 notice), lost 0, corrupt 0" in out


def test_cli_missing_port_is_a_clear_failure():
    proc = subprocess.run([sys.executable, "-m", "livecoach", "ground", "--port", "/nonexistent/tty"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 1
    assert "cannot open radio port '/nonexistent/tty'" in proc.stderr
    assert "Traceback" not in proc.stderr


def test_live_view_shows_values_and_flags_stale_ones():
    from rich.console import Console

    from livecoach.cli.commands.ground import _view

    clock = [1000.0]
    station = GroundStation("/dev/modem", clock=lambda: clock[0])
    station.take(b"\x00" + pack_frame(state_frame(_state(3), 3)))
    station.take(b"\x00" + pack_frame(notice_frame(Notice(102.0, "alarm", "drag changed"), 4)))
    console = Console(width=110, record=True, color_system=None)
    console.print(_view(station))
    text = console.export_text()
    assert "15.03 m/s  54.1 km/h" in text and "(stale)" not in text.split("speed")[1].split("\n")[0]
    assert "GPS STALE" in text and "power meter ok" in text
    assert "alarm: drag changed" in text and "frames 2  lost 0  corrupt 0" in text
    clock[0] += 10.0  # no frame for 10 s: every value is shown as old
    console = Console(width=110, record=True, color_system=None)
    console.print(_view(station))
    assert "15.03 m/s  54.1 km/h  (old)" in console.export_text()
