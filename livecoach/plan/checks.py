"""Course and run checks that teams otherwise do by hand.

* Course fall: the mean fall from any point of the course to the trap exit
  must not be steeper than 1 in ``steepest_fall_1_in`` (common practice for
  human-powered speed records: about 1 in 150, measured back from the end of
  the trap), and the total drop from the start line to the trap exit may be
  limited too (``max_total_drop_m``; 0 = not checked).
* Wind: a run whose configured or measured wind exceeded ``max_wind_mps``
  (common practice: about 1.7 m/s, i.e. roughly 6 km/h) is flagged.

These are *warnings* from livecoach's settings. The governing body's current
rules for the event decide what counts: check them and set the limits in the
ride file's ``[course_rules]`` section to match.

The mean fall from x to the exit, (e(x) - e(exit)) / (exit - x), is a
linear-fractional function of x between two elevation points, so its largest
value is at an elevation point: checking every point (and the start) is
exact.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable

from livecoach.config.schema import setting

RULES_NOTE = "limits are livecoach settings; the governing body's current rules decide"


@dataclass(frozen=True, kw_only=True)
class CourseRulesConfig:
    """[course_rules]: limits for the course and run checks (warnings only)."""

    steepest_fall_1_in: float = setting(
        150.0, doc="steepest mean fall allowed from any point to the trap exit, as '1 in N' "
        "(common practice about 1 in 150; the governing body's rules decide)", lo=1.0, hi=1e6,
    )
    max_total_drop_m: float = setting(
        0.0, doc="largest drop from the start line to the trap exit (0: not checked)", unit="m",
        lo=0.0, hi=5000.0,
    )
    max_wind_mps: float = setting(
        1.7, doc="largest wind for a valid run (common practice about 1.7 m/s; the rules decide)",
        unit="m/s", lo=0.0, hi=30.0,
    )


def rules_config(ride) -> CourseRulesConfig:
    """The ride's ``[course_rules]`` section, or the defaults."""
    from livecoach.errors import LivecoachError

    try:
        cfg = ride.section("course_rules")
    except LivecoachError:
        return CourseRulesConfig()
    return cfg if isinstance(cfg, CourseRulesConfig) else CourseRulesConfig()


@dataclass(frozen=True, slots=True)
class Finding:
    """One check result: ``ok`` True when within the limit; ``text`` says what was found."""

    check: str
    ok: bool
    text: str
    value: float
    limit: float | None


def course_fall_checks(ride, rules: CourseRulesConfig | None = None) -> list[Finding]:
    """The steepest mean fall to the trap exit, and the total drop (see module doc)."""
    rules = rules or rules_config(ride)
    course = ride.course
    exit_m = course.trap_exit_m
    e_exit = course.elevation_m(exit_m)
    points = [0.0] + [d for d in course.distances_m if 0.0 < d < exit_m]
    worst_ratio = -math.inf
    worst_at = 0.0
    for x in points:
        ratio = (course.elevation_m(x) - e_exit) / (exit_m - x)
        if ratio > worst_ratio:
            worst_ratio, worst_at = ratio, x
    limit = 1.0 / rules.steepest_fall_1_in
    findings = []
    if worst_ratio <= 0.0:
        text = "the course does not fall towards the trap exit from any point"
    else:
        text = (
            f"steepest mean fall to the trap exit is 1 in {1.0 / worst_ratio:.0f} "
            f"({worst_ratio * 100:.3f} %), from {worst_at:.0f} m"
        )
    ok = worst_ratio <= limit + 1e-12
    if not ok:
        text += f": steeper than the limit of 1 in {rules.steepest_fall_1_in:g}"
    findings.append(Finding("course_fall", ok, text, worst_ratio, limit))
    drop = course.elevation_m(0.0) - e_exit
    if rules.max_total_drop_m > 0.0:
        ok = drop <= rules.max_total_drop_m
        text = f"total drop start to trap exit {drop:.1f} m" + (
            "" if ok else f": more than the limit of {rules.max_total_drop_m:g} m"
        )
        findings.append(Finding("total_drop", ok, text, drop, rules.max_total_drop_m))
    else:
        findings.append(Finding("total_drop", True,
                                f"total drop start to trap exit {drop:.1f} m (no limit set)", drop, None))
    return findings


def wind_check(
    ride, measured_wind_mps: Iterable[float] = (), rules: CourseRulesConfig | None = None
) -> Finding:
    """Flag a run whose configured head wind or any measured wind (m/s, any
    sign: head or tail) exceeded ``max_wind_mps``. Non-finite values are skipped."""
    rules = rules or rules_config(ride)
    configured = abs(ride.air.headwind_mps)
    measured = [abs(w) for w in measured_wind_mps if math.isfinite(w)]
    worst = max([configured] + measured)
    source = "measured" if measured and max(measured) >= configured else "configured"
    ok = worst <= rules.max_wind_mps
    text = f"largest {source} wind {worst:.2f} m/s" + (
        "" if ok else f": above the record limit of {rules.max_wind_mps:g} m/s"
    )
    return Finding("wind", ok, text, worst, rules.max_wind_mps)


def run_checks(ride, measured_wind_mps: Iterable[float] = ()) -> list[Finding]:
    """All course and run checks for a ride file (and measured winds, if any)."""
    rules = rules_config(ride)
    return course_fall_checks(ride, rules) + [wind_check(ride, measured_wind_mps, rules)]
