"""The sensor emulators against the published protocols and the truth log.

Payloads are taken apart here by hand from the specifications (Bluetooth SIG
CPS v1.1 / CSCS v1.0 / HRS v1.0 layouts with ``struct``), NMEA sentences with
the reference library pynmea2, positions with geographiclib (Karney 2013,
J. Geodesy 87, 43), and the line protocol's CRC with crcmod's predefined
CRC-16/CCITT-FALSE -- not with the project's own decoders.
"""

from __future__ import annotations

import math
import struct
from datetime import datetime, timezone

import crcmod.predefined
import numpy as np
import pynmea2
import pytest
from geographiclib.geodesic import Geodesic

from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_MCU, CH_POWER, CH_TICK
from sim.engine import Simulation
from sim.scenario import parse_scenario_text

BASE = """
[scenario]
name = "sensor test"
seed = 5
ride = "example"
step_hz = 100
runout_m = 20
start_utc = "2031-05-17T05:48:00"
[truth]
cda_m2 = 0.0285
crr = 0.0032
[weather]
gust_rms_mps = 0.2
[rider]
profile = [[0, 600], [200, 345], [5700, 560]]
"""


SHORT = """
[ride_patch.course]
runup_m = 1500
"""


def run_sim(extra: str = "", base: str = BASE, short: bool = True) -> tuple[Simulation, list]:
    """Run a test scenario; ``short``: a 1.5 km run-up (about 100 s) to keep tests quick."""
    sc = parse_scenario_text(base + extra + (SHORT if short else ""), "sensor test")
    sim = Simulation(sc)
    events = list(sim.events())
    return sim, events


@pytest.fixture(scope="module")
def quiet_run():
    """One run with noise-free sensors and fixed latencies (module scope: run once)."""
    extra = """
[power_meter]
noise_pct = 0.0
noise_w = 0.0
latency_s = 0.05
latency_jitter_s = 0.0
[wheel_sensor]
latency_s = 0.04
latency_jitter_s = 0.0
[gps]
position_sd_m = 0.0
position_white_m = 0.0
speed_sd_mps = 0.0
altitude_sd_m = 0.0
sentences = "RMC,GGA,VTG"
[airspeed]
enabled = true
noise_pct = 0.0
latency_s = 0.0
[barometer]
enabled = true
noise_pa = 0.0
temperature_noise_c = 0.0
"""
    return run_sim(extra, short=False)


def test_events_come_in_receive_order_and_every_channel_speaks(quiet_run):
    sim, events = quiet_run
    ts = [e.t_s for e in events]
    assert ts == sorted(ts)
    channels = {e.channel for e in events}
    assert channels == {CH_POWER, CH_CSC, CH_GPS, CH_MCU, CH_HEART_RATE, CH_TICK}
    assert sim.summary.end_reason == "run-out done"


def test_wheel_event_times_are_exact_to_one_tick_across_rollovers(quiet_run):
    # CSC Measurement (Bluetooth SIG CSCS v1.0): flags uint8 (bit 0: wheel
    # data), cumulative wheel revolutions uint32, last wheel event time
    # uint16 in 1/1024 s, little-endian; the time wraps every 64 s.
    sim, events = quiet_run
    rows = []
    for e in events:
        if e.channel == CH_CSC:
            assert len(e.payload) == 7 and e.payload[0] == 0x01
            rows.append(struct.unpack("<IH", e.payload[1:]))
    assert sim.summary.end_t_s > 4 * 64.0           # several rollovers of the event time
    clock = sim.wheel.clock                          # the sensor's own clock (offset known here)
    circumference = sim.scenario.true_circumference_m
    # Unwrap: whole 64 s periods of the first value from the clock offset, then deltas.
    r0 = rows[0][1]
    total = r0 + 65536 * round((clock.offset_s * 1024 - r0) / 65536)
    last = r0
    checked = 0
    wrapped = 0
    for revs, raw in rows[1:]:
        step = (raw - last) & 0xFFFF
        wrapped += raw < last
        total += step
        last = raw
        if revs == rows[0][0]:
            continue
        t_event = total / 1024.0 - clock.offset_s    # within one tick before the true time
        distance = sim.truth.at("distance_m", t_event)
        speed = sim.truth.at("speed_mps", t_event)
        # The event is a whole number of circumferences from the first one.
        n = (distance - sim.wheel.phase_m) / circumference
        assert abs(n - round(n)) * circumference <= speed / 1024.0 + 1e-4
        assert revs - rows[0][0] == round(n) + 1
        checked += 1
    assert wrapped >= 4
    assert checked > 400


def test_power_reports_are_the_mean_power_over_each_interval(quiet_run):
    # Cycling Power Measurement (CPS v1.1): flags uint16, instantaneous power
    # sint16 W, then (flag bit 5) crank revolutions uint16 and last crank
    # event time uint16 in 1/1024 s. Crank meters report the mean over the
    # report interval (common practice); with the noise off, the report must
    # equal the true mean crank power to the 1 W rounding.
    sim, events = quiet_run
    truth = sim.truth
    reports = []
    for e in events:
        if e.channel != CH_POWER:
            continue
        flags, power = struct.unpack_from("<Hh", e.payload)
        assert flags & 0x20
        reports.append((e.t_s - 0.05, power))
    assert len(reports) > 500
    for (t_a, _), (t_b, p_b) in zip(reports, reports[1:]):
        work = truth.at("crank_work_j", t_b) - truth.at("crank_work_j", t_a)
        assert p_b == pytest.approx(work / (t_b - t_a), abs=0.5 + 1e-6)
    assert t_b - t_a == pytest.approx(0.5)          # 2 Hz


def test_power_noise_has_the_configured_size():
    # Default meter: sd = sqrt((1.5 % of P)^2 + (2 W)^2) per report.
    sim, events = run_sim()
    truth = sim.truth
    errors, sds = [], []
    prev = None
    for e in events:
        if e.channel != CH_POWER:
            continue
        t = e.t_s - sim.scenario.power_meter.latency_s   # jitter 0.01 s only blurs the window edge
        if prev is not None:
            mean = (truth.at("crank_work_j", t) - truth.at("crank_work_j", prev)) / (t - prev)
            if mean > 100.0:
                errors.append(struct.unpack_from("<h", e.payload, 2)[0] - mean)
                sds.append(math.hypot(0.015 * mean, 2.0))
        prev = t
    z = np.asarray(errors) / np.asarray(sds)
    assert len(z) > 150
    assert abs(z.mean()) < 0.25
    assert 0.85 < z.std() < 1.35


def test_gps_sentences_parse_and_positions_match_the_course(quiet_run):
    # pynmea2 checks the NMEA checksum; geographiclib gives the geodesic
    # distance and azimuth from the start point on WGS 84.
    sim, events = quiet_run
    cfg = sim.scenario.gps
    start = datetime(2031, 5, 17, 5, 48, tzinfo=timezone.utc)
    kinds = {"RMC": 0, "GGA": 0, "VTG": 0}
    worst_m = 0.0
    for e in events:
        if e.channel != CH_GPS:
            continue
        msg = pynmea2.parse(e.payload.decode("ascii"), check=True)
        kinds[msg.sentence_type] += 1
        if msg.sentence_type != "RMC":
            continue
        assert msg.status == "A"
        when = datetime.combine(msg.datestamp, msg.timestamp)
        t_fix = (when - start).total_seconds()
        g = Geodesic.WGS84.Inverse(cfg.origin_lat_deg, cfg.origin_lon_deg, msg.latitude, msg.longitude)
        d_true = sim.truth.at("distance_m", t_fix)
        worst_m = max(worst_m, abs(g["s12"] - d_true))
        if d_true > 100.0:
            assert g["azi1"] == pytest.approx(cfg.heading_deg, abs=0.01)
        v_true = sim.truth.at("speed_mps", t_fix)
        assert msg.spd_over_grnd * 1852.0 / 3600.0 == pytest.approx(v_true, abs=0.001)
    assert worst_m < 0.05         # 1e-5 arc-minute resolution is about 2 cm
    n_fix = kinds["RMC"]
    assert kinds["GGA"] == n_fix == kinds["VTG"]
    assert n_fix == pytest.approx(10 * sim.summary.end_t_s, abs=2)


def test_mcu_lines_carry_air_speed_and_pressure_with_a_valid_crc(quiet_run):
    # lsl1 line protocol: "<body> #XXXX", CRC-16/CCITT-FALSE of the body
    # (checked with crcmod's predefined 'crc-ccitt-false').
    sim, events = quiet_run
    crc = crcmod.predefined.mkCrcFun("crc-ccitt-false")
    air_speeds, pressures = [], []
    hello = 0
    for e in events:
        if e.channel != CH_MCU:
            continue
        body, _, tail = e.payload.rpartition(b" #")
        assert int(tail, 16) == crc(body)
        parts = body.decode("ascii").split(" ")
        assert parts[0] == "lsl1"
        fields = dict(p.split("=") for p in parts[3:])
        if parts[1] == "hlo":
            hello += 1
        elif "as" in fields:
            air_speeds.append((e.t_s, float(fields["as"])))
        elif "p" in fields:
            pressures.append((e.t_s, float(fields["p"])))
    assert hello == 1
    assert len(air_speeds) == pytest.approx(10 * sim.summary.end_t_s, abs=2)
    for t, a in air_speeds[::25]:
        assert a == pytest.approx(sim.truth.at("airspeed_mps", t), abs=0.002 + 0.01 * abs(a))
    # The barometer reads the hydrostatic pressure at the vehicle's elevation:
    # the 24 m descent raises it by about rho g dh = 1.0 * 9.8 * 24 = 240 Pa.
    rise = pressures[-1][1] - pressures[0][1]
    drop_m = sim.truth.at("elevation_m", pressures[0][0]) - sim.truth.at("elevation_m", pressures[-1][0])
    rho = sim.air.density0_kgpm3
    assert rise == pytest.approx(rho * 9.80665 * drop_m, rel=0.01)


def test_airspeed_probe_error_has_the_configured_size():
    sim, events = run_sim("[airspeed]\nenabled = true\nnoise_pct = 1.0\nlatency_s = 0.0\n")
    ratios = []
    for e in events:
        if e.channel == CH_MCU and b" as=" in e.payload:
            value = float(e.payload.split(b" as=")[1].split(b" ")[0])
            true = sim.truth.at("airspeed_mps", e.t_s)
            if true > 5.0:
                ratios.append(value / true)
    r = np.asarray(ratios)
    assert len(r) > 700
    assert r.mean() == pytest.approx(1.0, abs=0.001)
    assert r.std() == pytest.approx(0.01, rel=0.1)


def test_heart_rate_payloads_follow_the_heart_rate_service_layout(quiet_run):
    # HRS v1.0: flags uint8 (bit 0 clear: uint8 value; bits 1-2 contact;
    # bit 4 RR intervals uint16 in 1/1024 s).
    _, events = quiet_run
    n = 0
    for e in events:
        if e.channel != CH_HEART_RATE:
            continue
        flags, bpm = e.payload[0], e.payload[1]
        assert flags & 0x01 == 0 and flags & 0x10
        assert 60 <= bpm <= 200
        (rr,) = struct.unpack_from("<H", e.payload, 2)
        assert rr / 1024.0 == pytest.approx(60.0 / bpm, rel=0.02)
        n += 1
    assert n > 250


def test_wheel_sensor_on_the_mcu_sends_whl_lines():
    sim, events = run_sim("[wheel_sensor]\nlink = \"mcu\"\nrate_hz = 4\n")
    lines = [e.payload for e in events if e.channel == CH_MCU and b" whl " in e.payload]
    assert not any(e.channel == CH_CSC for e in events)
    assert len(lines) == pytest.approx(4 * sim.summary.end_t_s, abs=2)
    revs = [int(x.split(b"n=")[1].split(b" ")[0]) for x in lines]
    assert revs == sorted(revs)
    total_m = (revs[-1] - revs[0]) * sim.scenario.true_circumference_m
    assert total_m == pytest.approx(sim.summary.end_distance_m, abs=2 * 1.47 + 1.0)
