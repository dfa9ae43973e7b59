"""The run-up plan: power, speed, time and W′ balance over distance; CSV save/load.

A :class:`Plan` is a table on nodes from the start line (0 m) to the trap
exit, at most 25 m apart (closer near a standing start). ``power_w[k]`` is
the power to hold from node k to node k+1 (the last row repeats the last
segment's power); speed, time and W′ balance are the planned values *at*
the node, linear between nodes.

CSV format (our own): comment lines ``# key = value`` describing what the
plan was computed for, then the header
``distance_m,power_w,speed_mps,time_s,w_prime_balance_j`` and one row per
node. :func:`load_plan` reads it back and :func:`check_plan` tells whether
it fits a ride file (course, rider and vehicle must match; a different drag
prior, air density or wind gives a warning, because the live coach
re-plans with what it measures anyway).
"""

from __future__ import annotations

import bisect
import hashlib
import math
from dataclasses import dataclass, field, replace
from pathlib import Path

from livecoach.errors import PlanError

CSV_COLUMNS = ("distance_m", "power_w", "speed_mps", "time_s", "w_prime_balance_j")
#: Largest node spacing a plan may have, m.
MAX_SPACING_M = 25.0
_MAGIC = "# livecoach run-up plan v1"


def course_digest(ride) -> str:
    """A short fingerprint of the course geometry (run-up, trap, elevation points)."""
    c = ride.course
    text = f"{c.runup_m:.3f}|{c.trap_m:.3f}|{c.start_speed_mps:.3f}|" + ";".join(
        f"{d:.3f},{e:.3f}" for d, e in zip(c.distances_m, c.elevations_m)
    )
    return hashlib.sha256(text.encode()).hexdigest()[:16]


@dataclass(frozen=True, slots=True)
class PlanBasis:
    """What a plan was computed for (SI units)."""

    runup_m: float
    trap_m: float
    start_speed_mps: float
    course_digest: str
    mass_kg: float
    cda_m2: float
    crr: float
    air_density_kgpm3: float
    headwind_mps: float
    cp_w: float
    w_prime_j: float
    pmax_w: float

    @classmethod
    def from_ride(cls, ride, *, cda_m2=None, crr=None, air_density_kgpm3=None, headwind_mps=None):
        return cls(
            runup_m=ride.course.runup_m,
            trap_m=ride.course.trap_m,
            start_speed_mps=ride.course.start_speed_mps,
            course_digest=course_digest(ride),
            mass_kg=ride.vehicle.mass_kg,
            cda_m2=ride.vehicle.cda_m2 if cda_m2 is None else cda_m2,
            crr=ride.vehicle.crr if crr is None else crr,
            air_density_kgpm3=ride.air.density_kgpm3 if air_density_kgpm3 is None else air_density_kgpm3,
            headwind_mps=ride.air.headwind_mps if headwind_mps is None else headwind_mps,
            cp_w=ride.rider.cp_w,
            w_prime_j=ride.rider.w_prime_j,
            pmax_w=ride.rider.pmax_w,
        )


@dataclass(frozen=True, slots=True)
class PlanPoint:
    """The plan at one distance: power to hold (W), speed (m/s), W′ balance (J), clock (s)."""

    distance_m: float
    target_power_w: float
    planned_speed_mps: float
    planned_w_prime_balance_j: float
    planned_time_s: float
    final_effort: bool


@dataclass(frozen=True)
class Plan:
    """An optimised (or loaded) run-up plan. Arrays are per node (see module doc).

    trap_speed_mps: trap_m ÷ planned trap time; trap_time_s, runup_time_s
    (start to trap entry), w_prime_left_j (at trap exit); final_effort_m:
    where the closing effort above CP starts; basis: what it was computed for.
    """

    distance_m: tuple[float, ...]
    power_w: tuple[float, ...]
    speed_mps: tuple[float, ...]
    time_s: tuple[float, ...]
    w_prime_balance_j: tuple[float, ...]
    basis: PlanBasis
    final_effort_m: float
    note: str = ""
    warnings: tuple[str, ...] = field(default=())

    @property
    def trap_entry_m(self) -> float:
        return self.basis.runup_m

    @property
    def trap_exit_m(self) -> float:
        return self.basis.runup_m + self.basis.trap_m

    def time_at_m(self, distance_m: float) -> float:
        """Planned clock at a distance, s (linear between nodes)."""
        return _interp(self.distance_m, self.time_s, distance_m)

    @property
    def runup_time_s(self) -> float:
        return self.time_at_m(self.trap_entry_m) - self.time_s[0]

    @property
    def trap_time_s(self) -> float:
        return self.time_at_m(self.trap_exit_m) - self.time_at_m(self.trap_entry_m)

    @property
    def trap_speed_mps(self) -> float:
        return self.basis.trap_m / self.trap_time_s

    @property
    def w_prime_left_j(self) -> float:
        return _interp(self.distance_m, self.w_prime_balance_j, self.trap_exit_m)

    def at(self, distance_m: float) -> PlanPoint:
        """The plan at ``distance_m`` (clamped to the plan's range)."""
        d = self.distance_m
        x = min(max(distance_m, d[0]), d[-1])
        k = min(bisect.bisect_right(d, x) - 1, len(d) - 2)
        f = (x - d[k]) / (d[k + 1] - d[k])
        return PlanPoint(
            distance_m=x,
            target_power_w=self.power_w[k],
            planned_speed_mps=self.speed_mps[k] + f * (self.speed_mps[k + 1] - self.speed_mps[k]),
            planned_w_prime_balance_j=self.w_prime_balance_j[k]
            + f * (self.w_prime_balance_j[k + 1] - self.w_prime_balance_j[k]),
            planned_time_s=self.time_s[k] + f * (self.time_s[k + 1] - self.time_s[k]),
            final_effort=x >= self.final_effort_m,
        )

    def summary(self) -> dict:
        """The plan's headline numbers (JSON-able)."""
        return {
            "trap_speed_mps": self.trap_speed_mps,
            "trap_time_s": self.trap_time_s,
            "runup_time_s": self.runup_time_s,
            "w_prime_left_j": self.w_prime_left_j,
            "final_effort_m": self.final_effort_m,
            "peak_power_w": max(self.power_w),
            "note": self.note,
        }


def _interp(xs: tuple[float, ...], ys: tuple[float, ...], x: float) -> float:
    if x <= xs[0]:
        return ys[0]
    if x >= xs[-1]:
        return ys[-1]
    k = bisect.bisect_right(xs, x) - 1
    f = (x - xs[k]) / (xs[k + 1] - xs[k])
    return ys[k] + f * (ys[k + 1] - ys[k])


def final_effort_start_m(distance_m, power_w, cp_w: float, trap_exit_m: float) -> float:
    """Where the closing effort starts, m: the start of the last unbroken stretch
    of power above CP (+0.5 W) that runs to the trap exit; the trap exit if none."""
    k = len(power_w) - 2
    start = trap_exit_m
    while k >= 0 and power_w[k] > cp_w + 0.5:
        start = distance_m[k]
        k -= 1
    return start


# ----------------------------------------------------------------- CSV I/O
_BASIS_FIELDS = (
    ("runup_m", float), ("trap_m", float), ("start_speed_mps", float), ("course_digest", str),
    ("mass_kg", float), ("cda_m2", float), ("crr", float), ("air_density_kgpm3", float),
    ("headwind_mps", float), ("cp_w", float), ("w_prime_j", float), ("pmax_w", float),
)


def save_plan(plan: Plan, path: str | Path) -> Path:
    """Write the plan as CSV (see module doc). Written to a temporary file and
    renamed, so an interrupted save never leaves half a plan."""
    p = Path(path)
    lines = [_MAGIC]
    for name, _ in _BASIS_FIELDS:
        value = getattr(plan.basis, name)
        lines.append(f"# {name} = {value!r}" if isinstance(value, float) else f"# {name} = {value}")
    lines.append(f"# final_effort_m = {plan.final_effort_m!r}")
    lines.append(f"# trap_speed_mps = {plan.trap_speed_mps!r}")
    if plan.note:
        lines.append(f"# note = {plan.note}")
    lines.append(",".join(CSV_COLUMNS))
    for row in zip(plan.distance_m, plan.power_w, plan.speed_mps, plan.time_s, plan.w_prime_balance_j):
        lines.append(",".join(repr(float(v)) for v in row))
    tmp = p.with_name(p.name + ".part")
    try:
        tmp.write_text("\n".join(lines) + "\n", encoding="utf-8")
        tmp.replace(p)
    except OSError as exc:
        raise PlanError(f"cannot write plan to '{p}': {exc}") from None
    return p


def load_plan(path: str | Path, ride=None) -> Plan:
    """Read a plan CSV. With ``ride`` (a RideConfig) it is checked against the
    ride file: a course, rider or vehicle mismatch raises :class:`PlanError`;
    drag, air or wind differences are kept as ``plan.warnings``."""
    p = Path(path)
    if not p.is_file():
        raise PlanError(f"plan file '{p}' not found")
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise PlanError(f"plan file '{p}' cannot be read: {exc}") from None
    meta: dict[str, str] = {}
    rows: list[tuple[float, ...]] = []
    header_seen = False
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line:
            continue
        if line.startswith("#"):
            if "=" in line:
                key, _, value = line[1:].partition("=")
                meta[key.strip()] = value.strip()
            continue
        cells = [c.strip() for c in line.split(",")]
        if not header_seen:
            if tuple(cells) != CSV_COLUMNS:
                raise PlanError(
                    f"{p}:{lineno}: header is {','.join(cells)!r}; expected {','.join(CSV_COLUMNS)!r}"
                )
            header_seen = True
            continue
        if len(cells) != len(CSV_COLUMNS):
            raise PlanError(f"{p}:{lineno}: expected {len(CSV_COLUMNS)} values, got {len(cells)}")
        try:
            values = tuple(float(c) for c in cells)
        except ValueError:
            raise PlanError(f"{p}:{lineno}: a value is not a number: {line!r}") from None
        for name, v in zip(CSV_COLUMNS, values):
            if not math.isfinite(v):
                raise PlanError(f"{p}:{lineno}: {name} = {v!r} is not finite")
        if rows and values[0] <= rows[-1][0]:
            raise PlanError(f"{p}:{lineno}: distance_m {values[0]} does not increase")
        if rows and values[0] - rows[-1][0] > MAX_SPACING_M + 1e-6:
            raise PlanError(
                f"{p}:{lineno}: rows {values[0] - rows[-1][0]:.1f} m apart; a plan needs ≤ {MAX_SPACING_M:g} m"
            )
        if values[2] < 0.0 or values[1] < 0.0:
            raise PlanError(f"{p}:{lineno}: negative power or speed")
        if rows and values[3] <= rows[-1][3]:
            raise PlanError(f"{p}:{lineno}: time_s {values[3]} does not increase")
        rows.append(values)
    if not header_seen:
        raise PlanError(f"{p}: no header line {','.join(CSV_COLUMNS)!r}")
    if len(rows) < 2:
        raise PlanError(f"{p}: fewer than two plan rows")
    basis_values = {}
    for name, kind in _BASIS_FIELDS:
        if name in meta:
            try:
                basis_values[name] = kind(meta[name])
            except ValueError:
                raise PlanError(f"{p}: header '{name} = {meta[name]}' is not valid") from None
        elif ride is not None:
            basis_values[name] = getattr(PlanBasis.from_ride(ride), name)
        else:
            raise PlanError(f"{p}: header line '# {name} = ...' is missing (give the ride file to fill it)")
    basis = PlanBasis(**basis_values)
    cols = list(zip(*rows))
    exit_m = basis.runup_m + basis.trap_m
    if cols[0][0] > 1e-6 or cols[0][-1] < exit_m - 1e-6:
        raise PlanError(
            f"{p}: rows cover {cols[0][0]:g}..{cols[0][-1]:g} m but must cover 0..{exit_m:g} m (trap exit)"
        )
    fe = final_effort_start_m(cols[0], cols[1], basis.cp_w, exit_m)
    if "final_effort_m" in meta:
        try:
            fe = float(meta["final_effort_m"])
        except ValueError:
            raise PlanError(f"{p}: header 'final_effort_m = {meta['final_effort_m']}' is not a number") from None
    plan = Plan(
        distance_m=cols[0], power_w=cols[1], speed_mps=cols[2], time_s=cols[3],
        w_prime_balance_j=cols[4], basis=basis, final_effort_m=fe, note=meta.get("note", ""),
    )
    if ride is not None:
        errors, warnings = check_plan(plan, ride)
        if errors:
            raise PlanError(f"{p} does not fit ride file {ride.source}: " + "; ".join(errors))
        plan = replace(plan, warnings=tuple(warnings))
    return plan


def check_plan(plan: Plan, ride) -> tuple[list[str], list[str]]:
    """Compare a plan's basis with a ride file: (errors, warnings).

    Errors: a different course (run-up, trap, start speed, elevation), rider
    (CP, W′, Pmax) or vehicle mass — the plan is for another run. Warnings:
    drag prior, air density (> 1 %) or wind (> 0.5 m/s) differ — usable, but
    re-plan when you can.
    """
    b = plan.basis
    now = PlanBasis.from_ride(ride)
    errors: list[str] = []
    warnings: list[str] = []

    def differs(a: float, c: float, rel: float) -> bool:
        return abs(a - c) > rel * max(abs(a), abs(c), 1e-12)

    for name, unit in (("runup_m", "m"), ("trap_m", "m"), ("start_speed_mps", "m/s")):
        if differs(getattr(b, name), getattr(now, name), 1e-6):
            errors.append(f"{name} is {getattr(b, name):g} {unit} in the plan but {getattr(now, name):g} {unit} in the ride file")
    if b.course_digest != now.course_digest and not errors:
        errors.append("the elevation profile differs from the ride file's")
    for name, unit in (("cp_w", "W"), ("w_prime_j", "J"), ("pmax_w", "W"), ("mass_kg", "kg")):
        if differs(getattr(b, name), getattr(now, name), 1e-6):
            errors.append(f"{name} is {getattr(b, name):g} {unit} in the plan but {getattr(now, name):g} {unit} in the ride file")
    if differs(b.cda_m2, now.cda_m2, 1e-6) or differs(b.crr, now.crr, 1e-6):
        warnings.append(
            f"plan made for CdA {b.cda_m2:.4f} m^2, Crr {b.crr:.5f}; the ride file's priors are "
            f"CdA {now.cda_m2:.4f} m^2, Crr {now.crr:.5f}"
        )
    if differs(b.air_density_kgpm3, now.air_density_kgpm3, 0.01):
        warnings.append(
            f"plan made for air density {b.air_density_kgpm3:.4f} kg/m^3; the ride file gives "
            f"{now.air_density_kgpm3:.4f} kg/m^3: re-plan"
        )
    if abs(b.headwind_mps - now.headwind_mps) > 0.5:
        warnings.append(
            f"plan made for head wind {b.headwind_mps:+.1f} m/s; the ride file gives {now.headwind_mps:+.1f} m/s: re-plan"
        )
    return errors, warnings
