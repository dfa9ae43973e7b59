"""Course and run checks against the usual speed-record limits (common practice)."""

from __future__ import annotations

import pytest

from livecoach.errors import ConfigError
from livecoach.plan.checks import course_fall_checks, rules_config, run_checks, wind_check
from tests.plan_helpers import example_ride


def test_example_course_passes():
    # The example course falls 24 m over 6.7 km, 1 in 247 at worst (from 3000 m).
    findings = {f.check: f for f in run_checks(example_ride())}
    assert findings["course_fall"].ok
    assert findings["course_fall"].value == pytest.approx(15.0 / 3700.0)
    assert "1 in 247" in findings["course_fall"].text
    assert findings["wind"].ok


def test_steep_final_section_is_flagged():
    # Common practice: no steeper than about 1 in 150 measured back from the trap end.
    # The last 1000 m fall 10 m (1 in 100): flagged, though the whole course is gentler.
    ride = example_ride(course={"elevation": [[0, 1400.0], [5700, 1395.0], [6700, 1385.0]]})
    f = course_fall_checks(ride)[0]
    assert not f.ok
    assert f.value == pytest.approx(10.0 / 1000.0)
    assert "1 in 100" in f.text and "1 in 150" in f.text


def test_limit_is_a_setting_and_total_drop():
    ride = example_ride(course={"elevation": [[0, 1400.0], [5700, 1395.0], [6700, 1385.0]]},
                        course_rules={"steepest_fall_1_in": 90.0, "max_total_drop_m": 10.0})
    fall, drop = course_fall_checks(ride)
    assert fall.ok
    assert not drop.ok and "15.0 m" in drop.text
    with pytest.raises(ConfigError, match="steepest_fall_1_in"):
        example_ride(course_rules={"steepest_fall_1_in": 0.5})


def test_wind_flagged_above_limit():
    # Common practice: about 1.7 m/s is the usual record limit on wind.
    assert not wind_check(example_ride(air={"headwind_mps": -2.0})).ok
    ride = example_ride()
    assert wind_check(ride, [0.3, -1.2, 0.9]).ok
    f = wind_check(ride, [0.3, -1.9, float("nan")])
    assert not f.ok and "measured" in f.text and f.value == pytest.approx(1.9)
    assert rules_config(ride).max_wind_mps == 1.7
    strict = example_ride(course_rules={"max_wind_mps": 1.0})
    assert not wind_check(strict, [1.2]).ok


def test_rising_course_is_fine():
    ride = example_ride(course={"elevation": [[0, 1380.0], [6700, 1390.0]]})
    f = course_fall_checks(ride)[0]
    assert f.ok and "does not fall" in f.text
