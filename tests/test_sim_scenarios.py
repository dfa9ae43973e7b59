"""Scenario files, determinism, lazy streaming and faults of the bench simulator."""

from __future__ import annotations

import dataclasses
import math
import struct

import pytest

from livecoach.codecs import csc, cycling_power, mcu_line, nmea
from livecoach.errors import ConfigError, DecodeError
from livecoach.stream.events import CH_CSC, CH_GPS, CH_LINK, CH_MCU, CH_POWER, CH_TICK
from sim.run import SimRun, iter_events, simulate
from sim.scenario import available_scenarios, load_scenario, parse_scenario_text


def test_the_shipped_scenarios_load_and_cover_the_cases():
    names = available_scenarios()
    for needed in ("default", "gusty", "airspeed", "faults", "coastdown", "drag_step"):
        assert needed in names
    for name in names:
        sc = load_scenario(name)
        assert sc.name == name
        assert sc.ride.course.trap_m == 200.0
    assert load_scenario("gusty").weather.gust_rms_mps == 0.3
    assert load_scenario("airspeed").ride.sensors.has_airspeed_probe
    assert load_scenario("airspeed").airspeed.enabled
    assert any(p[1] == 0.0 for p in load_scenario("coastdown").rider.profile)
    assert load_scenario("drag_step").truth.cda_steps == [[3500.0, 0.031]]
    kinds = {f.kind for f in load_scenario("faults").faults}
    assert kinds == {"dropout", "disconnect", "stuck", "garbage", "offset_drift", "duplicate", "out_of_order"}
    # The default is consistent with livecoach's example ride: 6.5 km run-up
    # falling from about 1,405 m, into a 200 m trap; the priors differ from the truth.
    d = load_scenario("default")
    assert d.ride.course.runup_m == 6500.0
    assert 1300.0 < d.ride.course.elevation_m(0.0) < 1500.0
    assert d.true_cda_m2 != d.ride.vehicle.cda_m2


def test_the_ride_text_of_a_patched_scenario_parses_back_to_the_same_settings():
    from livecoach.config.ridefile import parse_ride_text

    sc = load_scenario("prior_off")
    again = parse_ride_text(sc.ride_text, "round trip")
    assert again.vehicle.cda_m2 == pytest.approx(0.0328)
    assert again.course.distances_m == sc.ride.course.distances_m
    assert again.air.density_kgpm3 == sc.ride.air.density_kgpm3


def _short(name: str, max_time_s: float):
    sc = load_scenario(name)
    return dataclasses.replace(sc, run=dataclasses.replace(sc.run, max_time_s=max_time_s))


def test_same_seed_gives_identical_event_bytes_and_another_seed_does_not():
    sc = _short("faults", 125.0)         # covers dropout, disconnect, stuck and garbage faults
    a = simulate(sc, keep_truth=False)
    b = list(iter_events(sc))            # a second run, streamed lazily
    assert len(a.events) > 3000
    assert b == a.events
    assert a.event_bytes() == SimRun(sc, sc.seed, b, None, a.summary).event_bytes()
    c = simulate(_short("faults", 20.0), seed=sc.seed + 1, keep_truth=False)
    assert c.events != a.events[:len(c.events)]


def test_iter_events_streams_a_long_run_in_flat_memory():
    # sys.getallocatedblocks counts the interpreter's live memory blocks: it
    # must not grow with the length of a run that is only streamed.
    import gc
    import sys

    stream = iter_events("soak")
    first = next(stream)
    assert first.t_s < 1.0
    for ev in stream:
        if ev.t_s > 60.0:
            break
    gc.collect()
    base = sys.getallocatedblocks()
    n = 0
    for ev in stream:
        n += 1
        if ev.t_s > 600.0:
            break
    gc.collect()
    grown = sys.getallocatedblocks() - base
    assert n > 15_000                      # 9 minutes of a dozen sensors talking
    assert grown < 2_000                   # (a kept list of those events would add > 30,000)


@pytest.mark.parametrize(
    "text, message",
    [
        ("[scenario]\nseed = 1\n[wether]\n", "unknown section [wether]; did you mean 'weather'?"),
        ("[truth]\ncda = 0.03\n", "unknown key 'cda' in [truth]; did you mean 'cda_m2'?"),
        ("[weather]\ngust_rms_mps = -1\n", "[weather] gust_rms_mps = -1"),
        ("[rider]\nprofile = [[0, 300], [0, 400]]\n", "[rider] profile[1]: 0.0 is not after"),
        ("[rider]\nprofile = [[0, 300, 1]]\n", "[rider] profile[0] = [0, 300, 1]: expected [at, power_w]"),
        ("[scenario]\nride = \"nowhere.toml\"\n", "ride = 'nowhere.toml': file not found"),
        ("[[fault]]\nkind = \"dropout\"\nchannel = \"radio\"\nstart_s = 1\nduration_s = 2\n",
         "[fault 1] channel = 'radio': expected one of"),
        ("[[fault]]\nkind = \"melt\"\nchannel = \"power\"\nstart_s = 1\n", "[fault 1] kind = 'melt'"),
        ("[[fault]]\nkind = \"stuck\"\nchannel = \"power\"\nstart_s = 1\n", "stuck needs duration_s > 0"),
        ("[[fault]]\nkind = \"offset_drift\"\nchannel = \"gps\"\nstart_s = 1\n", "power meter only"),
        ("[gps]\nsentences = \"RMC,XYZ\"\n", "'XYZ' is not one of RMC, GGA, VTG"),
        ("[ride_patch.course]\nrunup_m = -5\n", "(ride file): [course] runup_m = -5"),
        ("[rider]\npmax_w = 300\n", "[rider] pmax_w = 300.0 W must be above cp_w = 330.0 W"),
        ("[scenario]\nstart_utc = \"dawn\"\n", "start_utc = 'dawn': expected YYYY-MM-DDTHH:MM:SS"),
    ],
)
def test_bad_scenarios_say_what_is_wrong_and_where(text, message):
    with pytest.raises(ConfigError) as err:
        parse_scenario_text(text, "bad.toml")
    assert message in str(err.value)
    assert "bad.toml" in str(err.value)


def test_an_unknown_scenario_name_suggests_the_nearest():
    with pytest.raises(ConfigError, match="did you mean 'gusty'"):
        load_scenario("gustyy")


# ------------------------------------------------------------------- faults
@pytest.fixture(scope="module")
def fault_run():
    return simulate("faults", keep_truth=True, truth_every=10)


def _decodes(channel: str, payload: bytes) -> bool:
    try:
        if channel == CH_POWER:
            cycling_power.decode_cycling_power(payload)
        elif channel == CH_CSC:
            csc.decode_csc(payload)
        elif channel == CH_MCU:
            mcu_line.decode_mcu_line(payload)
        elif channel == CH_GPS:
            return nmea.decode_nmea(payload, 0.0) is not None
    except DecodeError:
        return False
    return True


def test_every_fault_is_injected_and_counted(fault_run):
    run = fault_run
    assert run.summary.end_reason == "run-out done"
    assert len(run.faults) == 11
    for rec in run.faults:
        assert rec.affected > 0, rec
    events = run.events
    # Disconnects: down, reconnecting, up on the link channel at the fault's times.
    links = [(e.t_s, e.payload.decode()) for e in events if e.channel == CH_LINK]
    assert links == [
        (55.0, "ble.csc down"), (56.0, "ble.csc reconnecting"), (61.0, "ble.csc up"),
        (175.0, "serial.gps down"), (176.0, "serial.gps reconnecting"), (178.0, "serial.gps up"),
    ]
    assert not any(e.channel == CH_CSC and 55.0 <= e.t_s < 61.0 for e in events)
    assert not any(e.channel == CH_GPS and 175.0 <= e.t_s < 178.0 for e in events)
    # Dropout: the power meter is silent for its 4 s.
    assert not any(e.channel == CH_POWER and 30.0 <= e.t_s < 34.0 for e in events)
    # Garbage: exactly the requested number of undecodable payloads per channel, nothing else bad.
    bad = {}
    for e in events:
        if e.channel in (CH_POWER, CH_CSC, CH_MCU, CH_GPS) and not _decodes(e.channel, e.payload):
            bad[e.channel] = bad.get(e.channel, 0) + 1
    assert bad == {CH_GPS: 8, CH_POWER: 5, CH_MCU: 4}
    # Stuck: the power meter repeats one payload byte for byte for 5 s.
    stuck = {e.payload for e in events if e.channel == CH_POWER and 80.05 <= e.t_s < 85.0}
    assert len(stuck) == 1
    # Duplicates: back-to-back identical wheel payloads, as many as counted.
    wheel = [e for e in events if e.channel == CH_CSC and 130.0 <= e.t_s < 146.0]
    dups = sum(1 for a, b in zip(wheel, wheel[1:]) if a.payload == b.payload and b.t_s - a.t_s < 0.01)
    assert dups == run.faults[6].affected
    # Out of order: crank revolutions (CPS flag bit 5) step back once per held payload.
    revs = [struct.unpack_from("<H", e.payload, 4)[0] for e in events
            if e.channel == CH_POWER and 150.0 <= e.t_s < 172.0 and _decodes(CH_POWER, e.payload)]
    backs = sum(1 for a, b in zip(revs, revs[1:]) if ((b - a) & 0xFFFF) > 0x8000)
    assert backs == run.faults[7].affected


def test_power_meter_offset_drift_grows_at_the_configured_rate(fault_run):
    # From 200 s the meter's zero drifts at +6 W/min (0.1 W/s): each report
    # reads the true mean power plus 0.1 W/s * (t - 200 s), plus noise.
    run = fault_run
    excess = []
    prev = None
    for e in run.events:
        if e.channel != CH_POWER or not _decodes(CH_POWER, e.payload):
            continue
        t = e.t_s - 0.03                     # report time: receive time less the mean latency
        if prev is not None and 210.0 <= t <= 250.0:      # steady riding, before the final effort
            truth = (run.truth.at("crank_work_j", t) - run.truth.at("crank_work_j", prev)) / (t - prev)
            excess.append(struct.unpack_from("<h", e.payload, 2)[0] - truth - 0.1 * (t - 200.0))
        prev = t
    assert len(excess) == pytest.approx(80, abs=2)
    mean = sum(excess) / len(excess)
    assert abs(mean) < 1.5          # the noise sd is about 5.5 W per report: 0.6 W for the mean
    before = [e for e in run.events if e.channel == CH_POWER and 180.0 <= e.t_s < 200.0]
    assert before


def test_ticks_come_at_the_live_loops_rate(fault_run):
    ticks = [e.t_s for e in fault_run.events if e.channel == CH_TICK]
    assert ticks[:3] == [0.25, 0.5, 0.75]
    assert len(ticks) == pytest.approx(4 * fault_run.summary.end_t_s, abs=2)
    assert all(math.isclose(b - a, 0.25) for a, b in zip(ticks, ticks[1:]))
