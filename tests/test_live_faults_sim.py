"""Frozen sensors, time jumps and non-finite times, through the live loop fed by the simulator.

The simulator (:class:`sim.source.SimSource`, lockstep, as fast as the CPU
allows, deterministic) feeds the real live loop running the full pipeline
with the run-up plan; the simulated rider follows the coach's target power.
On top of the scenario's own faults (frozen sensors: the ``stuck`` fault
repeats a payload byte for byte) the events are changed on their way:

* the module's process is paused for 25 s (an SD card blocking the whole
  board, swapping): nothing is read meanwhile, then everything the serial
  driver and the Bluetooth stack buffered arrives at once, stamped with the
  time the process woke up, so the receive clock jumps 25 s while the
  sensors' own clocks went on;
* events arrive with NaN and infinite receive times (a broken source);
* the wheel sensor restarts (a brown-out of its coin cell): its revolution
  counter and its event clock both start again from zero.

Expectations follow the module's documented rules: stale after 3 s without
a valid value (livecoach.pipeline.health); frozen GPS and mcu repeats are
rejected at once, a frozen power report with non-zero power after
``[decode] frozen_after_s`` = 2 s (livecoach.pipeline.decode); Bluetooth CSC
counters are free-running uint32 (Bluetooth SIG CSC service specification).
"""

from __future__ import annotations

import asyncio
import math

import pytest

from live_rig import Collector
from livecoach.codecs.csc import CscMeasurement, decode_csc, encode_csc
from livecoach.stream.events import CH_CSC, CH_GPS, CH_MCU, CH_POWER, RawEvent

FAULTS = """
[[fault]]
kind = "stuck"
channel = "power"
start_s = 60
duration_s = 10

[[fault]]
kind = "stuck"
channel = "gps"
start_s = 90
duration_s = 6

[[fault]]
kind = "stuck"
channel = "mcu"
start_s = 105
duration_s = 6

[[fault]]
kind = "stuck"
channel = "wheel"
start_s = 118
duration_s = 4
"""

JUMP_AT_S = 140.0
JUMP_S = 25.0
NAN_AT_S = 175.0
RESET_AT_S = 190.0


class Changed:
    """The simulation's events, changed on their way to the loop (see module doc)."""

    def __init__(self, sim) -> None:
        self.sim = sim
        self.injected = 0
        self.reset_base: int | None = None

    def __getattr__(self, name):
        return getattr(self.sim, name)

    def events(self):
        nan_done = False
        k = 0
        for ev in self.sim.events():
            t, payload = ev.t_s, ev.payload
            if ev.channel == CH_CSC and t >= RESET_AT_S:
                m = decode_csc(payload)
                if self.reset_base is None:
                    self.reset_base = (m.wheel_revolutions, m.last_wheel_event_ticks)
                revs0, ticks0 = self.reset_base
                payload = encode_csc(CscMeasurement.make(
                    wheel=(m.wheel_revolutions - revs0, (m.last_wheel_event_ticks - ticks0) & 0xFFFF)))
            if JUMP_AT_S <= t < JUMP_AT_S + JUMP_S:     # paused: buffered, read on waking up
                k += 1
                t = JUMP_AT_S + JUMP_S + 1e-6 * k
            if not nan_done and ev.t_s >= NAN_AT_S and ev.channel == CH_POWER:
                nan_done = True
                for bad_t in (math.nan, math.inf, -math.inf):
                    self.injected += 1
                    yield RawEvent(bad_t, ev.channel, payload)
            yield RawEvent(t, ev.channel, payload)


@pytest.fixture(scope="module")
def run():
    from livecoach.live.loop import LiveLoop
    from livecoach.plan import make_plan
    from sim.scenario import SCENARIO_DIR, parse_scenario_text
    from sim.source import SimSource

    text = (SCENARIO_DIR / "airspeed.toml").read_text(encoding="utf-8") + FAULTS
    sc = parse_scenario_text(text, "airspeed.toml + frozen sensors", SCENARIO_DIR)
    plan = make_plan(sc.ride)
    col = Collector()
    holder = {}
    source = SimSource(sc, speed=None, lockstep=True,
                       target_fn=lambda: holder["loop"].pipeline.state.target_power_w)
    changed = Changed(source.sim)
    source.sim = changed
    loop = LiveLoop(sc.ride, plan, [source], [col], clock=source.clock, tick_s=1e9)
    holder["loop"] = loop
    stats = asyncio.run(asyncio.wait_for(loop.run(), 300.0))
    return loop, stats, col, changed


def _health(col, channel, t0, t1):
    return [h for s in col.between(t0, t1) for h in s.sensors if h.channel == channel]


def _warnings_between(col, t0, t1):
    return [n.text for n in col.notices if n.kind == "warning" and t0 <= n.t_s < t1]


def test_the_run_completes_and_keeps_coaching(run):
    loop, stats, col, changed = run
    assert stats.sink_errors == {} and stats.sinks_disabled == []
    assert col.states[-1].phase == "done" and col.states[-1].trap_speed_mps > 10.0
    riding = [s for s in col.states if 5.0 <= s.t_s and s.phase in ("runup", "trap")]
    assert riding and all(s.target_power_w is not None and s.cue for s in riding)
    summary = loop.pipeline.summary()
    assert not any("decoder error" in w for w in summary["warnings"])   # no bug swallowed by the guard


def test_frozen_power_meter_is_flagged_then_recovers(run):
    _loop, _stats, col, _ = run
    # stuck from 60 s: reports accepted up to 2 s, stale 3 s after the last accepted one
    assert all(s.power_stale for s in col.between(65.5, 69.9))
    assert not any(s.power_stale for s in col.between(72.0, 88.0))
    texts = _warnings_between(col, 60.0, 73.0)
    assert "ble.cycling_power stale: no valid value" in texts and "ble.cycling_power values again" in texts
    # the W' balance did not integrate the frozen 10 s as fresh power
    assert _loop.pipeline.decoder.stats()[CH_POWER]["reasons"].get("frozen", 0) >= 10


@pytest.mark.parametrize("channel, start", [(CH_GPS, 90.0), (CH_MCU, 105.0)])
def test_frozen_gps_and_mcu_are_flagged(run, channel, start):
    _loop, _stats, col, _ = run
    during = _health(col, channel, start + 3.5, start + 5.9)
    assert during and all(h.stale for h in during)
    assert not any(h.stale for h in _health(col, channel, start + 8.0, start + 12.0))
    assert f"{channel} stale: no valid value" in _warnings_between(col, start, start + 7.0)


def test_a_frozen_wheel_sensor_is_not_mistaken_for_a_stop(run):
    """A stuck CSC payload looks like 'no new wheel event' (a stopped wheel): the
    repeats are accepted, so the channel is never flagged; what must not happen
    is a crash or a negative or absurd speed."""
    _loop, _stats, col, _ = run
    speeds = [s.speed_mps for s in col.between(118.0, 125.0)]
    assert speeds and all(v is not None and 0.0 <= v < 40.0 for v in speeds)


def test_a_paused_process_flags_every_sensor_once_and_recovers(run):
    _loop, _stats, col, _ = run
    wake = JUMP_AT_S + JUMP_S
    assert not col.between(JUMP_AT_S + 0.5, wake)                  # nothing was processed while paused
    texts = _warnings_between(col, wake - 0.1, wake + 2.0)
    for channel in (CH_POWER, CH_CSC, CH_GPS, CH_MCU):
        assert texts.count(f"{channel} values again") == 1, channel
    after = col.between(wake + 4.0, wake + 20.0)
    assert after and not any(s.power_stale or s.speed_stale for s in after)
    assert all(s.target_power_w is not None for s in after)
    # the wheel kept turning while the process slept: the distance catches up, speed is real
    d0 = col.between(JUMP_AT_S - 2.0, JUMP_AT_S)[-1].distance_m
    d1 = col.between(wake + 3.0, wake + 5.0)[0].distance_m
    v = col.between(JUMP_AT_S - 2.0, JUMP_AT_S)[-1].speed_mps
    assert d1 - d0 == pytest.approx(v * (JUMP_S + 3.0), rel=0.25)
    assert all(0.5 * v < s.speed_mps < 1.5 * v for s in after)


def test_non_finite_receive_times_are_rejected_without_touching_the_clock(run):
    loop, _stats, col, changed = run
    assert changed.injected == 3
    assert all(math.isfinite(s.t_s) for s in col.states)
    assert all(b.t_s >= a.t_s for a, b in zip(col.states, col.states[1:]))
    assert any("non-finite receive time" in w for w in loop.pipeline.summary()["warnings"])


def test_wheel_sensor_restart_is_absorbed(run):
    loop, _stats, col, changed = run
    assert changed.reset_base is not None and changed.reset_base[0] > 1000
    t = RESET_AT_S
    distances = [s.distance_m for s in col.between(t - 3.0, t + 8.0)]
    assert all(b >= a for a, b in zip(distances, distances[1:]))   # never steps back
    # and never jumps: over every half second it covers at most 10 % more than the speed
    # shown (the distance is that of the newest sample, so single states can lag an event)
    shown = col.between(t - 3.0, t + 8.0)
    for i, a in enumerate(shown):
        b = next((x for x in shown[i:] if x.t_s >= a.t_s + 0.5), None)
        if b is not None:
            assert b.distance_m - a.distance_m <= 1.1 * max(a.speed_mps, b.speed_mps) * (b.t_s - a.t_s)
    before = col.between(t - 2.0, t)[-1]
    v = before.speed_mps
    later = col.between(t + 4.0, t + 10.0)
    assert later and all(not s.speed_stale and 0.7 * v < s.speed_mps < 1.3 * v for s in later)
    # the revolutions counted after the restart still count, and the interval across the
    # restart is bridged at the speeds on both sides: no distance is lost
    assert later[0].distance_m - before.distance_m > 0.97 * v * (later[0].t_s - before.t_s)
    assert loop.pipeline.decoder.stats()[CH_CSC]["reasons"] == {"counter went backwards": 1}
