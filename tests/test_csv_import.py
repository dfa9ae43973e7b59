"""CSV ride import: columns, distance integration, grade sources, and bad input
(rejected per row with file:line and counted; clear errors for unusable files)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from livecoach.cli.commands.init import example_ride_text
from livecoach.config.ridefile import parse_ride_text
from livecoach.errors import CsvImportError
from livecoach.io.csv_ride import read_csv_ride
from livecoach.stream import samples as S

RIDE = parse_ride_text(example_ride_text(), "example ride")


def write(tmp_path, text: str, name: str = "ride.csv", encoding: str = "utf-8"):
    p = tmp_path / name
    p.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return p


def of_type(ride, kind):
    return [s for s in ride.samples if type(s) is kind]


def test_all_columns(tmp_path):
    p = write(tmp_path, (
        "time_s,power_w,speed_mps,distance_m,altitude_m,grade,cadence_rpm,heart_rate_bpm,"
        "airspeed_mps,temperature_c,pressure_pa,relative_humidity_pct\n"
        "0.0,400,10.0,0.0,1405.0,-0.003,90,150,10.5,18.0,86000,30\n"
        "0.5,410.5,10.2,5.05,1404.985,-0.003,91,151,10.7,18.0,86000,30\n"
    ))
    r = read_csv_ride(p, RIDE)
    assert (r.rows, r.rows_used, r.rejected_rows) == (2, 2, 0)
    assert r.notes == [] and r.grade_source == "column" and r.distance_source == "column"
    assert [type(s).__name__ for s in r.samples[:6]] == [
        "AltitudeSample", "AirSample", "SpeedSample", "PowerSample", "CadenceSample", "HeartRateSample"]
    assert of_type(r, S.PowerSample)[1] == S.PowerSample(0.5, 410.5)
    assert of_type(r, S.SpeedSample)[1] == S.SpeedSample(0.5, 10.2, 5.05, source="csv")
    assert of_type(r, S.AirSample)[0] == S.AirSample(0.0, airspeed_mps=10.5, pressure_pa=86000.0,
                                                     temperature_c=18.0, relative_humidity_pct=30.0)
    assert of_type(r, S.AltitudeSample)[0].altitude_m == 1405.0
    assert of_type(r, S.HeartRateSample)[1].heart_rate_bpm == 151.0


def test_distance_integrated_from_speed_by_the_trapezoid_rule(tmp_path):
    rng = np.random.default_rng(7)
    t = np.cumsum(rng.uniform(0.2, 1.0, 40))
    v = rng.uniform(0.0, 20.0, 40)
    lines = ["time_s,power_w,speed_mps"] + [f"{float(a)!r},300,{float(b)!r}" for a, b in zip(t, v)]
    r = read_csv_ride(write(tmp_path, "\n".join(lines) + "\n"), RIDE)
    # Reference: numpy's trapezoid rule over each prefix (numpy.trapezoid / trapz).
    trapezoid = getattr(np, "trapezoid", None) or np.trapz
    expected = [float(trapezoid(v[:i + 1], t[:i + 1])) for i in range(len(t))]
    assert r.distances_m == pytest.approx(expected, rel=1e-12, abs=1e-9)
    assert r.distance_source == "integrated"
    assert any("distance integrated from speed_mps" in n for n in r.notes)


def test_grade_from_altitude(tmp_path):
    # A steady 2 % descent sampled every 2 m: the secant grade is exactly -0.02 (common practice).
    lines = ["time_s,power_w,speed_mps,distance_m,altitude_m"]
    for i in range(60):
        lines.append(f"{i * 0.2},350,10,{i * 2.0},{1400.0 - 0.02 * i * 2.0}")
    r = read_csv_ride(write(tmp_path, "\n".join(lines)), RIDE)
    assert r.grade_source == "altitude"
    assert r.grades == pytest.approx([-0.02] * 60, abs=1e-9)
    alt = of_type(r, S.AltitudeSample)
    assert alt[10].altitude_m == pytest.approx(1400.0 - 0.4) and alt[10].grade == pytest.approx(-0.02)


def test_grade_from_the_course_table(tmp_path):
    # The example ride's course falls 9 m over the first 3000 m and 15 m over the
    # next 3700 m (its elevation table), i.e. grades -0.003 and -15/3700.
    lines = ["time_s,power_w,speed_mps,distance_m", "0,300,10,100", "1,300,10,2999", "2,300,10,3100"]
    r = read_csv_ride(write(tmp_path, "\n".join(lines)), RIDE)
    assert r.grade_source == "course"
    assert r.grades == pytest.approx([-0.003, -0.003, -15.0 / 3700.0])
    assert of_type(r, S.AltitudeSample) == []      # the estimator reads the course table itself
    assert any("course elevation table" in n for n in r.notes)


def test_unknown_and_output_columns_are_noted_and_case_and_bom_tolerated(tmp_path):
    text = "\ufeff Time_S , POWER_W,speed_mps,speed_kmh,lap,cda_m2,phase\n0,300,10,36,1,0.03,runup\n"
    r = read_csv_ride(write(tmp_path, text), RIDE)
    assert r.rows_used == 1
    assert any("'speed_kmh' (did you mean 'speed_mps'?)" in n and "'lap'" in n for n in r.notes)
    assert any("output column(s) (not inputs): cda_m2, phase" in n for n in r.notes)


@pytest.mark.parametrize("text, words", [
    ("time_s,power_w\n0,100\n", "required column 'speed_mps' is missing"),
    ("time_s,power,speed_mps\n0,100,5\n", "required column 'power_w' is missing.*found 'power'"),
    ("time_s;power_w;speed_mps\n0;100;5\n", "separate columns with commas"),
    ("time_s,power_w,speed_mps,power_w\n0,1,2,3\n", "column 'power_w' appears twice"),
    ("", "empty"),
    ("# only a comment\n\n", "empty"),
    ("time_s,power_w,speed_mps\n", "no usable data rows"),
    ("time_s,power_w,speed_mps\n0,abc,5\n1,x,5\n", r"no usable data rows \(2 row\(s\) read, 2 rejected; first: .*:2: column power_w: 'abc' is not a number"),
])
def test_unusable_files_give_clear_errors(tmp_path, text, words):
    p = write(tmp_path, text)
    with pytest.raises(CsvImportError, match=words) as info:
        read_csv_ride(p, RIDE)
    assert str(p) in str(info.value)


def test_missing_file(tmp_path):
    with pytest.raises(CsvImportError, match="not found"):
        read_csv_ride(tmp_path / "nope.csv", RIDE)


def test_bad_rows_are_rejected_with_file_and_line_and_counted(tmp_path):
    text = (
        "# exported by an invented head unit\n"        # line 1
        "time_s,power_w,speed_mps,cadence_rpm\n"       # line 2
        "0,300,10,90\n"                                # 3 ok
        "1,three hundred,10,90\n"                      # 4 text in a number column
        "\n"                                           # 5 blank
        "2,300,,90\n"                                  # 6 empty required cell
        "3,300,10,\n"                                  # 7 ok: empty optional cell
        "4,nan,10,90\n"                                # 8 not finite
        "5,300,inf,90\n"                               # 9 not finite
        "6,-20,10,90\n"                                # 10 out of range
        "2.5,300,10,90\n"                              # 11 time going backwards
        "7,300,10\n"                                   # 12 too few cells
        "8,300,10,90,\n"                               # 13 ok: trailing empty cell
        "9,300,10,90,5\n"                              # 14 too many cells
        "10,3\u00a000,10,90\n"                         # 15 odd space inside a number
    )
    p = write(tmp_path, text)
    r = read_csv_ride(p, RIDE)
    assert r.rows == 12 and r.rows_used == 3 and r.rejected_rows == 9
    lines = [int(x.split(":")[1]) for x in r.rejects]
    assert lines == [4, 6, 8, 9, 10, 11, 12, 14, 15]
    assert f"{p}:4: column power_w: 'three hundred' is not a number" in r.rejects
    assert f"{p}:6: column speed_mps is empty" in r.rejects
    assert any(x.startswith(f"{p}:11: time_s = 2.5 s is before") for x in r.rejects)
    assert any(x.startswith(f"{p}:12: 3 cell(s), the header has 4") for x in r.rejects)
    assert [s.t_s for s in of_type(r, S.PowerSample)] == [0.0, 3.0, 8.0]
    assert len(of_type(r, S.CadenceSample)) == 2    # row 7 had no cadence


def test_a_rejected_row_does_not_hide_the_rows_after_it(tmp_path):
    text = "time_s,power_w,speed_mps\n0,1,1\n1,x,1\n2,1,1\n"
    r = read_csv_ride(write(tmp_path, text), RIDE)
    assert [s.t_s for s in of_type(r, S.SpeedSample)] == [0.0, 2.0]


def test_non_utf8_bytes_reject_only_their_row(tmp_path):
    data = b"time_s,power_w,speed_mps\n0,300,10\n1,3\xff0,10\n2,300,10\n"
    p = write(tmp_path, data)
    r = read_csv_ride(p, RIDE)
    assert r.rows_used == 2 and r.rejected_rows == 1 and f"{p}:3: column power_w" in r.rejects[0]


def test_reject_list_is_capped_but_all_are_counted(tmp_path):
    lines = ["time_s,power_w,speed_mps"] + [f"{i},bad,1" for i in range(80)] + ["100,300,10"]
    r = read_csv_ride(write(tmp_path, "\n".join(lines)), RIDE)
    assert r.rejected_rows == 80 and len(r.rejects) == 50
    assert r.reject_warnings()[-1].endswith("30 more row(s) rejected")


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=40), max_size=8))
def test_fuzzed_rows_never_crash(tmp_path, rows):
    text = "time_s,power_w,speed_mps,altitude_m\n" + "\n".join(rows) + "\n"
    p = tmp_path / "fuzz.csv"
    p.write_text(text, encoding="utf-8")
    try:
        r = read_csv_ride(p, RIDE)
    except CsvImportError:
        return
    assert r.rows_used + r.rejected_rows == r.rows
    assert all(math.isfinite(s.t_s) for s in r.samples)
