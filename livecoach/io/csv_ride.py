"""Plain CSV rides: import rides logged by other devices, in SI units.

Form of the file (comma-separated, UTF-8, one header line; blank lines and
lines starting with ``#`` are skipped; column names are matched without
regard to case or surrounding spaces):

========================  ========  =========================================
column                    unit      notes
========================  ========  =========================================
``time_s``                s         required; must not go backwards
``power_w``               W         required; crank power, 0..5000
``speed_mps``             m/s       required; ground speed, 0..100
``distance_m``            m         along the course; integrated from speed
                                    (trapezoid rule) when the column is absent
``altitude_m``            m         -500..9000
``grade``                 -         rise over run, -1..1
``cadence_rpm``           1/min     0..400
``heart_rate_bpm``        1/min     0..300
``airspeed_mps``          m/s       -20..150
``temperature_c``         deg C     -60..70
``pressure_pa``           Pa        10000..120000
``relative_humidity_pct`` %         0..100
========================  ========  =========================================

Grade, when the ``grade`` column is absent, comes from ``altitude_m`` (the
estimator differences the altitudes; :attr:`CsvRide.grades` gives the grade
over +-10 m of distance for reports) or else from the course elevation table
of the ride file. Unknown columns are ignored with a note; a missing required
column or a duplicated column is a :class:`livecoach.errors.CsvImportError`.
A row with text in a number column, a value out of range, an empty required
cell, the wrong number of cells, or a time going backwards is rejected with
``file:line`` and the reason, and counted; the other rows are used.

Each accepted row becomes decoded samples (:mod:`livecoach.stream.samples`)
in this order: AltitudeSample (when altitude or grade is given), AirSample
(when any air column is given), SpeedSample (with distance), PowerSample,
CadenceSample, HeartRateSample — ready for ``Pipeline.feed_sample``.
"""

from __future__ import annotations

import bisect
import csv
import difflib
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from livecoach.errors import CsvImportError
from livecoach.stream import samples as S

REQUIRED_COLUMNS = ("time_s", "power_w", "speed_mps")
OPTIONAL_COLUMNS = (
    "distance_m", "altitude_m", "grade", "cadence_rpm", "heart_rate_bpm", "airspeed_mps",
    "temperature_c", "pressure_pa", "relative_humidity_pct",
)
INPUT_COLUMNS = REQUIRED_COLUMNS + OPTIONAL_COLUMNS

#: Columns ``livecoach export --csv`` adds from the pipeline's state: outputs,
#: not inputs; the importer ignores them (with one note).
OUTPUT_COLUMNS = (
    "phase", "cue", "target_power_w", "planned_speed_mps", "predicted_trap_speed_mps",
    "w_prime_balance_j", "cda_m2", "cda_sd_m2", "crr", "crr_sd",
)

#: Plausible range of each input column (inclusive).
RANGES: dict[str, tuple[float, float]] = {
    "time_s": (-math.inf, math.inf),
    "power_w": (0.0, 5000.0),
    "speed_mps": (0.0, 100.0),
    "distance_m": (-1.0e6, 1.0e6),
    "altitude_m": (-500.0, 9000.0),
    "grade": (-1.0, 1.0),
    "cadence_rpm": (0.0, 400.0),
    "heart_rate_bpm": (0.0, 300.0),
    "airspeed_mps": (-20.0, 150.0),
    "temperature_c": (-60.0, 70.0),
    "pressure_pa": (10000.0, 120000.0),
    "relative_humidity_pct": (0.0, 100.0),
}

#: Half-width of the distance span over which grade is taken from altitude, m.
GRADE_HALF_SPAN_M = 10.0
#: Largest number of rejected-row reasons kept one by one.
MAX_LISTED_REJECTS = 50


@dataclass
class CsvRide:
    """An imported CSV ride.

    samples: decoded samples in feed order. rows: data rows read; rows_used:
    rows accepted. rejects: "file:line: reason" for the first
    :data:`MAX_LISTED_REJECTS` rejected rows; rejected_rows counts them all.
    notes: remarks (ignored columns, where grade and distance came from).
    times_s, distances_m, grades: per accepted row; grade_source: "column",
    "altitude" or "course"; distance_source: "column" or "integrated".
    """

    path: str
    samples: list[Any] = field(default_factory=list)
    rows: int = 0
    rows_used: int = 0
    rejected_rows: int = 0
    rejects: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    columns: tuple[str, ...] = ()
    times_s: list[float] = field(default_factory=list)
    distances_m: list[float] = field(default_factory=list)
    grades: list[float] = field(default_factory=list)
    grade_source: str = ""
    distance_source: str = ""

    def reject_warnings(self) -> list[str]:
        """The rejected rows as warning lines (one per row, then a count of the rest)."""
        out = list(self.rejects)
        if self.rejected_rows > len(self.rejects):
            out.append(f"{self.path}: {self.rejected_rows - len(self.rejects)} more row(s) rejected")
        return out


class _RowError(Exception):
    pass


def _hint(name: str) -> str:
    close = difflib.get_close_matches(name, INPUT_COLUMNS, n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


def read_csv_ride(path: str | Path, ride: Any) -> CsvRide:
    """Read a CSV ride. ``ride``: the RideConfig (its course gives grade when the
    file has neither grade nor altitude). Raises CsvImportError for a file that
    cannot be used at all; bad rows are rejected and counted."""
    p = Path(path)
    where = str(p)
    if not p.is_file():
        raise CsvImportError(f"CSV ride '{where}' not found")
    try:
        fh = open(p, "r", encoding="utf-8-sig", errors="surrogateescape", newline="")
    except OSError as exc:
        raise CsvImportError(f"{where}: cannot be read: {exc}") from None
    out = CsvRide(path=where)
    with fh:
        reader = csv.reader(fh)
        header: list[str] | None = None
        index: dict[str, int] = {}
        parsed: list[tuple[int, dict[str, float]]] = []
        last_t: float | None = None
        last_d: float | None = None
        try:
            for row in reader:
                line = reader.line_num
                if not row or (len(row) == 1 and not row[0].strip()) or row[0].lstrip().startswith("#"):
                    continue
                if header is None:
                    header = [c.strip().lower() for c in row]
                    index = _check_header(header, where, out)
                    continue
                out.rows += 1
                try:
                    values = _parse_row(row, header, index, where, line)
                    t = values["time_s"]
                    if last_t is not None and t < last_t:
                        raise _RowError(f"time_s = {t:g} s is before the previous row's {last_t:g} s")
                    d = values.get("distance_m")
                    if d is not None and last_d is not None and d < last_d - 0.5:
                        raise _RowError(f"distance_m = {d:g} m goes back from the previous row's {last_d:g} m")
                except _RowError as exc:
                    out.rejected_rows += 1
                    if len(out.rejects) < MAX_LISTED_REJECTS:
                        out.rejects.append(f"{where}:{line}: {exc}")
                    continue
                last_t = t
                if d is not None:
                    last_d = d
                parsed.append((line, values))
        except csv.Error as exc:
            raise CsvImportError(f"{where}:{reader.line_num}: not readable as CSV: {exc}") from None
        except UnicodeDecodeError as exc:  # pragma: no cover - surrogateescape prevents it
            raise CsvImportError(f"{where}: not UTF-8 text: {exc}") from None
    if header is None:
        raise CsvImportError(f"{where}: the file is empty (no header line)")
    if not parsed:
        first = f"; first: {out.rejects[0]}" if out.rejects else ""
        raise CsvImportError(
            f"{where}: no usable data rows ({out.rows} row(s) read, {out.rejected_rows} rejected{first})"
        )
    out.rows_used = len(parsed)
    _build_samples(out, parsed, index, ride)
    return out


def _check_header(header: list[str], where: str, out: CsvRide) -> dict[str, int]:
    seen: dict[str, int] = {}
    for i, name in enumerate(header):
        if not name:
            continue
        if name in seen:
            raise CsvImportError(f"{where}: column '{name}' appears twice (columns {seen[name] + 1} and {i + 1})")
        seen[name] = i
    for name in REQUIRED_COLUMNS:
        if name not in seen:
            extra = ""
            if len(header) == 1 and (";" in header[0] or "\t" in header[0]):
                extra = "; the header is one column: separate columns with commas"
            else:
                close = difflib.get_close_matches(name, list(seen), n=1, cutoff=0.6)
                if close:
                    extra = f"; found '{close[0]}' (columns must be named in SI units, e.g. '{name}')"
            raise CsvImportError(
                f"{where}:1: required column '{name}' is missing (columns found: "
                f"{', '.join(h for h in header if h) or 'none'}{extra})"
            )
    out.columns = tuple(h for h in header if h in INPUT_COLUMNS)
    unknown = [h for h in header if h and h not in INPUT_COLUMNS and h not in OUTPUT_COLUMNS]
    ours = [h for h in header if h in OUTPUT_COLUMNS]
    if unknown:
        out.notes.append(f"{where}: ignored unknown column(s): "
                         + ", ".join(f"'{u}'{_hint(u)}" for u in unknown))
    if ours:
        out.notes.append(f"{where}: ignored livecoach output column(s) (not inputs): {', '.join(ours)}")
    return {name: i for name, i in seen.items() if name in INPUT_COLUMNS}


def _parse_row(row: list[str], header: list[str], index: dict[str, int], where: str,
               line: int) -> dict[str, float]:
    if len(row) != len(header):
        extra_empty = len(row) > len(header) and not any(c.strip() for c in row[len(header):])
        if not extra_empty:
            raise _RowError(f"{len(row)} cell(s), the header has {len(header)} column(s)")
    values: dict[str, float] = {}
    for name, i in index.items():
        cell = row[i].strip() if i < len(row) else ""
        if not cell:
            if name in REQUIRED_COLUMNS:
                raise _RowError(f"column {name} is empty")
            continue
        try:
            x = float(cell)
        except ValueError:
            shown = cell if len(cell) <= 40 else cell[:40] + "..."
            raise _RowError(f"column {name}: {shown!r} is not a number") from None
        if not math.isfinite(x):
            raise _RowError(f"column {name}: {cell!r} is not a finite number")
        lo, hi = RANGES[name]
        if not lo <= x <= hi:
            raise _RowError(f"column {name} = {x:g} is outside {lo:g}..{hi:g}")
        values[name] = x
    return values


def _build_samples(out: CsvRide, parsed: list[tuple[int, dict[str, float]]], index: dict[str, int],
                   ride: Any) -> None:
    has_distance = "distance_m" in index
    out.distance_source = "column" if has_distance else "integrated"
    # Distance: given, or integrated from speed by the trapezoid rule (a given
    # distance with an empty cell continues by integration from the last value).
    ts: list[float] = []
    ds: list[float] = []
    prev_speed = 0.0
    for _, v in parsed:
        t, speed = v["time_s"], v["speed_mps"]
        d = v.get("distance_m")
        if d is None:
            d = 0.0 if not ts else ds[-1] + 0.5 * (prev_speed + speed) * (t - ts[-1])
        ts.append(t)
        ds.append(d)
        prev_speed = speed
    if not has_distance:
        out.notes.append(f"{out.path}: no distance_m column: distance integrated from speed_mps")

    # Grade per row: column, else from altitude over +-GRADE_HALF_SPAN_M, else the course.
    alt_rows = [(ds[i], v["altitude_m"]) for i, (_, v) in enumerate(parsed) if "altitude_m" in v]
    if "grade" in index:
        out.grade_source = "column"
    elif len(alt_rows) >= 2:
        out.grade_source = "altitude"
    else:
        out.grade_source = "course"
        out.notes.append(f"{out.path}: no grade or altitude_m column: grade from the course elevation table")
    alt_d = [a[0] for a in alt_rows]
    alt_h = [a[1] for a in alt_rows]
    course = ride.course
    grades: list[float] = []
    for i, (_, v) in enumerate(parsed):
        g = v.get("grade")
        if g is None and out.grade_source in ("altitude", "column") and len(alt_rows) >= 2:
            g = _grade_from_altitude(alt_d, alt_h, ds[i])
        if g is None:
            g = course.grade(ds[i])
        grades.append(g)
    out.times_s, out.distances_m, out.grades = ts, ds, grades

    samples = out.samples
    for i, (_, v) in enumerate(parsed):
        t = ts[i]
        alt = v.get("altitude_m")
        if alt is not None:
            samples.append(S.AltitudeSample(t, altitude_m=alt, grade=grades[i]))
        elif "grade" in v:
            samples.append(S.AltitudeSample(t, grade=v["grade"]))
        air = {k: v.get(k) for k in ("airspeed_mps", "pressure_pa", "temperature_c", "relative_humidity_pct")}
        if any(x is not None for x in air.values()):
            samples.append(S.AirSample(t, **air))
        samples.append(S.SpeedSample(t, v["speed_mps"], ds[i], source="csv"))
        samples.append(S.PowerSample(t, v["power_w"]))
        if "cadence_rpm" in v:
            samples.append(S.CadenceSample(t, v["cadence_rpm"]))
        if "heart_rate_bpm" in v:
            samples.append(S.HeartRateSample(t, v["heart_rate_bpm"]))


def _grade_from_altitude(alt_d: list[float], alt_h: list[float], d: float) -> float | None:
    """Grade at distance ``d`` from altitude points: the secant over +-10 m of
    distance (clipped to the data), None when the span is under 1 m."""
    lo_d, hi_d = d - GRADE_HALF_SPAN_M, d + GRADE_HALF_SPAN_M
    i = max(0, bisect.bisect_right(alt_d, lo_d) - 1)        # last point at or before d - 10 m
    j = min(len(alt_d) - 1, bisect.bisect_left(alt_d, hi_d))  # first point at or after d + 10 m
    span = alt_d[j] - alt_d[i]
    if span < 1.0:
        return None
    return (alt_h[j] - alt_h[i]) / span
