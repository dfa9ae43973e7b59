"""The ride file: the example loads; every bad input gets a clear, located error."""

from __future__ import annotations

import copy
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

import pytest

from livecoach.cli.commands.init import example_ride_text
from livecoach.config.ridefile import (
    OPTIONAL_SECTIONS,
    CourseConfig,
    RideConfig,
    load_ride_file,
    parse_ride_dict,
    parse_ride_text,
    register_section,
)
from livecoach.config.schema import setting
from livecoach.errors import ConfigError, LivecoachError, PhysicsError
from livecoach.physics.atmosphere import air_density_kgpm3, isa_pressure_pa

EXAMPLE = tomllib.loads(example_ride_text())


def _ride(**changes) -> dict:
    """The example ride as a dict with ``section__key=value`` changes (value None deletes)."""
    data = copy.deepcopy(EXAMPLE)
    for name, value in changes.items():
        section, key = name.split("__")
        if value is None:
            data[section].pop(key, None)
        else:
            data[section][key] = value
    return data


def _error(data: dict, base_dir: Path | None = None) -> str:
    with pytest.raises(ConfigError) as info:
        parse_ride_dict(data, "ride.toml", base_dir)
    assert isinstance(info.value, LivecoachError)
    return str(info.value)


# ---------------------------------------------------------------- good files
def test_example_file_loads_with_expected_values(tmp_path):
    path = tmp_path / "ride.toml"
    path.write_text(example_ride_text(), encoding="utf-8")
    ride = load_ride_file(path)
    assert isinstance(ride, RideConfig)
    assert ride.vehicle.mass_kg == 98.0
    assert ride.vehicle.cda_m2 == 0.030
    assert ride.rider.w_prime_j == 18000
    assert ride.course.trap_exit_m == 6700.0
    assert ride.course.elevation_m(1500.0) == pytest.approx(1400.5)  # linear between points
    assert ride.course.grade(1000.0) == pytest.approx(-9.0 / 3000.0)
    # Moist-air density as the physics module computes it.
    assert ride.air.density_kgpm3 == pytest.approx(air_density_kgpm3(86000.0, 18.0, 30.0))
    assert ride.text == example_ride_text()
    assert ride.source == str(path)


def test_parse_ride_text_round_trip():
    ride = parse_ride_text(example_ride_text(), "recording header")
    assert ride.vehicle.crr == 0.0035


def test_altitude_instead_of_pressure_uses_standard_atmosphere():
    ride = parse_ride_dict(_ride(air__pressure_pa=None, air__altitude_m=1400.0))
    # U.S. Standard Atmosphere 1976 pressure (see tests/test_atmosphere.py for its checks).
    assert ride.air.station_pressure_pa == pytest.approx(isa_pressure_pa(1400.0))


def test_integer_for_float_key_is_accepted():
    ride = parse_ride_dict(_ride(vehicle__mass_kg=98))
    assert isinstance(ride.vehicle.mass_kg, float)


def test_course_built_directly_gets_its_profile():
    course = CourseConfig(runup_m=100.0, trap_m=50.0, elevation=[[0, 10.0], [150, 8.5]])
    assert course.distances_m == (0.0, 150.0)
    assert course.grade(20.0) == pytest.approx(-0.01)
    assert course.elevation_m(500.0) == 8.5  # held beyond the ends
    with pytest.raises(PhysicsError, match="distance_m"):
        course.grade(math.nan)
    with pytest.raises(PhysicsError, match="distance_m"):
        course.elevation_m(math.inf)


# ---------------------------------------------------------------- GPX
# Invented coordinates along a meridian. Spacing 0.01 deg of latitude is R * 0.01 * pi / 180
# on a sphere of the IUGG mean earth radius 6 371 008.8 m (common practice: great-circle
# distance; the haversine formula gives exactly this along a meridian).
_GPX_STEP_M = 6371008.8 * math.radians(0.01)


def _write_gpx(path: Path, n_points: int, start_ele_m: float = 1405.0, drop_m: float = 2.0,
               extra: str = "") -> None:
    pts = "\n".join(
        f'<trkpt lat="{0.01 * i:.6f}" lon="-0.500000"><ele>{start_ele_m - drop_m * i:.2f}</ele></trkpt>'
        for i in range(n_points)
    )
    path.write_text(
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<gpx version="1.1" creator="livecoach tests" xmlns="http://www.topografix.com/GPX/1/1">\n'
        f"<trk><name>invented test course</name><trkseg>\n{pts}\n{extra}</trkseg></trk>\n</gpx>\n",
        encoding="utf-8",
    )


def _ride_text_with_gpx(gpx_name: str) -> str:
    lines = []
    for line in example_ride_text().splitlines():
        if line.startswith("elevation ="):
            line = f'gpx = "{gpx_name}"'
        lines.append(line)
    return "\n".join(lines) + "\n"


def test_real_gpx_file_is_loaded_relative_to_the_ride_file(tmp_path):
    _write_gpx(tmp_path / "course.gpx", n_points=8)
    ride_path = tmp_path / "ride.toml"
    ride_path.write_text(_ride_text_with_gpx("course.gpx"), encoding="utf-8")
    ride = load_ride_file(ride_path)
    ds = ride.course.distances_m
    assert len(ds) == 8
    assert ds[1] == pytest.approx(_GPX_STEP_M, rel=1e-9)
    assert ds[-1] == pytest.approx(7 * _GPX_STEP_M, rel=1e-9)
    assert ride.course.elevations_m[3] == pytest.approx(1399.0)
    assert ride.course.grade(100.0) == pytest.approx(-2.0 / _GPX_STEP_M, rel=1e-9)


def test_gpx_repeated_points_are_skipped(tmp_path):
    repeat = '<trkpt lat="0.070000" lon="-0.500000"><ele>1391.00</ele></trkpt>\n'
    _write_gpx(tmp_path / "course.gpx", n_points=8, extra=repeat)
    (tmp_path / "ride.toml").write_text(_ride_text_with_gpx("course.gpx"), encoding="utf-8")
    assert len(load_ride_file(tmp_path / "ride.toml").course.distances_m) == 8


def test_missing_gpx_file_names_the_file(tmp_path):
    (tmp_path / "ride.toml").write_text(_ride_text_with_gpx("nowhere.gpx"), encoding="utf-8")
    with pytest.raises(ConfigError, match=r"ride\.toml.*\[course\] gpx.*nowhere\.gpx.*not found"):
        load_ride_file(tmp_path / "ride.toml")


def test_gpx_too_short_for_the_course(tmp_path):
    _write_gpx(tmp_path / "course.gpx", n_points=3)  # about 2.2 km, course needs 6.7 km
    (tmp_path / "ride.toml").write_text(_ride_text_with_gpx("course.gpx"), encoding="utf-8")
    with pytest.raises(ConfigError, match=r"gpx.*must cover 0\.\.6700 m"):
        load_ride_file(tmp_path / "ride.toml")


@pytest.mark.parametrize(
    "body, word",
    [
        ("<gpx><trk><trkseg><trkpt lat='1' lon='2'><ele>abc</ele></trkpt>", "not valid XML"),
        ("<gpx><trk><trkseg><trkpt lat='1' lon='2'><ele>abc</ele></trkpt></trkseg></trk></gpx>",
         "point 0 has <ele>abc</ele>, not a number"),
        ("<gpx><trk><trkseg><trkpt lat='1' lon='2'></trkpt></trkseg></trk></gpx>",
         "point 0 has no <ele>"),
        ("<gpx><trk><trkseg><trkpt lat='95' lon='2'><ele>1</ele></trkpt></trkseg></trk></gpx>",
         "out of range"),
        ("<kml></kml>", "not a GPX file"),
        ("<gpx><trk><trkseg><trkpt lat='1' lon='2'><ele>1</ele></trkpt></trkseg></trk></gpx>",
         "fewer than two"),
    ],
)
def test_bad_gpx_content(tmp_path, body, word):
    (tmp_path / "c.gpx").write_text(body, encoding="utf-8")
    (tmp_path / "ride.toml").write_text(_ride_text_with_gpx("c.gpx"), encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        load_ride_file(tmp_path / "ride.toml")
    assert word in str(info.value) and "c.gpx" in str(info.value)


def test_gpx_and_elevation_together_rejected():
    msg = _error(_ride(course__gpx="course.gpx"))
    assert "[course]" in msg and "either elevation or gpx" in msg


# ---------------------------------------------------------------- bad values
@pytest.mark.parametrize(
    "change, expected",
    [
        ({"vehicle__mass_kg": -98.0}, ["[vehicle] mass_kg", "-98.0", "[1.0, 1000.0]"]),
        ({"vehicle__drivetrain_efficiency": 0.0}, ["drivetrain_efficiency", "0.0", "(0.0, 1.0]"]),
        ({"vehicle__drivetrain_efficiency": 1.2}, ["drivetrain_efficiency", "1.2", "(0.0, 1.0]"]),
        ({"air__relative_humidity_pct": -5}, ["[air] relative_humidity_pct", "-5", "[0.0, 100.0]"]),
        ({"air__relative_humidity_pct": 101}, ["relative_humidity_pct", "101", "[0.0, 100.0]"]),
        ({"vehicle__mass_kg": math.nan}, ["mass_kg", "nan", "finite"]),
        ({"vehicle__cda_m2": math.inf}, ["cda_m2", "inf", "finite"]),
        ({"rider__pmax_w": 300}, ["[rider]", "pmax_w", "cp_w"]),
        ({"air__altitude_m": 1400.0}, ["[air]", "either pressure_pa or altitude_m"]),
        ({"air__pressure_pa": None}, ["[air] pressure_pa is missing"]),
        ({"course__runup_m": 9000}, ["[course]", "must cover 0..9200 m"]),
        ({"course__elevation": [[0, 1405.0], [3000, 1396.0], [3000, 1390.0], [6700, 1381.0]]},
         ["[course] elevation[2]", "not greater than the previous", "3000"]),
        ({"course__elevation": [[0, 1405.0], [4000, 1396.0], [3000, 1390.0], [6700, 1381.0]]},
         ["[course] elevation[2]", "distances must increase"]),
        ({"course__elevation": [[0, 1405.0]]}, ["[course] elevation", "at least two"]),
        ({"course__elevation": [[0, 1405.0], [6700, "low"]]}, ["elevation[1]", "two numbers"]),
        ({"course__elevation": [[0, 1405.0], [6700, 12000.0]]}, ["elevation[1]", "-500..9000"]),
        ({"course__elevation": None}, ["[course] needs an elevation table or a gpx file"]),
    ],
)
def test_bad_values_name_key_value_and_what_is_allowed(change, expected):
    msg = _error(_ride(**change))
    assert msg.startswith("ride.toml: ")
    for text in expected:
        assert text in msg, (text, msg)


@pytest.mark.parametrize(
    "change, expected",
    [
        ({"vehicle__mass_kg": "98"}, ["[vehicle] mass_kg", "'98'", "expected a number"]),
        ({"vehicle__mass_kg": True}, ["mass_kg", "True", "expected a number"]),
        ({"vehicle__wheel_bearing_loss": "yes"}, ["wheel_bearing_loss", "true or false"]),
        ({"vehicle__name": 5}, ["[vehicle] name", "text string"]),
        ({"course__elevation": "flat"}, ["[course] elevation", "expected a list"]),
        ({"sensors__gps_baud": 9600.5}, ["[sensors] gps_baud", "whole number"]),
        ({"air__pressure_pa": "86 kPa"}, ["[air] pressure_pa", "expected a number"]),
    ],
)
def test_wrong_types(change, expected):
    msg = _error(_ride(**change))
    for text in expected:
        assert text in msg, (text, msg)


def test_section_of_wrong_type():
    data = _ride()
    data["vehicle"] = 3
    assert "[vehicle] must be a table" in _error(data)


# ---------------------------------------------------------------- unknown and missing
def test_unknown_key_rejected_with_nearest_name():
    data = _ride()
    data["vehicle"]["mas_kg"] = 98.0
    msg = _error(data)
    assert "unknown key 'mas_kg' in [vehicle]" in msg and "did you mean 'mass_kg'" in msg


def test_unknown_key_far_from_any_lists_the_valid_ones():
    data = _ride()
    data["rider"]["zzzz"] = 1
    msg = _error(data)
    assert "unknown key 'zzzz' in [rider]" in msg and "cp_w" in msg and "w_prime_j" in msg


def test_internal_fields_are_not_ride_file_keys():
    data = _ride()
    data["course"]["distances_m"] = [0, 1]
    assert "unknown key 'distances_m' in [course]" in _error(data)


def test_unknown_section_rejected_with_nearest_name():
    data = _ride()
    data["vehicel"] = {}
    msg = _error(data)
    assert "unknown section [vehicel]" in msg and "did you mean 'vehicle'" in msg


@pytest.mark.parametrize("section", ["vehicle", "rider", "course", "air"])
def test_missing_section(section):
    data = _ride()
    del data[section]
    assert f"section [{section}] is missing" in _error(data)


@pytest.mark.parametrize(
    "section, key",
    [("vehicle", "cda_m2"), ("vehicle", "mass_kg"), ("rider", "cp_w"), ("course", "runup_m"),
     ("air", "temperature_c")],
)
def test_missing_key(section, key):
    msg = _error(_ride(**{f"{section}__{key}": None}))
    assert f"[{section}] {key} is missing" in msg


# ---------------------------------------------------------------- files
def test_missing_ride_file(tmp_path):
    with pytest.raises(ConfigError, match="not found"):
        load_ride_file(tmp_path / "none.toml")


def test_bad_toml_names_the_line(tmp_path):
    path = tmp_path / "ride.toml"
    path.write_text("[vehicle]\nmass_kg = = 3\n", encoding="utf-8")
    with pytest.raises(ConfigError, match=r"not valid TOML.*line 2"):
        load_ride_file(path)


def test_not_utf8(tmp_path):
    path = tmp_path / "ride.toml"
    path.write_bytes(b"\xff\xfe\x00bad")
    with pytest.raises(ConfigError, match="cannot be read"):
        load_ride_file(path)


# ---------------------------------------------------------------- registered sections
@dataclass(frozen=True, kw_only=True)
class _DemoSection:
    level: int = setting(3, doc="a level", lo=1, hi=5)
    labels: list[str] = setting([], doc="some labels")


def test_registered_section_is_validated_and_defaults_apply():
    register_section("testdemo", _DemoSection)
    try:
        ride = parse_ride_dict({**_ride(), "testdemo": {"level": 4, "labels": ["a", "b"]}})
        assert ride.section("testdemo") == _DemoSection(level=4, labels=["a", "b"])
        assert parse_ride_dict(_ride()).section("testdemo") == _DemoSection()
        msg = _error({**_ride(), "testdemo": {"level": 9}})
        assert "[testdemo] level = 9" in msg and "[1, 5]" in msg
        msg = _error({**_ride(), "testdemo": {"labels": ["a", 2]}})
        assert "[testdemo] labels[1] = 2" in msg
    finally:
        OPTIONAL_SECTIONS.pop("testdemo", None)


def test_section_registered_by_name_is_imported_lazily():
    register_section("testlazy", f"{__name__}:_DemoSection")
    try:
        ride = parse_ride_dict({**_ride(), "testlazy": {"level": 2}})
        assert ride.section("testlazy").level == 2
    finally:
        OPTIONAL_SECTIONS.pop("testlazy", None)


def test_unknown_optional_section_lookup():
    ride = parse_ride_dict(_ride())
    with pytest.raises(ConfigError, match="no ride-file section named \\[sensorz\\]"):
        ride.section("sensorz")
