"""Serial sources end to end through a real pseudo-terminal read by pyserial.

The "device" is the master side of an ``os.openpty()`` pair; the source
opens the slave through a symlink, as it would a udev name for a USB-serial
adapter. Unplugging closes the master and removes the symlink; plugging
back in makes a new pty and points the symlink at it. NMEA example sentence
from the NMEA 0183 literature (checksum verified by pynmea2 in
tests/test_codec_nmea.py).
"""

from __future__ import annotations

import asyncio
import os
import time
import tty

import pytest

from livecoach.codecs.mcu_line import McuAir, McuWheel, encode_mcu_line
from livecoach.pipeline.decode import Decoder
from livecoach.sources.serial_line import SerialLineSource, gps_source, mcu_source
from livecoach.stream.events import CH_GPS, CH_LINK, CH_MCU, RawEvent
from livecoach.stream.samples import AirSample, GpsSample, LinkSample, Rejected, WheelSample

RMC = b"$GPRMC,123519,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W*6A"
# The same fix one second later (checksum: XOR of the characters between "$" and "*",
# NMEA 0183; checked with pynmea2): a receiver never repeats a sentence byte for byte,
# and the decode layer rejects a repeat as a frozen sensor.
RMC_NEXT = b"$GPRMC,123520,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W*60"


class Device:
    """A serial device behind a symlink: plug in, write, unplug."""

    def __init__(self, link: str) -> None:
        self.link = link
        self.master: int | None = None

    def plug(self) -> None:
        master, slave = os.openpty()
        tty.setraw(slave)
        name = os.ttyname(slave)
        os.close(slave)
        if os.path.lexists(self.link):
            os.unlink(self.link)
        os.symlink(name, self.link)
        self.master = master

    def write(self, data: bytes) -> None:
        os.write(self.master, data)

    def unplug(self) -> None:
        os.close(self.master)
        self.master = None
        os.unlink(self.link)


async def _next(queue: asyncio.Queue, pred, timeout_s: float = 5.0) -> RawEvent:
    async def go():
        while True:
            ev = await queue.get()
            if pred(ev):
                return ev
    return await asyncio.wait_for(go(), timeout_s)


async def _collect(queue: asyncio.Queue, n: int, channel: str, timeout_s: float = 5.0) -> list[RawEvent]:
    out = []
    while len(out) < n:
        out.append(await _next(queue, lambda e: e.channel == channel, timeout_s))
    return out


def _link(state: str, channel: str):
    want = f"{channel} {state}".encode()
    return lambda e: e.channel == CH_LINK and e.payload == want


def test_gps_lines_unplug_and_replug(tmp_path):
    async def scenario():
        dev = Device(str(tmp_path / "livecoach-gps"))
        dev.plug()
        t0 = time.monotonic()

        def clock():  # injected clock: the module's clock with another origin
            return 100.0 + time.monotonic() - t0

        src = gps_source(dev.link, 9600, clock=clock, reconnect_s=0.05)
        queue: asyncio.Queue = asyncio.Queue()
        task = asyncio.create_task(src.run(queue))
        await _next(queue, _link("up", CH_GPS))
        # data written before the port was open would be lost; now it is open
        garbage = b"$GPRMC,12\xff\xfe,A*00"
        dev.write(RMC + b"\r\n" + garbage + b"\r\n\r\n" + RMC[:20])
        dev.write(RMC[20:] + b"\n")
        got = await _collect(queue, 3, CH_GPS)
        assert [e.payload for e in got] == [RMC, garbage, RMC]  # bytes kept exactly, CR LF removed
        assert all(e.t_s > 100.0 for e in got)
        assert got[0].t_s <= got[1].t_s <= got[2].t_s

        dev.write(RMC[:30])           # a line cut short by the unplug
        await asyncio.sleep(0.1)
        dev.unplug()
        await _next(queue, _link("down", CH_GPS))
        await _next(queue, _link("reconnecting", CH_GPS))
        await asyncio.sleep(0.2)      # a few failed reopen attempts
        dev.plug()
        await _next(queue, _link("up", CH_GPS))
        dev.write(RMC_NEXT + b"\r\n")
        again = await _collect(queue, 1, CH_GPS)
        assert again[0].payload == RMC_NEXT
        await src.stop()
        await asyncio.wait_for(task, 5.0)
        assert src.partial_lines_dropped == 1 and src.reconnects == 1
        dev.unplug()
        return got + again

    events = asyncio.run(scenario())
    d = Decoder()
    decoded = [s for e in events for s in d.feed(e)]
    assert [type(s) for s in decoded] == [GpsSample, Rejected, GpsSample, GpsSample]
    assert decoded[1].reason.startswith("not UTF-8")
    assert decoded[0].speed_mps == pytest.approx(22.4 * 1852 / 3600)


def test_mcu_lines_decode_and_port_missing_at_start(tmp_path):
    async def scenario():
        dev = Device(str(tmp_path / "livecoach-mcu"))
        src = mcu_source(dev.link, 115200, reconnect_s=0.05)
        queue: asyncio.Queue = asyncio.Queue()
        task = asyncio.create_task(src.run(queue))
        await _next(queue, _link("reconnecting", CH_MCU))   # nothing plugged in yet
        assert "cannot open" in src.last_error
        dev.plug()
        await _next(queue, _link("up", CH_MCU))
        lines = [encode_mcu_line(McuAir(1000, airspeed_mps=21.5)), encode_mcu_line(McuWheel(2000, 10, 1900)),
                 encode_mcu_line(McuWheel(250000, 14, 240000))]
        dev.write(b"".join(ln + b"\n" for ln in lines))
        got = await _collect(queue, 3, CH_MCU)
        await src.stop()
        await asyncio.wait_for(task, 5.0)
        dev.unplug()
        return lines, got

    lines, got = asyncio.run(scenario())
    assert [e.payload for e in got] == lines
    d = Decoder()
    samples = [s for e in got for s in d.feed(e)]
    assert [type(s) for s in samples] == [AirSample, WheelSample, WheelSample]
    assert samples[2].wheel_revolutions - samples[1].wheel_revolutions == 4


def test_overlong_line_is_passed_on_for_rejection(tmp_path):
    async def scenario():
        dev = Device(str(tmp_path / "noise"))
        dev.plug()
        src = SerialLineSource(dev.link, 9600, CH_GPS, max_line_bytes=64, reconnect_s=0.05)
        queue: asyncio.Queue = asyncio.Queue()
        task = asyncio.create_task(src.run(queue))
        await _next(queue, _link("up", CH_GPS))
        dev.write(b"\x00" * 200)   # line noise without a newline
        ev = await _next(queue, lambda e: e.channel == CH_GPS)
        await src.stop()
        await asyncio.wait_for(task, 5.0)
        dev.unplug()
        return ev, src

    ev, src = asyncio.run(scenario())
    assert len(ev.payload) == 64 and src.overlong_lines >= 1
    assert isinstance(Decoder().feed(ev)[0], Rejected)


def test_link_events_decode():
    d = Decoder()
    assert d.feed(RawEvent(0.0, CH_LINK, b"serial.gps reconnecting")) == [LinkSample(0.0, CH_GPS, "reconnecting")]
