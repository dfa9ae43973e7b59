"""Fuzzing every input the module parses, with one budget selectable for long runs.

Budget: ``LIVECOACH_FUZZ`` = ``ci`` (default: 30 to 150 examples per test,
a second or two each, derandomized like the rest of the suite), ``long`` (a
hundred times that, exploring new inputs on every run: ``make fuzz``; also
chosen by ``HYPOTHESIS_PROFILE=explore``) or a number of examples per test. Inputs are grown from valid ones (made by the
project's encoders, whose byte layouts are checked against the Bluetooth SIG
GATT specifications, NMEA 0183 and the lsl1 note in tests/test_codec_*) and
then mutated byte by byte; checksums are recomputed half of the time so the
mutations reach the field parsers behind them.

Properties, for every decoder and loader:

* it returns a value or raises the project's error for that input
  (``DecodeError``, ``RecordingError``, ``ConfigError``, ...): nothing else,
  ever (a stray ``ValueError`` or ``IndexError`` would escape the live loop's
  per-payload guard as a "decoder error");
* what it accepts holds no NaN or infinity (issue 8: NaN and infinite values
  must be stopped at the edge);
* the decode layer and the pipeline, fed random mixtures of good, damaged
  and hostile events with hostile times, never raise and never show a
  non-finite number or a clock going backwards in the live state;
* a ride file that loads runs: a pipeline can be built from it and fed.

A crash found here becomes a named regression test at the end of this file.
"""

from __future__ import annotations

import csv
import dataclasses
import io
import math
import os
import tomllib
from typing import Any

import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from livecoach.cli.commands.init import example_ride_text
from livecoach.codecs.csc import CscMeasurement, decode_csc, encode_csc
from livecoach.codecs.cycling_power import CyclingPowerMeasurement, decode_cycling_power, encode_cycling_power
from livecoach.codecs.heart_rate import HeartRateMeasurement, decode_heart_rate, encode_heart_rate
from livecoach.codecs.mcu_line import (
    McuAir,
    McuButton,
    McuHello,
    McuWheel,
    crc16_ccitt_false,
    decode_mcu_line,
    encode_mcu_line,
)
from livecoach.codecs.nmea import decode_nmea, encode_gga, encode_rmc, encode_vtg, nmea_checksum, utc_time_text
from livecoach.config.ridefile import parse_ride_dict, parse_ride_text
from livecoach.errors import ConfigError, DecodeError, LivecoachError
from livecoach.pipeline.decode import Decoder
from livecoach.stream.events import (
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

_PROFILE = (os.environ.get("LIVECOACH_FUZZ")
            or ("long" if os.environ.get("HYPOTHESIS_PROFILE") == "explore" else "ci")).strip().lower()


def fuzz(ci_examples: int):
    """Hypothesis settings for a fuzz test: ``ci_examples`` in the normal suite,
    a hundred times that with LIVECOACH_FUZZ=long, or LIVECOACH_FUZZ examples
    (the long runs explore: not derandomized)."""
    if _PROFILE == "ci":
        n = ci_examples
    elif _PROFILE == "long":
        n = 100 * ci_examples
    else:
        try:
            n = int(_PROFILE)
        except ValueError:
            raise RuntimeError(f"LIVECOACH_FUZZ={_PROFILE!r}: expected ci, long or a number of examples") from None
    extra = {} if _PROFILE == "ci" else {"derandomize": False}
    return settings(max_examples=n, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                           HealthCheck.filter_too_much], **extra)


def _finite_fields(obj: Any, where: str) -> None:
    """Every float (also inside tuples) of a dataclass-like object is finite."""
    if dataclasses.is_dataclass(obj):
        items = [(f.name, getattr(obj, f.name)) for f in dataclasses.fields(obj)]
    else:
        items = list(vars(obj).items())
    for name, value in items:
        values = value if isinstance(value, (tuple, list)) else (value,)
        for v in values:
            if isinstance(v, float):
                assert math.isfinite(v), f"{where}.{name} = {v!r}"


# ----------------------------------------------------------------- mutations
mutation = st.tuples(st.sampled_from(["flip", "set", "insert", "delete", "truncate", "extend"]),
                     st.integers(0, 10_000), st.integers(0, 255))


def mutate(data: bytes, ops: list[tuple[str, int, int]]) -> bytes:
    b = bytearray(data)
    for op, pos, value in ops:
        i = pos % (len(b) + 1)
        if op == "flip" and b:
            b[i % len(b)] ^= 1 << (value % 8)
        elif op == "set" and b:
            b[i % len(b)] = value
        elif op == "insert":
            b.insert(i, value)
        elif op == "delete" and b:
            del b[i % len(b)]
        elif op == "truncate":
            del b[i:]
        elif op == "extend":
            b.extend(bytes([value]) * (1 + pos % 7))
    return bytes(b)


u16 = st.integers(0, 0xFFFF)
u32 = st.integers(0, 0xFFFFFFFF)

power_payload = st.builds(
    lambda p, wheel, crank, bal, torque: encode_cycling_power(CyclingPowerMeasurement.make(
        p, wheel=wheel, crank=crank, pedal_balance_pct=bal, accumulated_torque_nm=torque)),
    st.integers(-2000, 3000), st.none() | st.tuples(u32, u16), st.none() | st.tuples(u16, u16),
    st.none() | st.floats(0.0, 100.0), st.none() | st.floats(0.0, 2000.0),
)
csc_payload = st.builds(lambda w, c: encode_csc(CscMeasurement.make(wheel=w, crank=c)),
                        st.none() | st.tuples(u32, u16), st.none() | st.tuples(u16, u16))
hr_payload = st.builds(lambda bpm, rr: encode_heart_rate(HeartRateMeasurement.make(bpm, rr_intervals_s=rr)),
                       st.integers(30, 240), st.lists(st.floats(0.25, 2.0), max_size=4).map(tuple))


def _resign_nmea(line: bytes) -> bytes:
    """Recompute an NMEA checksum after a mutation (so the fields get parsed)."""
    text = line.decode("latin-1")
    star = text.rfind("*")
    body = text[1:star] if text.startswith("$") and star > 0 else text.lstrip("$")
    try:
        return f"${body}*{nmea_checksum(body):02X}".encode("latin-1")
    except UnicodeEncodeError:
        return line


nmea_line = st.one_of(
    st.builds(lambda lat, lon, v, c, t: encode_rmc(utc_time=utc_time_text(t), utc_date="170531", latitude_deg=lat,
                                                    longitude_deg=lon, speed_mps=v, course_deg=c),
              st.floats(-89.9, 89.9), st.floats(-179.9, 179.9), st.floats(0.0, 80.0), st.floats(0.0, 359.0),
              st.floats(0.0, 86399.0)),
    st.builds(lambda lat, lon, alt: encode_gga(utc_time="054800.00", latitude_deg=lat, longitude_deg=lon,
                                               altitude_m=alt),
              st.floats(-89.9, 89.9), st.floats(-179.9, 179.9), st.floats(-400.0, 9000.0)),
    st.builds(lambda v, c: encode_vtg(course_deg=c, speed_mps=v), st.floats(0.0, 80.0), st.floats(0.0, 359.0)),
)


def _resign_mcu(line: bytes) -> bytes:
    head, sep, _crc = line.rpartition(b" #")
    body = head if sep else line
    return body + b" #%04X" % crc16_ccitt_false(body)


mcu_line = st.one_of(
    st.builds(lambda t, a, p, tc: encode_mcu_line(McuAir(t, airspeed_mps=a, pressure_pa=p, temperature_c=tc)),
              u32, st.floats(0.0, 60.0), st.floats(60_000.0, 110_000.0), st.floats(-20.0, 45.0)),
    st.builds(lambda t, n, e: encode_mcu_line(McuWheel(t, n, e)), u32, u32, u32),
    st.builds(lambda t: encode_mcu_line(McuButton(t, "mark")), u32),
    st.builds(lambda t: encode_mcu_line(McuHello(t, "fw-1.2")), u32),
)

#: Hostile numbers spelled as text, spliced into NMEA and lsl1 fields.
hostile_number = st.sampled_from(["nan", "NaN", "inf", "-inf", "1e999", "1e5", "1_0", "0x10", "--1", ".", "-",
                                  "9" * 400, "1.5.2", "+", "٣", " 1", "1 "])


def _splice_text(line: bytes, word: str, pos: int) -> bytes:
    parts = line.split(b",") if line.startswith(b"$") else line.split(b"=")
    if len(parts) < 2:
        return line
    k = 1 + pos % (len(parts) - 1)
    if line.startswith(b"$"):
        parts[k] = word.encode("utf-8")
        return b",".join(parts)
    rest = parts[k].split(b" ", 1)
    parts[k] = word.encode("utf-8") + (b" " + rest[1] if len(rest) > 1 else b"")
    return b"=".join(parts)


# ----------------------------------------------------------------- the codecs
CODECS = [
    ("cycling power", power_payload, decode_cycling_power, None),
    ("csc", csc_payload, decode_csc, None),
    ("heart rate", hr_payload, decode_heart_rate, None),
    ("nmea", nmea_line, lambda b: decode_nmea(b, 1.0), _resign_nmea),
    ("lsl1", mcu_line, decode_mcu_line, _resign_mcu),
]


@pytest.mark.parametrize("name, valid, decode, resign", CODECS, ids=[c[0] for c in CODECS])
def test_codecs_accept_or_reject_cleanly_and_accept_only_finite_values(name, valid, decode, resign):
    @fuzz(150)
    @given(valid, st.lists(mutation, max_size=6), st.booleans())
    def check(payload, ops, fix):
        data = mutate(payload, ops)
        if fix and resign is not None:
            data = resign(data)
        try:
            out = decode(data)
        except DecodeError:
            return
        if out is not None:
            _finite_fields(out, name)

    check()


@pytest.mark.parametrize("valid, decode, resign", [(nmea_line, lambda b: decode_nmea(b, 1.0), _resign_nmea),
                                                   (mcu_line, decode_mcu_line, _resign_mcu)],
                         ids=["nmea", "lsl1"])
def test_hostile_numbers_in_text_protocols_are_rejected(valid, decode, resign):
    @fuzz(150)
    @given(valid, hostile_number, st.integers(0, 30))
    def check(line, word, pos):
        data = resign(_splice_text(line, word, pos))
        try:
            out = decode(data)
        except DecodeError:
            return
        if out is not None:
            _finite_fields(out, "decoded")

    check()


def test_nmea_field_split_agrees_with_pynmea2():
    """The live path cuts sentences itself; pynmea2 (PyPI, an independent NMEA
    parser) must see the same sentence type and the same data fields."""
    import pynmea2

    @fuzz(150)
    @given(nmea_line, st.lists(st.tuples(st.integers(0, 200), st.sampled_from(list(",.0123456789ANSEWV-"))),
                               max_size=3))
    def check(line, edits):
        text = line.decode()
        for pos, ch in edits:
            i = 1 + pos % (len(text) - 4)
            text = text[:i] + ch + text[i + 1:]
        data = _resign_nmea(text.encode())
        try:
            ref = pynmea2.parse(data.decode(), check=True)
        except pynmea2.ParseError:
            return
        try:
            ours = decode_nmea(data, 1.0)
        except DecodeError as exc:
            # we reject only on field content pynmea2 does not check
            assert "bad checksum" not in str(exc) and "address field" not in str(exc)
            return
        assert (ours is None) == (ref.sentence_type not in ("RMC", "GGA", "VTG"))
        if ours is None or not ours.valid:
            return
        try:   # pynmea2's own reading of the fields (its properties raise on bad text)
            ref_lat = getattr(ref, "latitude", None)
            ref_lon = getattr(ref, "longitude", None)
        except (ValueError, TypeError):
            return
        if ours.latitude_deg is not None:
            assert ours.latitude_deg == pytest.approx(ref_lat, abs=1e-9)
            assert ours.longitude_deg == pytest.approx(ref_lon, abs=1e-9)
        if ref.sentence_type == "RMC" and ours.speed_mps is not None:
            assert ours.speed_mps == pytest.approx(float(ref.spd_over_grnd) * 1852.0 / 3600.0)

    check()


# ----------------------------------------------------------------- the decode layer
CHANNELS = [CH_POWER, CH_CSC, CH_HEART_RATE, CH_GPS, CH_MCU, CH_LINK, CH_CONTROL, CH_TICK, "bogus.channel"]
event_payload = st.one_of(power_payload, csc_payload, hr_payload, nmea_line, mcu_line,
                          st.sampled_from([b"ble.csc down", b"serial.gps up", b"marker start", b"\xff\xfe"]),
                          st.binary(max_size=40))
time_step = st.one_of(st.floats(0.0, 2.0), st.floats(-5.0, 0.0), st.sampled_from([math.nan, math.inf, -math.inf,
                                                                                   1e9, 0.0]))
event_list = st.lists(st.tuples(st.sampled_from(CHANNELS), event_payload, st.lists(mutation, max_size=3), time_step),
                      min_size=1, max_size=60)


def _events(items) -> list[RawEvent]:
    t = 100.0
    out = []
    for channel, payload, ops, dt in items:
        t_ev = t + dt
        if math.isfinite(t_ev) and abs(t_ev) < 1e8:
            t = t_ev
        out.append(RawEvent(t_ev, channel, mutate(payload, ops)))
    return out


@fuzz(100)
@given(event_list)
def test_decode_layer_never_raises_and_emits_only_finite_samples(items):
    d = Decoder()
    for ev in _events(items):
        for s in d.feed(ev):
            if type(s).__name__ != "Rejected":
                _finite_fields(s, type(s).__name__)
    for ch, s in d.stats().items():
        assert s["accepted"] + s["ignored"] <= s["payloads"]
        assert sum(s["reasons"].values()) == s["rejected"]


@fuzz(30)
@given(event_list)
def test_pipeline_never_raises_and_shows_only_finite_numbers(items):
    from livecoach.pipeline.processor import Pipeline

    pipe = Pipeline(_EXAMPLE, None, keep_for_batch=True)
    last_t = -math.inf
    for ev in _events(items):
        st_ = pipe.feed(ev).state
        assert math.isfinite(st_.t_s) or st_.t_s == 0.0
        assert st_.t_s >= last_t or last_t == -math.inf
        last_t = st_.t_s
        for f in dataclasses.fields(st_):
            v = getattr(st_, f.name)
            if isinstance(v, float):
                assert math.isfinite(v), f"LiveState.{f.name} = {v!r}"
    summary = pipe.summary()
    assert not any("decoder error" in w for w in summary["warnings"]), summary["warnings"]


# ----------------------------------------------------------------- the ride file
_EXAMPLE_TEXT = example_ride_text()
_EXAMPLE = parse_ride_text(_EXAMPLE_TEXT, "example ride")
_BASE = tomllib.loads(_EXAMPLE_TEXT)


def _section_keys() -> list[tuple[str, str]]:
    from livecoach.config.ridefile import OPTIONAL_SECTIONS, REQUIRED_SECTIONS, section_class

    out = []
    for name in list(REQUIRED_SECTIONS) + list(OPTIONAL_SECTIONS):
        try:
            cls = section_class(name)
        except LivecoachError:
            continue
        for f in dataclasses.fields(cls):
            if f.init:
                out.append((name, f.name))
    return out


_KEYS = _section_keys()
toml_value = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True), st.integers(-10**20, 10**20), st.booleans(),
    st.text(max_size=12), st.lists(st.floats(allow_nan=True), max_size=3),
    st.lists(st.lists(st.floats(-1e4, 1e4), min_size=2, max_size=2), max_size=4),
    st.dictionaries(st.text(max_size=4), st.integers(), max_size=2),
)
ride_edit = st.one_of(
    st.tuples(st.just("set"), st.sampled_from(_KEYS), toml_value),
    st.tuples(st.just("delete"), st.sampled_from(_KEYS), st.none()),
    st.tuples(st.just("unknown"), st.sampled_from(_KEYS), toml_value),
    st.tuples(st.just("section"), st.sampled_from(_KEYS), toml_value),
)


def _edit(data: dict, edits) -> dict:
    import copy

    d = copy.deepcopy(data)
    for op, (section, key), value in edits:
        table = d.setdefault(section, {})
        if op == "section":
            d[section] = value
            continue
        if not isinstance(table, dict):
            continue
        if op == "set":
            table[key] = value
        elif op == "delete":
            table.pop(key, None)
        else:
            table[key + "_x"] = value
    return d


def _usable(ride) -> None:
    """A loaded ride file must run: finite settings, a pipeline built and fed."""
    from livecoach.pipeline.processor import Pipeline

    for part in (ride.vehicle, ride.rider, ride.air):
        _finite_fields(part, type(part).__name__)
    for name in ride.extra:
        _finite_fields(ride.section(name), name)
    pipe = Pipeline(ride, None, keep_for_batch=False)
    for k in range(5):
        pipe.feed(RawEvent(float(k), CH_POWER, encode_cycling_power(CyclingPowerMeasurement.make(250))))


@fuzz(150)
@given(st.lists(ride_edit, min_size=1, max_size=4))
def test_ride_file_values_load_or_give_a_config_error(edits):
    data = _edit(_BASE, edits)
    try:
        ride = parse_ride_dict(data, "fuzzed ride file")
    except ConfigError as exc:
        assert str(exc).startswith("fuzzed ride file")
        return
    _usable(ride)


@fuzz(100)
@given(st.lists(st.tuples(st.integers(0, 10**6), st.sampled_from(list("=[]\"'#.,\n 0123456789abcdefxyz_-+eE{}"))),
                min_size=1, max_size=8))
def test_ride_file_text_loads_or_gives_a_config_error(edits):
    text = _EXAMPLE_TEXT
    for pos, ch in edits:
        i = pos % len(text)
        text = text[:i] + ch + text[i + 1:] if pos % 3 else text[:i] + ch + text[i:]
    try:
        ride = parse_ride_text(text, "fuzzed.toml")
    except ConfigError:
        return
    _usable(ride)


# ----------------------------------------------------------------- files: CSV ride, plan, recording
CSV_COLUMNS = ["time_s", "power_w", "speed_mps", "distance_m", "altitude_m", "grade", "cadence_rpm",
               "heart_rate_bpm", "airspeed_mps", "temperature_c", "pressure_pa", "relative_humidity_pct", "notes"]
cell = st.one_of(st.floats(-1e3, 1e4).map(repr), st.sampled_from(["", "nan", "inf", "-inf", "1e999", "x", "NaN",
                                                                  "  3 ", "1,5"]))


@fuzz(50)
@given(st.lists(st.sampled_from(CSV_COLUMNS), min_size=1, max_size=8, unique=True),
       st.lists(st.lists(cell, min_size=1, max_size=9), max_size=25), st.booleans())
def test_csv_ride_loads_or_gives_an_error_and_keeps_only_finite_values(tmp_path_factory, header, rows, sort_time):
    from livecoach.io.csv_ride import read_csv_ride

    if sort_time and "time_s" in header:
        k = header.index("time_s")
        for i, r in enumerate(rows):
            if k < len(r):
                r[k] = str(i * 0.5)
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(header)
    w.writerows(rows)
    path = tmp_path_factory.mktemp("csv") / "ride.csv"
    path.write_text(buf.getvalue(), encoding="utf-8")
    try:
        ride = read_csv_ride(path, _EXAMPLE)
    except LivecoachError:
        return
    for s in ride.samples:
        _finite_fields(s, type(s).__name__)


@pytest.fixture(scope="module")
def plan_text(tmp_path_factory) -> str:
    from livecoach.plan import make_plan, save_plan

    return save_plan(make_plan(_EXAMPLE), tmp_path_factory.mktemp("plan") / "plan.csv").read_text(encoding="utf-8")


def test_plan_file_loads_or_gives_an_error(plan_text, tmp_path):
    from livecoach.plan.plan import load_plan

    @fuzz(50)
    @given(st.lists(mutation, min_size=1, max_size=5), st.sampled_from(["", "nan", "inf", "-1", "1e999", "x"]),
           st.integers(0, 10**6))
    def check(ops, word, pos):
        text = plan_text
        if word:
            lines = text.splitlines()
            k = 1 + pos % max(len(lines) - 1, 1)
            cells = lines[k].split(",")
            cells[pos % len(cells)] = word
            lines[k] = ",".join(cells)
            text = "\n".join(lines) + "\n"
        data = mutate(text.encode("utf-8"), ops) if pos % 2 else text.encode("utf-8")
        path = tmp_path / "fuzzed-plan.csv"
        path.write_bytes(data)
        try:
            plan = load_plan(path, _EXAMPLE)
        except LivecoachError:
            return
        for name in ("power_w", "speed_mps", "time_s", "w_prime_balance_j", "distance_m"):
            assert all(math.isfinite(x) for x in getattr(plan, name)), name

    check()


@pytest.fixture(scope="module")
def small_recording(tmp_path_factory) -> bytes:
    import itertools

    from livecoach.recording import Recorder, header_for_ride
    from sim.run import iter_events

    path = tmp_path_factory.mktemp("rec") / "small.lcrec"
    rec = Recorder(path, header_for_ride(_EXAMPLE, start_wall_time_unix_s=1.9e9, start_monotonic_s=0.0),
                   flush_interval_s=0.05)
    assert rec.start()
    for ev in itertools.islice(iter_events("default"), 300):
        rec.append(ev)
    rec.close()
    return path.read_bytes()


def test_recording_reader_reads_or_gives_a_recording_error(small_recording, tmp_path):
    from livecoach.errors import RecordingError
    from livecoach.recording import RecordingReader

    @fuzz(75)
    @given(st.lists(mutation, min_size=1, max_size=8), st.booleans())
    def check(ops, keep_header):
        data = small_recording
        if keep_header:                     # damage after the header only (the common case)
            cut = 4096
            data = data[:cut] + mutate(data[cut:], ops)
        else:
            data = mutate(data, ops)
        path = tmp_path / "fuzzed.lcrec"
        path.write_bytes(data)
        try:
            reader = RecordingReader(path)
            events = list(reader.events())
        except RecordingError:
            return
        assert all(isinstance(ev, RawEvent) for ev in events)

    check()


def test_telemetry_frames_parse_or_give_a_frame_error():
    from livecoach.pipeline.state import LiveState
    from livecoach.telemetry.frame import pack_frame, state_frame, unpack_packet
    from livecoach.telemetry.reader import FrameReader

    good = pack_frame(state_frame(LiveState(t_s=12.5, distance_m=300.0, speed_mps=20.0, power_w=300.0), 7))

    @fuzz(150)
    @given(st.lists(mutation, max_size=6), st.binary(max_size=30))
    def check(ops, noise):
        data = mutate(good, ops)
        try:
            unpack_packet(data.rstrip(b"\x00"))
        except DecodeError:
            pass
        reader = FrameReader()
        reader.feed(noise + data + noise)

    check()


# ----------------------------------------------------------------- regressions
# (Crashes found by the fuzzers above are kept here as named examples.)


def test_regression_angle_with_the_point_in_the_wrong_place_is_rejected():
    """Found by test_nmea_field_split_agrees_with_pynmea2 (LIVECOACH_FUZZ=long): a
    longitude "001.0000000" (correct checksum) was read as 1 deg, pynmea2 reads it
    as 1 arc-minute; NMEA 0183 writes dddmm.mmmm, so it is malformed and rejected."""
    for body in ("GPGGA,054800.00,0000.00000,N,001.0000000,E,1,08,0.9,1000.0,M,0.0,M,,",
                 "GPRMC,054800.00,A,48.07038,N,01131.000,E,022.4,084.4,230394,,,A"):
        with pytest.raises(DecodeError, match="is not d"):
            decode_nmea(f"${body}*{nmea_checksum(body):02X}".encode(), 1.0)
    body = "GPGGA,054800.00,4807,N,01131,E,1,08,0.9,1000.0,M,0.0,M,,"          # whole minutes are fine
    assert decode_nmea(f"${body}*{nmea_checksum(body):02X}".encode(), 1.0).latitude_deg == pytest.approx(48 + 7 / 60)


def test_regression_position_without_hemisphere_is_rejected():
    """Found by test_nmea_field_split_agrees_with_pynmea2 (LIVECOACH_FUZZ=long): an
    empty hemisphere field passed the check (the empty string is "in" any string)
    and then read as west/south, a sign error; NMEA 0183 needs N/S and E/W."""
    for body in ("GPRMC,000000.00,A,0000.00000,N,00100.00000,,,101.080,0.00,170531,,,A",
                 "GPGGA,054800.00,4807.038,,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"):
        with pytest.raises(DecodeError, match="hemisphere"):
            decode_nmea(f"${body}*{nmea_checksum(body):02X}".encode(), 1.0)
