"""Faults at the sensors, through the live loop with the real sources (issue 8).

The bench rig (tests/live_rig.py) plays a simulated run-up (the default
scenario, scripted rider) through bleak's front end with a test backend
(power meter, wheel sensor) and through pseudo-terminals read by pyserial
(GPS, microcontroller), ten-odd times faster than real time; the live loop
runs the full pipeline with the run-up plan. Faults are made at the
transports: radio links lost and found again, serial adapters unplugged and
plugged back, garbage bytes, numbers that are not numbers. Through all of
them the loop must keep coaching (a target power and a cue on every state)
and flag what is degraded (stale flags in the live state, warnings as notices).

Expectations come from the module's documented rules: a channel with no
valid value for 3 s is stale (livecoach.pipeline.health, from 1-4 Hz
notification rates, common practice); a lost link is stale at once; BLE
reconnects with back-off; lsl1 numbers are plain decimals (hardware_notes/);
NMEA 0183 sentences carry a checksum.
"""

from __future__ import annotations

import asyncio
import dataclasses
import random
import time

import pytest

from live_rig import (
    CSC_ADDRESS,
    POWER_ADDRESS,
    RADIO,
    Collector,
    Peripheral,
    PtyDevice,
    Rig,
    RigClient,
    RigClock,
)
from livecoach.codecs.mcu_line import crc16_ccitt_false
from livecoach.live.loop import LiveLoop
from livecoach.sources.ble import BleSensorSource
from livecoach.sources.serial_line import gps_source, mcu_source
from livecoach.stream.events import CH_CSC, CH_GPS, CH_MCU, CH_POWER

SPEED = 10.0          # simulated seconds per wall second


@pytest.fixture(scope="module")
def plan_and_scenario():
    from livecoach.plan import make_plan
    from sim.scenario import load_scenario

    sc = load_scenario("airspeed")     # the default run-up with an air-speed probe on the mcu line
    sc = dataclasses.replace(sc, rider=dataclasses.replace(sc.rider, mode="scripted"),
                             run=dataclasses.replace(sc.run, tick_hz=0.0))
    return sc, make_plan(sc.ride)


def _radio() -> None:
    RADIO.clear()
    RADIO[POWER_ADDRESS] = Peripheral(POWER_ADDRESS, "power")
    RADIO[CSC_ADDRESS] = Peripheral(CSC_ADDRESS, "csc")


def _ble_sources(clock):
    allow = [POWER_ADDRESS, CSC_ADDRESS]
    return [BleSensorSource(a, k, allow_list=allow, clock=clock, backend=RigClient, connect_timeout_s=2.0,
                            backoff_s=(0.02, 0.05)) for a, k in ((POWER_ADDRESS, "power"), (CSC_ADDRESS, "csc"))]


def _run(sc, plan, tmp_path, actions, until_s, *, with_mcu=False):
    from sim.run import iter_events

    ride = sc.ride
    clock = RigClock(SPEED, origin_s=-3.0)     # 3/SPEED s of wall time for the sources to connect
    gps = PtyDevice(tmp_path / "livecoach-gps")
    gps.plug()
    mcu = None
    sources = _ble_sources(clock) + [gps_source(gps.link, 115200, clock=clock, reconnect_s=0.02,
                                                read_timeout_s=0.01)]
    if with_mcu:
        mcu = PtyDevice(tmp_path / "livecoach-mcu")
        mcu.plug()
        sources.append(mcu_source(mcu.link, 115200, clock=clock, reconnect_s=0.02, read_timeout_s=0.01))
    col = Collector()
    loop = LiveLoop(ride, plan, sources, [col], clock=clock, tick_s=0.25 / SPEED)
    rig = Rig(iter_events(sc), clock, gps=gps, mcu=mcu, until_s=until_s)
    rig.actions = sorted(((t, (lambda f=f: f(rig))) for t, f in actions), key=lambda a: a[0])

    async def main():
        stop = asyncio.Event()

        async def play():
            try:
                await rig.run()
                await asyncio.sleep(0.2)                  # the last lines through the pty
                while not loop.queue.empty():             # let the loop catch up before stopping
                    await asyncio.sleep(0.02)
            finally:
                stop.set()

        task = asyncio.create_task(play())
        stats = await asyncio.wait_for(loop.run(stop), timeout=until_s / SPEED + 120.0)
        await task
        return stats

    try:
        stats = asyncio.run(main())
    finally:
        gps.unplug()
        if mcu is not None:
            mcu.unplug()
    return loop, stats, col, rig, sources


def _coaching_throughout(col: Collector, t0: float, t1: float) -> None:
    """A target power and a cue on every state in [t0, t1): the loop kept coaching."""
    states = col.between(t0, t1)
    assert len(states) > 10 * (t1 - t0)               # events kept flowing (GPS alone is 20 per s)
    assert all(s.target_power_w is not None and s.cue for s in states)


# ------------------------------------------------------------------ BLE
def test_ble_disconnect_reconnect_cycles_through_the_loop(plan_and_scenario, tmp_path):
    sc, plan = plan_and_scenario
    _radio()

    def drop(address):
        return lambda rig: rig.in_loop(RADIO[address].drop)

    def back(address):
        def f(rig):
            rig.in_loop(lambda: setattr(RADIO[address], "in_range", True))
        return f

    power_out = [(10.0, 16.0), (26.0, 32.0), (42.0, 48.0)]
    csc_out = [(19.0, 25.0), (35.0, 41.0)]
    actions = [(a, drop(POWER_ADDRESS)) for a, _ in power_out] + [(b, back(POWER_ADDRESS)) for _, b in power_out]
    actions += [(a, drop(CSC_ADDRESS)) for a, _ in csc_out] + [(b, back(CSC_ADDRESS)) for _, b in csc_out]
    loop, stats, col, rig, sources = _run(sc, plan, tmp_path, actions, until_s=56.0)

    assert stats.sink_errors == {} and stats.sinks_disabled == []
    texts = col.texts("warning")
    # every outage is announced, once each: link down, reconnecting, stale after 3 s, values again
    for channel, outages in ((CH_POWER, power_out), (CH_CSC, csc_out)):
        n = len(outages)
        assert texts.count(f"{channel} link down") == n
        assert texts.count(f"{channel} link reconnecting") == n
        assert texts.count(f"{channel} stale: no valid value") == n
        assert texts.count(f"{channel} values again") == n
    assert [s.connects for s in sources[:2]] == [4, 3]
    # the power flag follows the radio link
    for a, b in power_out:
        during = col.between(a + 1.0, b - 0.5)
        assert during and all(s.power_stale for s in during), (a, b)
        after = col.between(b + 2.0, b + 6.0)
        assert after and not any(s.power_stale for s in after), (a, b)
        assert all(not h.link_up for s in during for h in s.sensors if h.channel == CH_POWER)
    # the GPS keeps speed alive while the wheel sensor is away
    for a, b in csc_out:
        during = col.between(a + 1.0, b - 0.5)
        assert during and not any(s.speed_stale for s in during)
        assert all(s.speed_mps is not None and s.speed_mps > 1.0 for s in during)
    _coaching_throughout(col, 5.0, 55.0)
    distances = [s.distance_m for s in col.between(5.0, 56.0)]
    assert distances[-1] > distances[0] + 300.0
    # Distance may step back a little when speed passes from the wheel to the GPS
    # (dead reckoning restarts); never by more than a couple of metres.
    assert all(b >= a - 2.0 for a, b in zip(distances, distances[1:]))
    assert rig.delivery.lost.get(CH_POWER, 0) > 0 and rig.delivery.lost.get(CH_GPS, 0) == 0


# ------------------------------------------------------------------ serial
def _mcu_line(body: str) -> bytes:
    """An lsl1 line with a correct CRC-16/CCITT-FALSE (so only the content is wrong)."""
    raw = body.encode("ascii")
    return raw + b" #%04X\n" % crc16_ccitt_false(raw)


def test_serial_unplug_replug_garbage_and_non_numbers_through_the_loop(plan_and_scenario, tmp_path):
    sc, plan = plan_and_scenario
    _radio()
    rng = random.Random(20310601)

    def garbage(rig):
        gps = rig.gps
        burst = [bytes(rng.randrange(256) for _ in range(rng.randrange(5, 60))) for _ in range(12)]
        burst.append(b"$GPRMC,054900.00,A,3112.5,N,11333.1,W,20.0,12.0,170531,,,A*00")   # bad checksum
        for b in burst:
            gps.write(b.replace(b"\n", b"") + b"\r\n")
        for _ in range(3):                          # 6000 bytes without a line end, in pieces
            gps.write(b"x" * 2000)
            time.sleep(0.01)
        gps.write(b"\r\n")

    def not_numbers(rig):
        mcu = rig.mcu
        for body in ("lsl1 air 51000000 as=nan", "lsl1 air 51000100 as=inf p=85000.0",
                     "lsl1 air 51000200 as=1e3", "lsl1 air 51000300 as=-nan t=20.0",
                     "lsl1 air 51000400 as=99999.0", "lsl1 whl 51000500 n=12 e=4294967296"):
            mcu.write(_mcu_line(body))
        mcu.write(b"lsl1 air 51000600 as=12.000 #0000\n")                                # bad CRC

    actions = [
        (12.0, lambda rig: rig.gps.unplug()), (18.0, lambda rig: rig.gps.plug()),
        (22.0, garbage), (26.0, not_numbers),
        (30.0, lambda rig: rig.mcu.unplug()), (35.0, lambda rig: rig.mcu.plug()),
        (38.0, lambda rig: rig.gps.unplug()), (41.0, lambda rig: rig.gps.plug()),
        (44.0, garbage),
    ]
    loop, stats, col, rig, sources = _run(sc, plan, tmp_path, actions, until_s=52.0, with_mcu=True)

    assert stats.sink_errors == {}
    texts = col.texts("warning")
    assert texts.count(f"{CH_GPS} link down") == 2 and texts.count(f"{CH_GPS} link reconnecting") == 2
    assert texts.count(f"{CH_MCU} link down") == 1
    assert texts.count(f"{CH_GPS} stale: no valid value") >= 1 and texts.count(f"{CH_MCU} values again") == 1
    gps_src, mcu_src = sources[2], sources[3]
    assert gps_src.reconnects == 2 and mcu_src.reconnects == 1 and gps_src.overlong_lines >= 1
    # the GPS flag: stale while unplugged (6 s), fresh again after
    gps_health = [(s.t_s, h) for s in col.states for h in s.sensors if h.channel == CH_GPS]
    assert all(not h.link_up for t, h in gps_health if 12.5 < t < 17.5)
    assert all(h.stale for t, h in gps_health if 12.5 < t < 17.5)
    assert all(not h.stale for t, h in gps_health if 20.0 < t < 22.0)
    # every bad line was rejected with its reason, none crashed anything
    stats_by_channel = loop.pipeline.decoder.stats()
    gps_reasons = stats_by_channel[CH_GPS]["reasons"]
    assert gps_reasons.get("not UTF-8", 0) + gps_reasons.get("malformed", 0) >= 20
    assert gps_reasons.get("bad checksum", 0) >= 2
    mcu_reasons = stats_by_channel[CH_MCU]["reasons"]
    assert mcu_reasons.get("malformed", 0) >= 4          # nan, inf, 1e3, -nan: not plain decimals
    assert mcu_reasons.get("out of range", 0) >= 2       # as 99999 m/s, e beyond 32 bits
    assert mcu_reasons.get("bad checksum", 0) >= 1
    # air speed stayed a real number throughout
    air = [s.airspeed_mps for s in col.states if s.airspeed_mps is not None]
    assert air and all(0.0 <= a < 60.0 for a in air)
    _coaching_throughout(col, 5.0, 51.0)
    summary = loop.pipeline.summary()
    assert summary["rejected_samples"] >= 30
    assert summary["sensor_gaps"][CH_GPS]["count"] >= 1
