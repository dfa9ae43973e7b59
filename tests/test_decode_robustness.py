"""Decode-layer robustness: frozen sensors rejected and flagged, the health
snapshot's flags always current, a restarted wheel sensor absorbed.

A frozen sensor repeats its last payload byte for byte (the simulator's
``stuck`` fault does exactly that). Payloads are made with the project's
encoders (layouts checked against Bluetooth SIG vectors in tests/test_codec_*);
NMEA sentences carry the UTC time of the fix, lsl1 lines the microcontroller's
clock, so a repeat of either is never new data (NMEA 0183 RMC/GGA field 1 is
the UTC time; the lsl1 layout is in hardware_notes/).
"""

from __future__ import annotations

import random

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.codecs.csc import CscMeasurement, encode_csc
from livecoach.codecs.cycling_power import CyclingPowerMeasurement, encode_cycling_power
from livecoach.codecs.mcu_line import McuAir, McuHello, encode_mcu_line
from livecoach.codecs.nmea import encode_rmc
from livecoach.pipeline.decode import FROZEN, Decoder
from livecoach.pipeline.health import SNAPSHOT_REFRESH_S, HealthTracker
from livecoach.pipeline.processor import Pipeline
from livecoach.stream.events import CH_CSC, CH_GPS, CH_MCU, CH_POWER, CH_TICK, RawEvent
from livecoach.stream.samples import PowerSample, Rejected

RMC = encode_rmc(utc_time="054800.10", utc_date="170531", latitude_deg=31.2, longitude_deg=-113.5,
                 speed_mps=12.0, course_deg=12.0)


def _example_ride():
    import tomllib

    from livecoach.cli.commands.init import example_ride_text
    from livecoach.config.ridefile import parse_ride_dict

    return parse_ride_dict(tomllib.loads(example_ride_text()), "example ride")


def _kinds(samples):
    return [s.reason.split(":")[0] if isinstance(s, Rejected) else type(s).__name__ for s in samples]


def test_repeated_gps_sentence_and_mcu_line_are_frozen_but_hello_is_not():
    d = Decoder()
    assert _kinds(d.feed(RawEvent(1.0, CH_GPS, RMC))) == ["GpsSample"]
    assert _kinds(d.feed(RawEvent(1.02, CH_GPS, RMC))) == ["duplicate notification"]   # within 50 ms
    out = d.feed(RawEvent(1.1, CH_GPS, RMC))
    assert _kinds(out) == [FROZEN] and "not updating" in out[0].reason
    air = encode_mcu_line(McuAir(1_000_000, airspeed_mps=12.5))
    assert _kinds(d.feed(RawEvent(1.0, CH_MCU, air))) == ["AirSample"]
    assert _kinds(d.feed(RawEvent(1.2, CH_MCU, air))) == [FROZEN]
    hello = encode_mcu_line(McuHello(0, "fw1"))
    assert d.feed(RawEvent(2.0, CH_MCU, hello)) == []
    assert d.feed(RawEvent(2.5, CH_MCU, hello)) == []          # a second reboot is not a frozen sensor
    assert d.stats()[CH_GPS]["reasons"][FROZEN] == 1


def test_power_meter_frozen_only_with_nonzero_power_after_the_limit():
    d = Decoder()
    busy = encode_cycling_power(CyclingPowerMeasurement.make(310, crank=(40, 40 * 700)))
    kinds = [_kinds(d.feed(RawEvent(t, CH_POWER, busy)))[0] for t in (0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0)]
    # Accepted while the repeat is up to frozen_after_s (2 s) old; frozen after.
    assert kinds == ["PowerSample"] * 5 + [FROZEN, FROZEN]
    fresh = encode_cycling_power(CyclingPowerMeasurement.make(305, crank=(41, 41 * 700)))
    assert _kinds(d.feed(RawEvent(3.5, CH_POWER, fresh)))[0] == "PowerSample"   # moving again
    coasting = encode_cycling_power(CyclingPowerMeasurement.make(0))
    d2 = Decoder()
    assert all(isinstance(d2.feed(RawEvent(t * 0.5, CH_POWER, coasting))[0], PowerSample) for t in range(20))


def test_wheel_repeats_are_not_frozen():
    d = Decoder()
    stopped = encode_csc(CscMeasurement.make(wheel=(100, 5000)))
    out = [d.feed(RawEvent(t * 0.5, CH_CSC, stopped)) for t in range(12)]
    assert not any(isinstance(s, Rejected) for o in out for s in o)


def test_frozen_power_meter_goes_stale_in_the_pipeline_and_recovers():
    """A power meter stuck on 300 W for 8 s: the live state flags power as stale
    (stale limit 3 s after the last accepted report) and says so once; a fresh
    report clears the flag with a 'values again' notice."""
    pipe = Pipeline(_example_ride(), None, keep_for_batch=False)
    stuck = encode_cycling_power(CyclingPowerMeasurement.make(300, crank=(10, 10 * 700)))
    notices, flags = [], []
    t = 0.0
    for k in range(10):                       # 2 Hz, fresh reports
        t = k * 0.5
        pipe.feed(RawEvent(t, CH_POWER, encode_cycling_power(CyclingPowerMeasurement.make(
            300 + k, crank=(k, k * 700)))))
    for k in range(1, 17):                    # then the same bytes for 8 s
        t = 5.0 + k * 0.5
        for ev in (RawEvent(t, CH_POWER, stuck), RawEvent(t + 0.25, CH_TICK, b"")):
            r = pipe.feed(ev)
            notices += [n.text for n in r.notices]
            flags.append((ev.t_s, r.state.power_stale))
    r = pipe.feed(RawEvent(t + 0.5, CH_POWER, encode_cycling_power(CyclingPowerMeasurement.make(
        280, crank=(30, 30 * 700)))))
    notices += [n.text for n in r.notices]
    first_stale = min(ts for ts, f in flags if f)
    # last accepted repeat at 5.5 + 2.0 s (frozen_after_s), stale limit 3 s after it
    assert 10.5 < first_stale <= 11.0
    assert notices.count("ble.cycling_power stale: no valid value") == 1
    assert not r.state.power_stale and "ble.cycling_power values again" in notices
    assert pipe.summary()["warnings"] and any("frozen" in w for w in pipe.summary()["warnings"])


# ----------------------------------------------------------------- health snapshot
def _reference(h: HealthTracker, t_s: float) -> dict:
    """What the snapshot's flags must be at t_s, computed from scratch."""
    return {name: (ch.link_up, h.stale(name, t_s), ch.gaps) for name, ch in h._channels.items()}


ops = st.lists(st.tuples(st.sampled_from(["valid", "rejected", "link_up", "link_down", "tick"]),
                         st.sampled_from([CH_POWER, CH_CSC, CH_GPS]),
                         st.floats(0.0, 4.0, allow_nan=False)), max_size=60)


@settings(max_examples=200, deadline=None)
@given(ops)
def test_snapshot_flags_always_current_counters_at_most_refresh_old(sequence):
    h = HealthTracker()
    t = 0.0
    for op, channel, dt in sequence:
        t += dt
        if op == "valid":
            h.valid(channel, t)
        elif op == "rejected":
            h.rejected(channel)
        elif op == "link_up":
            h.link(channel, True)
        elif op == "link_down":
            h.link(channel, False)
        h.tick(t)                                   # the pipeline ticks before every snapshot
        snap = h.snapshot(t)
        ref = _reference(h, t)
        assert {s.channel: (s.link_up, s.stale, s.gaps) for s in snap} == ref
        for s in snap:
            ch = h._channels[s.channel]
            assert ch.accepted - s.accepted >= 0 and ch.rejected - s.rejected >= 0
            if s.age_s is not None:
                assert s.age_s >= 0.0
        # counters and ages are those of a full snapshot taken at most SNAPSHOT_REFRESH_S earlier
        assert 0.0 <= t - h._cache_t_s < SNAPSHOT_REFRESH_S


def test_snapshot_counts_refresh_within_the_limit():
    h = HealthTracker()
    rng = random.Random(8)
    t = 0.0
    for _ in range(400):
        t += rng.uniform(0.01, 0.1)
        h.valid(CH_GPS, t)
        h.tick(t)
        snap = h.snapshot(t)
        assert snap[0].accepted <= h._channels[CH_GPS].accepted
    h.snapshot(t + SNAPSHOT_REFRESH_S)
    assert h.snapshot(t + SNAPSHOT_REFRESH_S)[0].accepted == 400


# ----------------------------------------------------------------- sensor restart
def test_wheel_sensor_restart_keeps_distance_and_sensor_time_continuous():
    """A CSC sensor that restarts (coin-cell brown-out) begins both its uint32
    revolution counter and its 1/1024 s event clock again from zero (Bluetooth
    SIG CSC service: cumulative wheel revolutions, last wheel event time).
    The restart report itself is rejected; revolutions counted after it still
    count, and the unwrapped sensor time goes on by the receive-time gap."""
    d = Decoder()
    circ_revs_per_s = 10.0                          # 10 wheel revolutions per second
    samples = []
    for k in range(40):
        t = 100.0 + 0.5 * k
        n = int(circ_revs_per_s * t)
        ev_ticks = int(n / circ_revs_per_s * 1024)
        if t >= 110.0:                              # restart at 110 s: both counters from zero
            n -= 1100
            ev_ticks -= int(110.0 * 1024)
        samples.append(d.feed(RawEvent(t, CH_CSC, encode_csc(CscMeasurement.make(wheel=(n, ev_ticks & 0xFFFF))))))
    kinds = _kinds([s for out in samples for s in out])
    assert kinds.count("counter went backwards") == 1 and kinds.count("WheelSample") == 39
    wheel = [s for out in samples for s in out if not isinstance(s, Rejected)]
    revs = [s.wheel_revolutions for s in wheel]
    times = [s.wheel_event_time_s for s in wheel]
    assert all(b > a for a, b in zip(revs, revs[1:]))
    assert all(0.3 < b - a < 1.1 for a, b in zip(times, times[1:]))   # no jump of the sensor clock
    # 19.5 s of riding at 10 rev/s, less the 5 revolutions between the last report and the restart
    assert revs[-1] - revs[0] == pytest.approx(195 - 5, abs=2)


def test_garbage_that_looks_like_a_restart_adds_no_distance():
    d = Decoder()
    d.feed(RawEvent(0.0, CH_CSC, encode_csc(CscMeasurement.make(wheel=(500_000, 1000)))))
    d.feed(RawEvent(0.5, CH_CSC, encode_csc(CscMeasurement.make(wheel=(500_005, 1512)))))
    out = d.feed(RawEvent(1.0, CH_CSC, encode_csc(CscMeasurement.make(wheel=(400_000, 2000)))))
    assert _kinds(out) == ["counter went backwards"]
    out = d.feed(RawEvent(1.5, CH_CSC, encode_csc(CscMeasurement.make(wheel=(400_005, 2512)))))
    assert out[0].wheel_revolutions == 500_005 + 5        # the 400,000 were not counted
