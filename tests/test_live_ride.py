"""End to end: `livecoach ride` reads real serial ports (pseudo-terminals fed by
`livecoach sim`), records every line, and the recording replays.

Only the serial sensors have a serial form (GPS NMEA and the microcontroller's
lsl1 lines); the BLE sensors are exercised in tests/test_sources_ble.py.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import time
from pathlib import Path

import pytest

from livecoach.recording import read_recording

pytestmark = pytest.mark.slow

LIVECOACH = [sys.executable, "-m", "livecoach"]


def _ride_file(tmp_path: Path, gps_port: str, mcu_port: str) -> Path:
    from livecoach.cli.commands.init import example_ride_text

    text = example_ride_text()
    text = text.replace('gps_port = ""', f'gps_port = "{gps_port}"')
    text = text.replace('mcu_port = ""', f'mcu_port = "{mcu_port}"')
    text = text.replace('directory = "recordings"', f'directory = "{tmp_path / "rec"}"')
    text += "\n[web]\nenabled = false\n"
    path = tmp_path / "ride.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_ride_records_serial_sensors_and_replays(tmp_path):
    sim = subprocess.Popen(
        LIVECOACH + ["sim", "airspeed", "--speed", "4", "--duration-s", "120", "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    try:
        ports: dict[str, str] = {}
        deadline = time.monotonic() + 30
        while len(ports) < 2 and time.monotonic() < deadline:
            line = sim.stdout.readline()
            if not line:
                break
            m = re.match(r"(gps|mcu)\s+(/dev/\S+)", line.strip())
            if m:
                ports[m.group(1)] = m.group(2)
        assert set(ports) == {"gps", "mcu"}, f"simulator printed no ports: {ports}"
        ride = _ride_file(tmp_path, ports["gps"], ports["mcu"])
        out = subprocess.run(
            LIVECOACH + ["ride", "--config", str(ride), "--duration", "6", "--no-display", "--mute"],
            capture_output=True, text=True, timeout=120,
        )
        assert out.returncode == 0, out.stderr
    finally:
        sim.kill()
        sim.wait(timeout=10)
    recordings = list((tmp_path / "rec").glob("*.lcrec"))
    assert len(recordings) == 1
    header, events, warnings = read_recording(recordings[0])
    channels = {ev.channel for ev in events}
    assert "serial.gps" in channels and "serial.mcu" in channels
    gps_lines = [ev.payload for ev in events if ev.channel == "serial.gps"]
    assert all(line.startswith(b"$G") for line in gps_lines[:20])
    rep = subprocess.run(LIVECOACH + ["replay", str(recordings[0]), "--json"],
                         capture_output=True, text=True, timeout=120)
    assert rep.returncode == 0, rep.stderr
    summary = json.loads(rep.stdout)
    assert summary["samples"] > 20
    assert summary["duration_s"] > 3.0
