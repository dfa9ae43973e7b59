"""The decode layer: raw events -> samples, never raising, counting rejects.

Payloads are made with the project's encoders, whose byte layouts are checked
against hand-built Bluetooth SIG vectors and pycycling in tests/test_codec_*.
Speeds are checked against the CSCS v1.0 formula (delta revolutions x
circumference / delta event time) on a simulated wheel.
"""

from __future__ import annotations

import random
import tomllib

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.cli.commands.init import example_ride_text
from livecoach.codecs.csc import CscMeasurement, encode_csc
from livecoach.codecs.cycling_power import CyclingPowerMeasurement, encode_cycling_power
from livecoach.codecs.heart_rate import HeartRateMeasurement, encode_heart_rate
from livecoach.codecs.mcu_line import McuAir, McuButton, McuHello, McuWheel, encode_mcu_line
from livecoach.codecs.nmea import encode_rmc, nmea_checksum
from livecoach.codecs.revolutions import ticks_from_time_s
from livecoach.config.ridefile import parse_ride_dict
from livecoach.errors import ConfigError
from livecoach.pipeline.decode import Decoder
from livecoach.stream.events import (
    ALL_CHANNELS,
    CH_CONTROL,
    CH_CSC,
    CH_GPS,
    CH_HEART_RATE,
    CH_LINK,
    CH_MCU,
    CH_POWER,
    CH_TICK,
    RawEvent,
)
from livecoach.stream.samples import (
    AirSample,
    CadenceSample,
    GpsSample,
    HeartRateSample,
    LinkSample,
    MarkerSample,
    PowerSample,
    Rejected,
    WheelSample,
)


def _ride(extra: str = ""):
    return parse_ride_dict(tomllib.loads(example_ride_text() + extra), "test ride")


def _types(samples):
    return [type(s) for s in samples]


def test_power_meter_payload_gives_power_cadence_and_wheel():
    d = Decoder(_ride())
    m1 = CyclingPowerMeasurement.make(250, wheel=(100, 2048), crank=(10, 1024), pedal_balance_pct=51.0)
    m2 = CyclingPowerMeasurement.make(262, wheel=(108, 2048 * 2), crank=(11, 1024 + 640), pedal_balance_pct=50.0)
    out1 = d.feed(RawEvent(1.0, CH_POWER, encode_cycling_power(m1)))
    assert _types(out1) == [PowerSample, WheelSample]
    out2 = d.feed(RawEvent(2.0, CH_POWER, encode_cycling_power(m2)))
    assert _types(out2) == [PowerSample, CadenceSample, WheelSample]
    p = out2[0]
    assert (p.power_w, p.pedal_balance_pct, p.crank_revolutions, p.crank_event_time_s) == (262.0, 50.0, 11, 1.625)
    assert out2[1].cadence_rpm == pytest.approx(60.0 / 0.625)
    w = out2[2]
    assert (w.wheel_revolutions, w.wheel_event_time_s, w.source) == (108, 2.0, "power")


def test_accumulated_crank_torque_gives_energy():
    # CPS v1.1: accumulated torque (1/32 N*m) with crank-based source; energy = 2*pi*torque (common practice).
    d = Decoder()
    e = []
    for k, torque_nm in enumerate((1000.0, 1500.0, 2100.0)):  # crosses the uint16 rollover at 2048 N*m
        m = CyclingPowerMeasurement.make(300, crank=(k, k * 700), accumulated_torque_nm=torque_nm,
                                         torque_crank_based=True)
        e.append(d.feed(RawEvent(float(k), CH_POWER, encode_cycling_power(m)))[0].accumulated_energy_j)
    assert e[1] - e[0] == pytest.approx(2 * 3.141592653589793 * 500.0)
    assert e[2] - e[1] == pytest.approx(2 * 3.141592653589793 * 600.0)


def test_csc_speed_from_sensor_event_times_across_rollovers():
    circ = 1.47
    speed = 27.0
    d = Decoder(_ride())
    rng = random.Random(3)
    period = circ / speed
    samples = []
    t = 0.0
    while t < 150.0:  # more than two 64 s event-time rollovers
        t += 0.25
        k = int(t / period)
        payload = encode_csc(CscMeasurement.make(wheel=(k + 4_294_967_000, ticks_from_time_s(k * period, 1024))))
        out = d.feed(RawEvent(t + rng.uniform(0.0, 0.08), CH_CSC, payload))  # jittered arrival
        samples += [s for s in out if isinstance(s, WheelSample)]
    assert samples[-1].wheel_revolutions > 2**32   # the uint32 counter wrapped too
    speeds = [
        (b.wheel_revolutions - a.wheel_revolutions) * circ / (b.wheel_event_time_s - a.wheel_event_time_s)
        for a, b in zip(samples, samples[1:])
    ]
    assert len(speeds) > 500
    assert max(abs(v - speed) for v in speeds) < speed * (1 / 1024) / 0.2   # one tick over >= 0.2 s


def test_cadence_goes_to_zero_when_crank_stops():
    d = Decoder()
    out = []
    for i, (revs, ticks) in enumerate([(1, 100), (2, 800), (2, 800), (2, 800), (2, 800), (2, 800)]):
        out.append(d.feed(RawEvent(float(i), CH_CSC, encode_csc(CscMeasurement.make(crank=(revs, ticks))))))
    assert out[0] == []
    assert out[1][0].cadence_rpm == pytest.approx(60 / (700 / 1024))
    assert out[2] == [] and out[3] == [] and out[4] == []          # within the 3 s stop time
    assert out[5] == [CadenceSample(5.0, 0.0)]


def test_bad_power_rejected_but_rest_of_payload_used():
    d = Decoder()
    out = d.feed(RawEvent(0.0, CH_POWER, encode_cycling_power(CyclingPowerMeasurement.make(4500, wheel=(1, 2)))))
    assert _types(out) == [Rejected, WheelSample]
    assert out[0].reason.startswith("out of range: power 4500 W")
    st_ = d.stats()[CH_POWER]
    assert st_["accepted"] == 1 and st_["rejected"] == 1 and st_["reasons"] == {"out of range": 1}


@pytest.mark.parametrize(
    "channel, payload, reason",
    [
        (CH_POWER, b"\x10\x00\xfa\x00\x01", "truncated: 2A63"),
        (CH_POWER, b"\x00\x20\xfa\x00", "reserved bits set"),
        (CH_CSC, b"", "truncated"),
        (CH_CSC, b"\x01\x00\x00\x00\x00\x00\x00\x00", "wrong length"),
        (CH_HEART_RATE, b"\x10\x48\x00", "wrong length"),
        (CH_GPS, b"$GPRMC,123519,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W*6B", "bad checksum"),
        (CH_GPS, b"$GPRMC,\xff\xfe*00", "not UTF-8"),
        (CH_MCU, b"lsl1 btn 5 id=mark #0000", "bad checksum"),
        (CH_MCU, b"\x00\x01\x02", "malformed"),
        (CH_LINK, b"ble.csc sideways", "malformed"),
        (CH_LINK, b"\xff", "not UTF-8"),
        (CH_CONTROL, b"launch", "unsupported"),
        ("serial.unknown", b"x", "unknown channel"),
    ],
)
def test_bad_payloads_become_rejected_with_reason(channel, payload, reason):
    d = Decoder()
    out = d.feed(RawEvent(1.0, channel, payload))
    assert len(out) == 1 and isinstance(out[0], Rejected)
    assert out[0].reason.startswith(reason) and out[0].channel == channel
    assert d.stats()[channel]["rejected"] == 1


def test_duplicate_notification_and_time_going_backwards():
    d = Decoder()
    p = encode_csc(CscMeasurement.make(wheel=(10, 1000)))
    assert _types(d.feed(RawEvent(1.00, CH_CSC, p))) == [WheelSample]
    assert d.feed(RawEvent(1.01, CH_CSC, p))[0].reason.startswith("duplicate notification")
    assert _types(d.feed(RawEvent(1.50, CH_CSC, p))) == [WheelSample]   # a repeat later is "no new event"
    back = d.feed(RawEvent(1.2, CH_CSC, encode_csc(CscMeasurement.make(wheel=(11, 1500)))))
    assert back[0].reason.startswith("time went backwards")
    # Receive times of different channels may interleave: not an error.
    assert _types(d.feed(RawEvent(1.3, CH_POWER, encode_cycling_power(CyclingPowerMeasurement.make(100))))) == [PowerSample]
    assert d.stats()[CH_CSC]["reasons"] == {"duplicate notification": 1, "time went backwards": 1}


def test_counter_reset_and_inconsistent_wheel_data():
    d = Decoder()
    d.feed(RawEvent(0.0, CH_CSC, encode_csc(CscMeasurement.make(wheel=(5000, 100)))))
    out = d.feed(RawEvent(1.0, CH_CSC, encode_csc(CscMeasurement.make(wheel=(3, 900)))))
    assert out[0].reason.startswith("counter went backwards")
    out = d.feed(RawEvent(2.0, CH_CSC, encode_csc(CscMeasurement.make(wheel=(3, 1500)))))
    assert out[0].reason.startswith("inconsistent")
    out = d.feed(RawEvent(3.0, CH_CSC, encode_csc(CscMeasurement.make(wheel=(5, 2524)))))
    assert _types(out) == [WheelSample]


def test_heart_rate():
    d = Decoder()
    ok = d.feed(RawEvent(0.0, CH_HEART_RATE, encode_heart_rate(
        HeartRateMeasurement.make(142, rr_intervals_s=(0.421875,), contact=True))))
    assert ok == [HeartRateSample(0.0, 142.0, (0.421875,))]
    off = d.feed(RawEvent(1.0, CH_HEART_RATE, encode_heart_rate(HeartRateMeasurement.make(0, contact=False))))
    assert off[0].reason.startswith("no skin contact")
    low = d.feed(RawEvent(2.0, CH_HEART_RATE, encode_heart_rate(HeartRateMeasurement.make(3))))
    assert low[0].reason.startswith("out of range")


def test_gps_sentences():
    d = Decoder()
    rmc = encode_rmc(utc_time="101500.00", utc_date="150626", latitude_deg=-23.25, longitude_deg=-67.5,
                     speed_mps=20.0, course_deg=271.0)
    out = d.feed(RawEvent(5.0, CH_GPS, rmc + b"\r\n"))
    assert _types(out) == [GpsSample] and out[0].speed_mps == pytest.approx(20.0, abs=1e-3)
    body = "GPGSV,3,1,11,03,03,111,00,04,15,270,00,06,01,010,00,13,06,292,00"
    assert d.feed(RawEvent(5.1, CH_GPS, f"${body}*{nmea_checksum(body):02X}".encode())) == []
    assert d.stats()[CH_GPS] == {"payloads": 2, "accepted": 1, "rejected": 0, "ignored": 1, "reasons": {}}


def test_mcu_records():
    d = Decoder()
    out = d.feed(RawEvent(1.0, CH_MCU, encode_mcu_line(McuAir(10, airspeed_mps=22.5, temperature_c=17.0))))
    assert out == [AirSample(1.0, 22.5, None, 17.0, None)]
    assert d.feed(RawEvent(1.1, CH_MCU, encode_mcu_line(McuButton(20, "start")))) == [MarkerSample(1.1, "start")]
    # the microsecond event clock wraps at 2**32 us
    w1 = d.feed(RawEvent(2.0, CH_MCU, encode_mcu_line(McuWheel(2**32 - 1000, 900, 2**32 - 50_000))))[0]
    w2 = d.feed(RawEvent(2.2, CH_MCU, encode_mcu_line(McuWheel(150_000, 903, 100_000))))[0]
    assert (w2.wheel_revolutions - w1.wheel_revolutions) == 3
    assert w2.wheel_event_time_s - w1.wheel_event_time_s == pytest.approx(0.150)
    assert w2.source == "mcu"
    # after a hello the counters start afresh, without a "counter went backwards" reject
    assert d.feed(RawEvent(3.0, CH_MCU, encode_mcu_line(McuHello(5, "fw1")))) == []
    assert _types(d.feed(RawEvent(3.1, CH_MCU, encode_mcu_line(McuWheel(90, 0, 80))))) == [WheelSample]


def test_link_control_tick():
    d = Decoder()
    assert d.feed(RawEvent(0.0, CH_LINK, b"ble.cycling_power reconnecting")) == [
        LinkSample(0.0, "ble.cycling_power", "reconnecting")]
    assert d.feed(RawEvent(0.0, CH_CONTROL, b"marker")) == [MarkerSample(0.0, "marker")]
    assert d.feed(RawEvent(0.1, CH_CONTROL, b"marker trap-board")) == [MarkerSample(0.1, "trap-board")]
    assert d.feed(RawEvent(0.2, CH_TICK, b"")) == []


def _wheel_events(source, t0, n, dt=0.25):
    for i in range(n):
        t = t0 + i * dt
        if source == "csc":
            yield RawEvent(t, CH_CSC, encode_csc(CscMeasurement.make(wheel=(i * 4, i * 256))))
        elif source == "power":
            yield RawEvent(t, CH_POWER, encode_cycling_power(CyclingPowerMeasurement.make(200, wheel=(i * 4, i * 512))))
        else:
            yield RawEvent(t, CH_MCU, encode_mcu_line(McuWheel(int(t * 1e6), i * 4, i * 250_000)))


def test_one_wheel_source_at_a_time_with_failover():
    d = Decoder()
    srcs = []
    events = sorted([*_wheel_events("power", 0.0, 40), *_wheel_events("csc", 1.0, 12, dt=0.25)], key=lambda e: e.t_s)
    for ev in events:
        srcs += [s.source for s in d.feed(ev) if isinstance(s, WheelSample)]
    # power alone first; the CSC sensor takes over as soon as it speaks; after it
    # falls silent for more than 5 s the power meter's wheel data comes back
    i = srcs.index("csc")
    assert set(srcs[:i]) == {"power"}
    j = len(srcs) - 1 - srcs[::-1].index("csc")
    assert set(srcs[i:j + 1]) == {"csc"}
    assert srcs[-1] == "power"
    assert d.wheel_source == "power"


def test_ride_file_chooses_the_wheel_source():
    d = Decoder(_ride('\n[decode]\nwheel_source = "power"\n'))
    srcs = set()
    for ev in sorted([*_wheel_events("power", 0.0, 10), *_wheel_events("csc", 0.1, 10)], key=lambda e: e.t_s):
        srcs |= {s.source for s in d.feed(ev) if isinstance(s, WheelSample)}
    assert srcs == {"power"}
    with pytest.raises(ConfigError, match="wheel_source"):
        _ride('\n[decode]\nwheel_source = "radar"\n')


def test_deterministic():
    rng = random.Random(11)
    events = []
    for i in range(300):
        ch = rng.choice([CH_POWER, CH_CSC, CH_MCU])
        events.append(next(_wheel_events({CH_POWER: "power", CH_CSC: "csc", CH_MCU: "mcu"}[ch], i * 0.1, 1)))
    a, b = Decoder(), Decoder()
    assert [a.feed(e) for e in events] == [b.feed(e) for e in events]
    assert a.stats() == b.stats()


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(st.floats(-1e3, 1e3) | st.just(float("nan")), st.sampled_from([*ALL_CHANNELS, "bogus"]),
                          st.binary(max_size=40)), max_size=25))
def test_fuzz_never_raises_and_counts_add_up(raw):
    d = Decoder()
    for t, ch, payload in raw:
        out = d.feed(RawEvent(t, ch, payload))
        assert isinstance(out, list)
    for ch, s in d.stats().items():
        assert sum(s["reasons"].values()) == s["rejected"]
        assert s["accepted"] + s["ignored"] <= s["payloads"]
