"""Real-time mode: the simulated GPS and microcontroller read through pseudo-terminals.

The reader side uses pyserial (and, for a port the test owns, the pty master
directly), as another process or the on-board computer would; sentences are
checked with pynmea2 and the line protocol's CRC with crcmod's
CRC-16/CCITT-FALSE.
"""

from __future__ import annotations

import os
import select
import subprocess
import sys
import threading
import time

import crcmod.predefined
import pynmea2
import pytest
import serial

from sim.realtime import run_realtime
from sim.scenario import load_scenario

LIVECOACH = [sys.executable, "-m", "livecoach"]


def _read_names(proc: subprocess.Popen, want: int, timeout_s: float = 20.0) -> dict[str, str]:
    names: dict[str, str] = {}
    deadline = time.monotonic() + timeout_s
    while len(names) < want and time.monotonic() < deadline:
        line = proc.stdout.readline()
        if not line:
            break
        label, _, name = line.strip().partition(" ")
        if label in ("gps", "mcu"):
            names[label] = name
    return names


def test_sim_creates_a_pty_and_plays_nmea_at_the_requested_pace():
    proc = subprocess.Popen(LIVECOACH + ["sim", "default", "--speed", "2", "--quiet"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        names = _read_names(proc, 1)
        assert set(names) == {"gps"}, proc.stderr.read() if proc.poll() is not None else names
        port = serial.Serial(names["gps"], baudrate=115200, timeout=0.2)
        lines = []
        t0 = time.monotonic()
        while time.monotonic() - t0 < 2.5:
            line = port.readline()
            if line.endswith(b"\r\n"):
                lines.append((time.monotonic() - t0, line))
        wall_s = lines[-1][0] - lines[0][0]
        port.close()
    finally:
        proc.terminate()
        proc.wait(timeout=10)
    rmc = [pynmea2.parse(l.decode("ascii").strip(), check=True) for _, l in lines if b"RMC" in l]
    assert len(rmc) > 20
    # 10 fixes per simulated second at 2x: 20 per wall second (+-25 %, a busy machine)
    rate = (len(rmc) - 1) / wall_s
    assert 15.0 < rate < 25.0
    # The fix times inside the sentences advance at twice the wall clock.
    t_first = rmc[0].timestamp
    t_last = rmc[-1].timestamp
    sim_s = (t_last.hour * 3600 + t_last.minute * 60 + t_last.second + t_last.microsecond / 1e6) - (
        t_first.hour * 3600 + t_first.minute * 60 + t_first.second + t_first.microsecond / 1e6)
    assert sim_s / wall_s == pytest.approx(2.0, rel=0.25)
    assert all(m.status == "A" for m in rmc)


def _drain(fd: int, done: threading.Event, limit_s: float = 30.0) -> bytes:
    """Read a pty master until ``done`` is set and nothing more comes for 0.2 s."""
    out = bytearray()
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        r, _, _ = select.select([fd], [], [], 0.2)
        if r:
            try:
                out += os.read(fd, 65536)
            except OSError:
                break
        elif done.is_set():
            break
    return bytes(out)


def test_sim_writes_to_given_ports_and_stops_after_the_duration():
    gps_master, gps_slave = os.openpty()
    mcu_master, mcu_slave = os.openpty()
    try:
        gps_name, mcu_name = os.ttyname(gps_slave), os.ttyname(mcu_slave)
        proc = subprocess.Popen(
            LIVECOACH + ["sim", "airspeed", "--serial", gps_name, "--mcu-serial", mcu_name,
                         "--speed", "4", "--duration-s", "6"],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        results: dict[str, bytes] = {}
        done = threading.Event()
        readers = [threading.Thread(target=lambda k=k, fd=fd: results.__setitem__(k, _drain(fd, done)))
                   for k, fd in (("gps", gps_master), ("mcu", mcu_master))]
        for r in readers:
            r.start()
        out, err = proc.communicate(timeout=60)
        done.set()
        for r in readers:
            r.join()
    finally:
        for fd in (gps_master, gps_slave, mcu_master, mcu_slave):
            os.close(fd)
    assert proc.returncode == 0, err
    assert f"gps {gps_name}" in out and f"mcu {mcu_name}" in out
    assert "(duration)" in out
    gps_lines = [l for l in results["gps"].split(b"\r\n") if l]
    n_rmc = sum(1 for l in gps_lines if b"RMC" in l)
    assert n_rmc == pytest.approx(60, abs=3)            # 6 simulated seconds at 10 Hz
    for l in gps_lines:
        pynmea2.parse(l.decode("ascii"), check=True)
    crc = crcmod.predefined.mkCrcFun("crc-ccitt-false")
    mcu_lines = [l for l in results["mcu"].split(b"\n") if l]
    assert mcu_lines[0].startswith(b"lsl1 hlo ")
    air = 0
    for l in mcu_lines:
        body, _, tail = l.rpartition(b" #")
        assert int(tail, 16) == crc(body)
        air += b" as=" in l
    assert air == pytest.approx(60, abs=3)              # the probe at 10 Hz


def test_run_realtime_keeps_the_schedule_with_an_injected_clock():
    # Pacing logic alone, no waiting: a fake clock that sleep() advances.
    now = [100.0]
    sleeps = []

    def clock() -> float:
        return now[0]

    def sleep(dt: float) -> None:
        sleeps.append(dt)
        now[0] += dt

    got = []
    ready = threading.Event()
    lines_seen: list[bytes] = []

    def announce(text: str) -> None:
        got.append(text)
        if text.startswith("gps "):
            port = serial.Serial(text.split()[1], timeout=0.05)
            ready.set()

            def reader() -> None:
                deadline = time.monotonic() + 5.0
                while time.monotonic() < deadline and len(lines_seen) < 40:
                    try:
                        line = port.readline()
                    except serial.SerialException:      # the writer hung up: end of data
                        break
                    if line:
                        lines_seen.append(line)
                port.close()

            threading.Thread(target=reader, daemon=True).start()

    stats = run_realtime(load_scenario("default"), speed=2.0, duration_s=2.0, announce=announce,
                         status_every_s=1.0, clock=clock, sleep=sleep)
    assert ready.is_set()
    assert stats.end_reason == "duration"
    # 2 simulated seconds at 2x: the last line went out about 1 s after the start.
    assert now[0] - 100.0 == pytest.approx(stats.sim_t_s / 2.0, abs=1e-9)
    assert stats.sim_t_s == pytest.approx(2.0, abs=0.1)
    assert stats.late_s == 0.0
    assert stats.lines["gps"] == 40 and stats.dropped["gps"] == 0
    assert any(t.startswith("t ") for t in got)          # status lines
    deadline = time.monotonic() + 5.0
    while len(lines_seen) < 40 and time.monotonic() < deadline:
        time.sleep(0.05)
    assert len(lines_seen) == 40
