"""The pre-run go/no-go checks: facts from the simulator and from real probes, go and no-go."""

from __future__ import annotations

import asyncio
import copy
import dataclasses
import os
import time
import tomllib

import pytest

from livecoach.cli.commands.init import example_ride_text
from livecoach.codecs import csc, nmea
from livecoach.config.ridefile import parse_ride_dict
from livecoach.plan import make_plan, save_plan
from livecoach.setup_check.checks import (
    MIN_PLAUSIBLE_WALL_UTC_S,
    check_bluetooth,
    check_clock,
    clock_correction_s,
    run_checks,
)
from livecoach.setup_check.facts import (
    BluetoothAdapter,
    BluetoothFacts,
    ClockFacts,
    DeviceFacts,
    RideFacts,
    SensorSpec,
    SensorTraffic,
    SetupFacts,
    configured_sensors,
)
from livecoach.setup_check.listen import listen
from livecoach.setup_check.probes import (
    parse_bluetoothctl_show,
    probe_bluetooth,
    probe_clock,
    probe_device,
    probe_disk,
    probe_plan,
    set_wall_clock,
)
from livecoach.setup_check.result import GO, NO_GO, SKIP, WARN, is_go
from livecoach.setup_check.sensor_checks import gps_utc_epoch_s, latest_gps_time
from livecoach.setup_check.settings import CheckConfig
from livecoach.stream.events import CH_CSC, CH_GPS, CH_LINK, RawEvent

WINDOW_S = 8.0
#: The board's clocks in these tests: the wall clock when the simulated run starts.
WALL0_UTC_S = 1_970_000_000.0  # 2032-06-04 (invented test time)
MONO0_S = 5000.0
EXAMPLE = tomllib.loads(example_ride_text())


def _ride_dict(**sections) -> dict:
    data = copy.deepcopy(EXAMPLE)
    data["sensors"].update(power_address="C4:00:00:00:00:01", speed_address="C4:00:00:00:00:02",
                           heart_rate_address="C4:00:00:00:00:03", gps_port="/dev/livecoach-gps")
    for name, values in sections.items():
        data.setdefault(name, {}).update(values)
    return data


def _ride(**sections):
    return parse_ride_dict(_ride_dict(**sections), "ride.toml")


@pytest.fixture(scope="module")
def sim_traffic():
    """8 s of the default simulated run as the sensors' traffic, on the board's clocks."""
    from livecoach.setup_check.simulate import simulated_sensor_facts

    ride = _ride()
    _, _, traffic = simulated_sensor_facts("default", configured_sensors(ride), (), WINDOW_S,
                                           WALL0_UTC_S, MONO0_S)
    return traffic


@pytest.fixture(scope="module")
def plan_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("plan") / "plan.csv"
    save_plan(make_plan(_ride()), path)
    return path


@pytest.fixture
def pty_path():
    master, slave = os.openpty()
    yield os.ttyname(slave)
    os.close(master)
    os.close(slave)


def _clock(**changes) -> ClockFacts:
    base = ClockFacts(wall_utc_s=WALL0_UTC_S + WINDOW_S, wall_minus_monotonic_s=WALL0_UTC_S - MONO0_S)
    return dataclasses.replace(base, **changes)


def _facts(ride, traffic, plan_path, tmp_path, pty_path, **changes) -> SetupFacts:
    base = SetupFacts(
        ride=RideFacts("ride.toml", ride),
        clock=_clock(),
        bluetooth=BluetoothFacts((BluetoothAdapter("hci0", "B8:27:EB:00:00:01", True, False, False),)),
        devices=(probe_device("gps", pty_path),),  # a real tty: a pseudo-terminal
        traffic=traffic,
        disk=probe_disk(tmp_path / "recordings"),
        plan=probe_plan(plan_path),
    )
    return dataclasses.replace(base, **changes)


def _row(results, prefix):
    rows = [r for r in results if r.name.startswith(prefix)]
    assert rows, (prefix, results)
    return rows[0]


# ---------------------------------------------------------------- go
def test_simulated_sensors_give_go(sim_traffic, plan_path, tmp_path, pty_path):
    results = run_checks(_facts(_ride(), sim_traffic, plan_path, tmp_path, pty_path))
    assert is_go(results), [r for r in results if r.status != GO]
    names = [r.name for r in results]
    for expected in ("ride file", "sensors configured", "Bluetooth adapter", "serial gps",
                     "power meter", "wheel-speed sensor", "heart-rate strap", "GPS", "wheel speed",
                     "clock", "recording space", "plan"):
        assert any(n.startswith(expected) for n in names), expected
    # The simulator's default rates (2/s BLE, 10 fixes/s with RMC+GGA) appear in the table.
    assert "2.0/s" in _row(results, "power meter").detail
    assert "11 satellites" in _row(results, "GPS").detail
    assert "within" in _row(results, "clock").detail


# ---------------------------------------------------------------- no-go from sensor traffic
def _replace_traffic(traffic, role, **changes):
    return tuple(dataclasses.replace(t, **changes) if t.spec.role == role else t for t in traffic)


def test_power_meter_not_found_is_no_go(sim_traffic, plan_path, tmp_path, pty_path):
    traffic = _replace_traffic(sim_traffic, "power", connected=False, events=(), error="no link")
    results = run_checks(_facts(_ride(), traffic, plan_path, tmp_path, pty_path))
    row = _row(results, "power meter")
    assert row.status == NO_GO and "not found" in row.detail and "livecoach scan" in row.hint
    assert not is_go(results)


def test_heart_rate_strap_missing_only_warns(sim_traffic, plan_path, tmp_path, pty_path):
    traffic = _replace_traffic(sim_traffic, "heart_rate", connected=False, events=(), error="no link")
    results = run_checks(_facts(_ride(), traffic, plan_path, tmp_path, pty_path))
    assert _row(results, "heart-rate strap").status == WARN
    assert is_go(results)


def test_silent_and_slow_sensors_are_no_go(sim_traffic, plan_path, tmp_path, pty_path):
    speed = next(t for t in sim_traffic if t.spec.role == "speed")
    silent = _replace_traffic(sim_traffic, "speed", events=())
    row = _row(run_checks(_facts(_ride(), silent, plan_path, tmp_path, pty_path)), "wheel-speed sensor")
    assert row.status == NO_GO and "nothing received" in row.detail
    slow = _replace_traffic(sim_traffic, "speed", events=speed.events[:3])  # 3 in 8 s < 0.5/s
    row = _row(run_checks(_facts(_ride(), slow, plan_path, tmp_path, pty_path)), "wheel-speed sensor")
    assert row.status == NO_GO and "need >= 0.5/s" in row.detail


def test_garbage_on_the_gps_line_is_no_go(sim_traffic, plan_path, tmp_path, pty_path):
    gps = next(t for t in sim_traffic if t.spec.role == "gps")
    garbled = tuple(dataclasses.replace(ev, payload=b"\xff\xfe$GPRMC,noise") if i % 3 == 0 else ev
                    for i, ev in enumerate(gps.events))
    traffic = _replace_traffic(sim_traffic, "gps", events=garbled)
    row = _row(run_checks(_facts(_ride(), traffic, plan_path, tmp_path, pty_path)), "GPS")
    assert row.status == NO_GO and "rejected" in row.detail and "baud" in row.hint


def _rmc(seconds_of_day: float, valid: bool = True) -> bytes:
    """An RMC sentence on 2032-06-04 (invented test date) at an invented position."""
    return nmea.encode_rmc(utc_time=nmea.utc_time_text(seconds_of_day), utc_date="040632",
                           latitude_deg=10.5, longitude_deg=-20.25, speed_mps=0.0, course_deg=0.0,
                           valid=valid)


def _gps_traffic(valid: bool, satellites: int = 9, n: int = 16) -> SensorTraffic:
    spec = SensorSpec("gps", CH_GPS, "/dev/livecoach-gps", "serial", 9600)
    events = []
    for i in range(n):
        t = MONO0_S + 0.5 * i
        events.append(RawEvent(t, CH_GPS, _rmc(21000.0 + 0.5 * i, valid)))
        events.append(RawEvent(t + 0.01, CH_GPS, nmea.encode_gga(
            utc_time=nmea.utc_time_text(21000.0 + 0.5 * i), latitude_deg=10.5, longitude_deg=-20.25,
            altitude_m=1400.0, satellites=satellites, hdop=0.9, fix_quality=1 if valid else 0)))
    return SensorTraffic(spec, True, tuple(events), WINDOW_S)


def test_gps_without_fix_or_with_few_satellites_is_no_go():
    ride = _ride()
    from livecoach.setup_check.sensor_checks import judge_gps

    cfg = CheckConfig()
    assert judge_gps(_gps_traffic(True), ride, cfg)[0].status == GO
    row = judge_gps(_gps_traffic(False), ride, cfg)[0]
    assert row.status == NO_GO and "no fix" in row.detail
    row = judge_gps(_gps_traffic(True, satellites=3), ride, cfg)[0]
    assert row.status == NO_GO and "3 satellites" in row.detail
    relaxed = dataclasses.replace(cfg, require_gps_fix=False)
    assert judge_gps(_gps_traffic(False), ride, relaxed)[0].status == WARN


def test_implausible_wheel_speed_is_no_go():
    # CSC wheel event time in 1/1024 s (Bluetooth SIG CSCS): 60 revolutions per second of a
    # 1.47 m wheel is 88 m/s, beyond any human-powered vehicle (common practice: < 50 m/s).
    from livecoach.setup_check.sensor_checks import judge_speed

    spec = SensorSpec("speed", CH_CSC, "C4:00:00:00:00:02", "ble")
    events = tuple(RawEvent(MONO0_S + 0.5 * i, CH_CSC,
                            csc.encode_csc(csc.CscMeasurement.make(wheel=(30 * i, 512 * i))))
                   for i in range(10))
    row = judge_speed(SensorTraffic(spec, True, events, 5.0), _ride(), CheckConfig())[0]
    assert row.status == NO_GO and "implausible" in row.detail and "wheel_circumference_m" in row.hint
    slow = tuple(RawEvent(MONO0_S + 0.5 * i, CH_CSC,
                          csc.encode_csc(csc.CscMeasurement.make(wheel=(i, 512 * i))))
                 for i in range(10))
    row = judge_speed(SensorTraffic(spec, True, slow, 5.0), _ride(), CheckConfig())[0]
    assert row.status == GO and "2.9..2.9 m/s" in row.detail  # 1.47 m per 0.5 s


def test_no_wheel_data_anywhere_is_no_go(sim_traffic, plan_path, tmp_path, pty_path):
    traffic = tuple(t for t in sim_traffic if t.spec.role != "speed")
    ride = parse_ride_dict(_ride_dict(sensors={"speed_address": ""}))
    results = run_checks(_facts(ride, traffic, plan_path, tmp_path, pty_path))
    # The simulated power meter sends no wheel data, so nothing gives wheel speed.
    assert _row(results, "wheel speed").status == NO_GO
    assert _row(results, "sensors configured").status == WARN


# ---------------------------------------------------------------- no-go from the board
def test_bluetooth_adapter_states():
    specs = configured_sensors(_ride())
    assert check_bluetooth(BluetoothFacts((), "no hci device"), specs).status == NO_GO
    blocked = BluetoothFacts((BluetoothAdapter("hci0", "X", None, True, False),))
    row = check_bluetooth(blocked, specs)
    assert row.status == NO_GO and "rfkill" in row.detail and "rfkill unblock" in row.hint
    off = BluetoothFacts((BluetoothAdapter("hci0", "X", False, False, False),))
    assert check_bluetooth(off, specs).status == NO_GO
    serial_only = tuple(s for s in specs if s.transport == "serial")
    assert check_bluetooth(None, serial_only).status == SKIP


def test_serial_device_missing_or_not_permitted(sim_traffic, plan_path, tmp_path, pty_path):
    missing = (probe_device("gps", str(tmp_path / "no-such-tty")),)
    results = run_checks(_facts(_ride(), sim_traffic, plan_path, tmp_path, pty_path, devices=missing))
    assert _row(results, "serial gps").status == NO_GO
    a_file = tmp_path / "file"
    a_file.write_text("x")
    row = _row(run_checks(_facts(_ride(), sim_traffic, plan_path, tmp_path, pty_path,
                                 devices=(probe_device("gps", str(a_file)),))), "serial gps")
    assert row.status == NO_GO and "not a serial" in row.detail
    locked = (DeviceFacts("gps", "/dev/ttyUSB0", True, True, False, False),)
    row = _row(run_checks(_facts(_ride(), sim_traffic, plan_path, tmp_path, pty_path, devices=locked)),
               "serial gps")
    assert row.status == NO_GO and "dialout" in row.hint


def test_recording_space(sim_traffic, plan_path, tmp_path, pty_path):
    ride = parse_ride_dict(_ride_dict(check={"min_free_mb": 1e6}))  # a terabyte
    row = _row(run_checks(_facts(ride, sim_traffic, plan_path, tmp_path, pty_path)), "recording space")
    assert row.status == NO_GO and "need 1e+06 MB" in row.detail
    blocker = tmp_path / "blocker"
    blocker.write_text("x")
    row = _row(run_checks(_facts(_ride(), sim_traffic, plan_path, tmp_path, pty_path,
                                 disk=probe_disk(blocker / "recordings"))), "recording space")
    assert row.status == NO_GO and "is a file" in row.detail


def test_clock_checks():
    cfg = CheckConfig()
    gps = latest_gps_time(_gps_traffic(True))
    assert gps is not None
    # The traffic's GPS time is 2032-06-04 05:50:00 + 7.5 s at receive time MONO0 + 7.5 s.
    assert gps_utc_epoch_s(nmea.decode_nmea(_gps_traffic(True).events[0].payload, 0.0)) == \
        1970000000.0 + 21000.0 - (1970000000.0 % 86400.0)
    in_step = ClockFacts(wall_utc_s=0.0, wall_minus_monotonic_s=gps[1] - gps[0] - 0.3)
    assert check_clock(in_step, gps, cfg).status == GO
    assert clock_correction_s(in_step, gps) == pytest.approx(0.3)
    off = dataclasses.replace(in_step, wall_minus_monotonic_s=in_step.wall_minus_monotonic_s - 30.0)
    row = check_clock(off, gps, cfg)
    assert row.status == NO_GO and "-30.3 s off GPS time" in row.detail
    assert "--set-clock-from-gps" in row.hint
    never_set = ClockFacts(wall_utc_s=86400.0 * 3, wall_minus_monotonic_s=0.0)
    assert check_clock(never_set, None, cfg).status == NO_GO
    synced = ClockFacts(wall_utc_s=MIN_PLAUSIBLE_WALL_UTC_S + 1e8, wall_minus_monotonic_s=0.0,
                        network_synchronized=True)
    assert check_clock(synced, None, cfg).status == GO
    assert check_clock(dataclasses.replace(synced, network_synchronized=None), None, cfg).status == WARN
    assert check_clock(dataclasses.replace(synced, monotonic_adjustable=True), None, cfg).status == NO_GO


def test_set_wall_clock_calls_the_setter_and_reports_permission():
    got = []
    new = set_wall_clock(2.5, settime=got.append)
    assert got == [new] and abs(new - (time.time() + 2.5)) < 1.0

    def refuse(_t):
        raise PermissionError(1, "Operation not permitted")

    from livecoach.errors import LivecoachError

    with pytest.raises(LivecoachError, match="needs root"):
        set_wall_clock(1.0, settime=refuse)


def test_plan_checks(sim_traffic, plan_path, tmp_path, pty_path):
    results = run_checks(_facts(_ride(), sim_traffic, plan_path, tmp_path, pty_path))
    assert "points to 6700 m" in _row(results, "plan").detail
    # Another rider: the planner's own comparison says the plan is for another run.
    other = parse_ride_dict(_ride_dict(rider={"pmax_w": 1100}))
    row = _row(run_checks(_facts(other, sim_traffic, plan_path, tmp_path, pty_path)), "plan")
    assert row.status == NO_GO and "pmax_w" in row.detail
    # Different air: usable with a warning.
    windy = parse_ride_dict(_ride_dict(air={"headwind_mps": 1.5}))
    results = run_checks(_facts(windy, sim_traffic, plan_path, tmp_path, pty_path))
    assert _row(results, "plan vs ride file").status == WARN and is_go(results)
    # Missing, unreadable, or not required.
    missing = probe_plan(tmp_path / "none.csv")
    assert _row(run_checks(_facts(_ride(), sim_traffic, plan_path, tmp_path, pty_path, plan=missing)),
                "plan").status == NO_GO
    junk = tmp_path / "junk.csv"
    junk.write_text("not,a,plan\n1,2,3\n")
    row = _row(run_checks(_facts(_ride(), sim_traffic, plan_path, tmp_path, pty_path,
                                 plan=probe_plan(junk))), "plan")
    assert row.status == NO_GO and "header" in row.detail
    relaxed = parse_ride_dict(_ride_dict(check={"require_plan": False}))
    assert _row(run_checks(_facts(relaxed, sim_traffic, plan_path, tmp_path, pty_path, plan=missing)),
                "plan").status == WARN


def test_invalid_ride_file_is_no_go_and_skips_sensors(tmp_path):
    facts = SetupFacts(ride=RideFacts("ride.toml", None, "ride.toml: [vehicle] mass_kg is missing"),
                       clock=_clock(network_synchronized=True), disk=probe_disk(tmp_path))
    results = run_checks(facts)
    assert results[0].status == NO_GO and "mass_kg" in results[0].detail
    assert _row(results, "sensors").status == SKIP
    assert not is_go(results)


def test_air_data_from_the_microcontroller(plan_path, tmp_path, pty_path):
    from livecoach.setup_check.simulate import simulated_sensor_facts

    ride = parse_ride_dict(_ride_dict(sensors={"mcu_port": "/dev/livecoach-mcu", "has_airspeed_probe": True},
                                      air={"pressure_pa": 95000}))
    _, _, traffic = simulated_sensor_facts("airspeed", configured_sensors(ride), (), 4.0,
                                           WALL0_UTC_S, MONO0_S)
    results = run_checks(_facts(ride, traffic, plan_path, tmp_path, pty_path))
    mcu = _row(results, "sensor microcontroller")
    assert mcu.status == GO and "air speed" in mcu.detail
    # The simulated barometer reads the scenario's ~86 kPa, the ride file says 95 kPa.
    air = _row(results, "air in the ride file")
    assert air.status == WARN and "95000 Pa" in air.detail


# ---------------------------------------------------------------- probes on real files
def test_probe_bluetooth_reads_sysfs(tmp_path):
    hci = tmp_path / "bluetooth" / "hci0"
    hci.mkdir(parents=True)
    (hci / "address").write_text("b8:27:eb:12:34:56\n")
    rf = tmp_path / "rfkill" / "rfkill0"
    rf.mkdir(parents=True)
    for name, value in (("type", "bluetooth"), ("name", "hci0"), ("soft", "1"), ("hard", "0")):
        (rf / name).write_text(value + "\n")
    facts = probe_bluetooth(tmp_path, use_bluetoothctl=False)
    assert facts.adapters == (BluetoothAdapter("hci0", "B8:27:EB:12:34:56", None, True, False),)
    assert probe_bluetooth(tmp_path / "none", use_bluetoothctl=False).error
    text = "Controller B8:27:EB:12:34:56 (public)\n\tName: board\n\tPowered: yes\n"
    assert parse_bluetoothctl_show(text) == {"address": "B8:27:EB:12:34:56", "powered": "yes"}


def test_probe_device_and_disk(tmp_path, pty_path):
    tty = probe_device("gps", pty_path)
    assert tty.exists and tty.is_char_device and tty.readable and tty.writable
    disk = probe_disk(tmp_path / "a" / "b")
    assert not disk.exists and disk.writable and disk.free_bytes > 0


def test_probe_clock_pairs_wall_and_monotonic():
    c = probe_clock()
    assert abs((time.monotonic() + c.wall_minus_monotonic_s) - time.time()) < 0.5
    assert c.monotonic_adjustable is False


# ---------------------------------------------------------------- listening to real sources
def test_listen_collects_from_a_real_serial_port(pty_path):
    """The project's serial source reading a pseudo-terminal: lines written to the master arrive."""
    from livecoach.sources.serial_line import gps_source

    master, slave = os.openpty()
    path = os.ttyname(slave)
    spec = SensorSpec("gps", CH_GPS, path, "serial", 9600)
    line = _rmc(21000.0) + b"\r\n"

    async def main():
        async def writer():
            for _ in range(15):
                await asyncio.sleep(0.05)
                os.write(master, line)

        task = asyncio.create_task(writer())
        out = await listen([(spec, gps_source(path, 9600))], 1.2)
        await task
        return out

    try:
        (traffic,) = asyncio.run(main())
    finally:
        os.close(master)
        os.close(slave)
    assert traffic.connected and len(traffic.events) >= 10
    assert traffic.events[0].payload == line.rstrip(b"\r\n")


def test_listen_reports_a_failing_and_a_silent_source():
    class Broken:
        async def run(self, queue):
            raise OSError(2, "No such file or directory")

    class LinkDownOnly:
        async def run(self, queue):
            await queue.put(RawEvent(time.monotonic(), CH_LINK, b"ble.csc down"))
            await asyncio.sleep(10)

    a = SensorSpec("gps", CH_GPS, "/dev/x", "serial", 9600)
    b = SensorSpec("speed", CH_CSC, "C4:00:00:00:00:02", "ble")
    c = SensorSpec("power", "ble.cycling_power", "C4:00:00:00:00:01", "ble")
    t0 = time.monotonic()
    out = asyncio.run(listen([(a, Broken()), (b, LinkDownOnly())], 0.3, failed={c: "no adapter"}))
    assert time.monotonic() - t0 < 3.0
    by = {t.spec.role: t for t in out}
    assert not by["gps"].connected and "No such file" in by["gps"].error
    assert not by["speed"].connected and by["speed"].error == "link down"
    assert not by["power"].connected and by["power"].error == "no adapter"


def test_gather_facts_reads_a_real_gps_through_the_project_sources(tmp_path):
    """`livecoach check` end to end on real probes: the GPS on a pseudo-terminal via pyserial."""
    import threading

    from livecoach.setup_check.gather import gather_facts

    master, slave = os.openpty()
    data = _ride_dict(check={"listen_s": 1.5})
    data["sensors"].update(power_address="", speed_address="", heart_rate_address="",
                           gps_port=os.ttyname(slave))
    from sim.tomlwrite import dumps

    ride_path = tmp_path / "ride.toml"
    ride_path.write_text(dumps(data))
    stop = threading.Event()

    def feed():
        while not stop.is_set():
            now = time.time()
            sod = now % 86400.0
            date = time.strftime("%d%m%y", time.gmtime(now))
            rmc = nmea.encode_rmc(utc_time=nmea.utc_time_text(sod), utc_date=date, latitude_deg=10.5,
                                  longitude_deg=-20.25, speed_mps=0.0, course_deg=0.0)
            gga = nmea.encode_gga(utc_time=nmea.utc_time_text(sod), latitude_deg=10.5,
                                  longitude_deg=-20.25, altitude_m=1400.0, satellites=9, hdop=0.9)
            os.write(master, rmc + b"\r\n" + gga + b"\r\n")
            stop.wait(0.1)

    writer = threading.Thread(target=feed, daemon=True)
    writer.start()
    try:
        outcome = gather_facts(ride_path, plan_path=tmp_path / "none.csv")
    finally:
        stop.set()
        writer.join(timeout=5)
        os.close(master)
        os.close(slave)
    rows = {r.name.split(" ")[0]: r for r in outcome.results}
    assert rows["GPS"].status == GO and "9 satellites" in rows["GPS"].detail
    assert rows["serial"].status == GO  # the pty is a real tty this user can open
    # The wall clock agrees with the GPS time the feeder took from it.
    assert rows["clock"].status == GO
    # No power meter configured, no plan: no-go overall.
    assert rows["sensors"].status == NO_GO and not is_go(outcome.results)
