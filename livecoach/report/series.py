"""Turn a replay trace (LiveState snapshots and notices) into the report's numbers.

Pure functions on plain data: arrays for the plots, the trap result, sensor
stale intervals and power-balance residuals. No plotting here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from livecoach.pipeline.state import NOTICE_ALARM, LiveState, Notice
from livecoach.pipeline.trap import TrapTimer

#: Length of a residual window, s: long enough to average out speed noise,
#: short enough to show a drag change (common practice for on-road testing: a few seconds).
RESIDUAL_WINDOW_S = 5.0


#: numpy >= 2 names it trapezoid; 1.26 has only trapz.
_trapezoid = getattr(np, "trapezoid", None) or getattr(np, "trapz")


def _f(x: Any) -> float:
    return float("nan") if x is None else float(x)


@dataclass(frozen=True)
class Series:
    """Columns of the trace, one row per state (SI units; NaN = unknown).

    ``t_s`` is ride time: seconds since the first state.
    """

    t0_s: float
    t_s: np.ndarray
    distance_m: np.ndarray
    speed_mps: np.ndarray
    speed_stale: np.ndarray
    power_w: np.ndarray
    power_stale: np.ndarray
    target_power_w: np.ndarray
    planned_speed_mps: np.ndarray
    predicted_trap_speed_mps: np.ndarray
    w_prime_balance_j: np.ndarray
    cda_m2: np.ndarray
    cda_sd_m2: np.ndarray
    crr: np.ndarray
    crr_sd: np.ndarray
    phase: tuple[str, ...]

    def __len__(self) -> int:
        return int(self.t_s.size)


def series_from_states(states: Sequence[LiveState]) -> Series:
    """The trace as arrays, in time order (states with equal times keep the last)."""
    if not states:
        from livecoach.errors import ReportError

        raise ReportError("the trace has no states: nothing was replayed (empty recording or CSV?)")
    ordered: list[LiveState] = []
    for st in states:
        if ordered and st.t_s <= ordered[-1].t_s:
            if st.t_s == ordered[-1].t_s:
                ordered[-1] = st
            continue  # out-of-order snapshot: the pipeline's clock is monotonic, skip it
        ordered.append(st)
    t0 = ordered[0].t_s

    def col(name: str) -> np.ndarray:
        return np.array([_f(getattr(s, name)) for s in ordered], dtype=float)

    return Series(
        t0_s=t0,
        t_s=np.array([s.t_s - t0 for s in ordered], dtype=float),
        distance_m=col("distance_m"),
        speed_mps=col("speed_mps"),
        speed_stale=np.array([bool(s.speed_stale) for s in ordered]),
        power_w=col("power_w"),
        power_stale=np.array([bool(s.power_stale) for s in ordered]),
        target_power_w=col("target_power_w"),
        planned_speed_mps=col("planned_speed_mps"),
        predicted_trap_speed_mps=col("predicted_trap_speed_mps"),
        w_prime_balance_j=col("w_prime_balance_j"),
        cda_m2=col("cda_m2"),
        cda_sd_m2=col("cda_sd_m2"),
        crr=col("crr"),
        crr_sd=col("crr_sd"),
        phase=tuple(s.phase for s in ordered),
    )


# ----------------------------------------------------------------- trap result
@dataclass(frozen=True)
class TrapResult:
    """The timed trap: crossing times (ride time, s), time, mean speed (m/s).

    ``source``: "pipeline" when the pipeline timed it (its states carry the
    crossing times), "trace" when recomputed here from the state trace's
    distance track (coarser: the trace is decimated), None when the trap was
    not completed.
    """

    entry_s: float | None
    exit_s: float | None
    time_s: float | None
    mean_speed_mps: float | None
    trap_m: float
    peak_speed_mps: float | None
    predicted_at_entry_mps: float | None
    planned_mps: float | None
    source: str | None


def trap_result(states: Sequence[LiveState], series: Series, entry_m: float, exit_m: float,
                planned_mps: float | None = None) -> TrapResult:
    """Trap entry/exit times and mean speed (trap length ÷ time between the lines)."""
    last = next((s for s in reversed(states) if s.trap_exit_t_s is not None), None)
    first_entry = next((s for s in states if s.trap_entry_t_s is not None), None)
    trap_m = exit_m - entry_m
    entry = exit_ = None
    source = None
    if last is not None and last.trap_entry_t_s is not None:
        entry, exit_, source = last.trap_entry_t_s - series.t0_s, last.trap_exit_t_s - series.t0_s, "pipeline"
    else:
        timer = TrapTimer(entry_m, exit_m)
        for t, d in zip(series.t_s, series.distance_m):
            if math.isfinite(d):
                timer.feed(float(t), float(d))
        if timer.entry_t_s is not None:
            entry = timer.entry_t_s
            exit_ = timer.exit_t_s
            source = "trace" if exit_ is not None else None
        elif first_entry is not None:
            entry = first_entry.trap_entry_t_s - series.t0_s
    time_s = (exit_ - entry) if (entry is not None and exit_ is not None) else None
    mean = trap_m / time_s if time_s and time_s > 0 else None
    peak = None
    if entry is not None:
        hi = exit_ if exit_ is not None else float(series.t_s[-1])
        mask = (series.t_s >= entry) & (series.t_s <= hi) & ~series.speed_stale & np.isfinite(series.speed_mps)
        if mask.any():
            peak = float(np.max(series.speed_mps[mask]))
    predicted = None
    if entry is not None:
        before = (series.t_s <= entry) & np.isfinite(series.predicted_trap_speed_mps)
        if before.any():
            predicted = float(series.predicted_trap_speed_mps[before][-1])
    return TrapResult(entry, exit_, time_s, mean, trap_m, peak, predicted, planned_mps,
                      source if time_s is not None else None)


# --------------------------------------------------------------- sensor health
@dataclass(frozen=True)
class ChannelTimeline:
    """One channel's health over the ride: stale and link-down intervals (ride time, s)."""

    channel: str
    stale: list[tuple[float, float]] = field(default_factory=list)
    down: list[tuple[float, float]] = field(default_factory=list)
    accepted: int = 0
    rejected: int = 0
    gaps: int = 0
    longest_gap_s: float = 0.0


def _intervals(times: np.ndarray, flags: list[bool]) -> list[tuple[float, float]]:
    out: list[tuple[float, float]] = []
    start = None
    for t, f in zip(times, flags):
        if f and start is None:
            start = float(t)
        elif not f and start is not None:
            out.append((start, float(t)))
            start = None
    if start is not None:
        out.append((start, float(times[-1])))
    return out


def sensor_timelines(states: Sequence[LiveState], series: Series) -> list[ChannelTimeline]:
    """Per channel seen, when it was stale or down, and its final counters."""
    channels: dict[str, None] = {}
    for s in states:
        for h in s.sensors:
            channels.setdefault(h.channel)
    times = series.t_s
    by_time: dict[float, LiveState] = {}
    for s in states:
        by_time[s.t_s - series.t0_s] = s
    out = []
    for ch in channels:
        stale_flags: list[bool] = []
        down_flags: list[bool] = []
        last = None
        for t in times:
            st = by_time.get(float(t))
            h = next((x for x in st.sensors if x.channel == ch), None) if st is not None else None
            stale_flags.append(bool(h.stale and h.link_up) if h is not None else False)
            down_flags.append(bool(not h.link_up) if h is not None else False)
            if h is not None:
                last = h
        out.append(ChannelTimeline(
            ch, _intervals(times, stale_flags), _intervals(times, down_flags),
            last.accepted if last else 0, last.rejected if last else 0,
            last.gaps if last else 0, last.longest_gap_s if last else 0.0,
        ))
    return out


# ------------------------------------------------------------------- residuals
@dataclass(frozen=True)
class Residuals:
    """Power-balance residuals over windows: measured minus modelled crank power, W.

    ``t_s``: window mid times (ride time, s); ``residual_w``: mean residual of
    each window; ``cda_m2``/``crr``: the drag values the model used; ``label``:
    where they came from ("batch fit", "live estimate" or "ride-file prior").
    """

    t_s: np.ndarray
    residual_w: np.ndarray
    cda_m2: float
    crr: float
    label: str


def power_residuals(series: Series, ride: Any, cda_m2: float, crr: float, label: str,
                    window_s: float = RESIDUAL_WINDOW_S) -> Residuals:
    """Energy-balance residual per window (Martin et al. 1998 power balance, integrated).

    Over a window from state i to state j (about ``window_s`` long, both
    sensors current throughout):

        E_crank * eta = dKE + m g dh + Crr m g cos(theta) dd + 1/2 rho CdA <v_air^2> dd

    with dKE = 1/2 (m + I/r^2)(v_j^2 - v_i^2), dh from the course profile and
    the crank energy by the trapezoid rule. The residual is
    (E_crank - modelled crank energy) / dt, W. Integrating instead of
    differentiating speed keeps speed noise out (design note: energy increments).
    """
    from livecoach.physics.power_balance import GRAVITY_MPS2

    v_model = ride.vehicle_model(cda_m2, crr)
    rho = ride.air.density_kgpm3
    wind = ride.air.headwind_mps
    eta = v_model.drivetrain_efficiency
    m_eff = v_model.effective_mass_kg
    course = ride.course
    t, d, v, p = series.t_s, series.distance_m, series.speed_mps, series.power_w
    ok = (~series.speed_stale & ~series.power_stale & np.isfinite(t) & np.isfinite(d)
          & np.isfinite(v) & np.isfinite(p) & (v > 1.0))
    mids: list[float] = []
    res: list[float] = []
    i = 0
    n = len(t)
    while i < n - 1:
        if not ok[i]:
            i += 1
            continue
        j = i
        while j + 1 < n and ok[j + 1] and t[j + 1] - t[i] < window_s:
            j += 1
        if j + 1 < n and ok[j + 1]:
            j += 1
        dt = t[j] - t[i]
        if j == i or dt < 0.5 * window_s:
            i = j + 1
            continue
        seg = slice(i, j + 1)
        e_crank = float(_trapezoid(p[seg], t[seg]))
        dd = d[j] - d[i]
        theta = math.atan((course.elevation_m(d[j]) - course.elevation_m(d[i])) / dd) if dd > 0 else 0.0
        dh = course.elevation_m(d[j]) - course.elevation_m(d[i])
        v_air = v[seg] + wind
        # <v_air |v_air| v> dt = <v_air^2> dd for the aero work: integrate in time.
        e_aero = 0.5 * rho * cda_m2 * float(_trapezoid(v_air * np.abs(v_air) * v[seg], t[seg]))
        e_roll = crr * v_model.mass_kg * GRAVITY_MPS2 * math.cos(theta) * dd
        e_grade = v_model.mass_kg * GRAVITY_MPS2 * dh
        e_kin = 0.5 * m_eff * (v[j] ** 2 - v[i] ** 2)
        e_model_crank = (e_aero + e_roll + e_grade + e_kin) / eta
        mids.append(0.5 * (t[i] + t[j]))
        res.append((e_crank - e_model_crank) / dt)
        i = j
    return Residuals(np.array(mids), np.array(res), cda_m2, crr, label)


def drag_for_residuals(summary: dict, series: Series, ride: Any) -> tuple[float, float, str]:
    """The CdA and Crr the residual plot uses: batch fit, else the last live estimate, else the prior."""
    bc, br = summary.get("batch_cda_m2"), summary.get("batch_crr")
    if bc is not None and br is not None and math.isfinite(bc) and math.isfinite(br):
        return float(bc), float(br), "batch fit"
    cda = series.cda_m2[np.isfinite(series.cda_m2)]
    crr = series.crr[np.isfinite(series.crr)]
    if cda.size and crr.size:
        return float(cda[-1]), float(crr[-1]), "live estimate"
    return ride.vehicle.cda_m2, ride.vehicle.crr, "ride-file prior"


def alarm_times(notices: Sequence[Notice], t0_s: float) -> list[tuple[float, str]]:
    """(ride time s, text) of each drag-change alarm."""
    return [(n.t_s - t0_s, n.text) for n in notices if n.kind == NOTICE_ALARM]
