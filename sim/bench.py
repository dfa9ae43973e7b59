"""Monte Carlo over seeds: one pure function per run, plain records, summary statistics.

:func:`bench_run` runs one seed of a scenario in closed loop with the
module's pipeline (:class:`livecoach.pipeline.processor.Pipeline` and a plan
made from the ride file, as on the day) and returns a plain ``dict`` of
numbers: trap speed achieved (truth), planned and optimum (the planner on
the true parameters), CdA and Crr estimates against the truth and whether
their +-2 sigma intervals hold it, cue and alarm counts, faults injected and
survived. It needs nothing but its arguments, so the same work could be
handed to any distributed engine; :func:`run_bench` maps it over seeds in
parallel processes and :func:`summarise` reduces the records.
"""

from __future__ import annotations

import math
import statistics
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Any, Callable

from livecoach.stream.events import RawEvent

#: Seconds after a fault's end by which its channel must be healthy again to count as survived.
RECOVERY_S = 5.0
#: Rider choices for :func:`bench_run`: as the scenario says, follow the coach,
#: the scenario's scripted profile, or constant power at the highest level the budget allows.
RIDER_CHOICES = ("scenario", "coach", "scripted", "constant")


class _Observer:
    """Wraps the pipeline as the simulator's controller and keeps what the record needs."""

    def __init__(self, pipeline: Any, faults: list[tuple[int, str, float]], true_cda_m2: float) -> None:
        self.pipeline = pipeline
        self.cues: dict[str, int] = {}
        self.alarm_times_s: list[float] = []
        self.warnings = 0
        self.pending = list(faults)          # (index, channel, healthy-by time)
        self.survived: set[int] = set()
        self.true_cda_m2 = true_cda_m2
        self.rolling_t_s: float | None = None
        self.first_useful_t_s: float | None = None
        self.errors = 0

    def feed(self, event: RawEvent):
        result = self.pipeline.feed(event)
        st = result.state
        for n in result.notices:
            if n.kind == "cue":
                name = str(n.data.get("cue", n.text))
                self.cues[name] = self.cues.get(name, 0) + 1
            elif n.kind == "alarm":
                self.alarm_times_s.append(float(n.data.get("start_t_s", n.t_s) or n.t_s))
            elif n.kind == "warning":
                self.warnings += 1
        if self.rolling_t_s is None and st.speed_mps is not None and st.speed_mps > 8.0:
            self.rolling_t_s = st.t_s
        if (self.first_useful_t_s is None and self.rolling_t_s is not None and st.cda_m2 is not None
                and abs(st.cda_m2 / self.true_cda_m2 - 1.0) <= 0.03):
            self.first_useful_t_s = st.t_s
        if self.pending:
            still = []
            for index, channel, due_s in self.pending:
                if st.t_s < due_s:
                    still.append((index, channel, due_s))
                    continue
                health = next((h for h in st.sensors if h.channel == channel), None)
                if health is not None and health.link_up and not health.stale:
                    self.survived.add(index)
                else:
                    still.append((index, channel, due_s))
            self.pending = still
        return result


def bench_run(scenario_ref: str, seed: int, rider: str = "scenario",
              coach: bool | None = None) -> dict[str, Any]:
    """One closed-loop run of ``scenario_ref`` (a shipped name or a path) with ``seed``.

    ``rider``: one of :data:`RIDER_CHOICES`. ``coach``: give the pipeline the
    plan so it coaches (cues, prediction, target power); default: only when
    the rider follows the coach (coaching re-plans every second, the costly
    part of a run). Returns a plain record (SI units; see module doc). Raises
    :class:`livecoach.errors.LivecoachError` for a scenario or plan that
    cannot be used.
    """
    from dataclasses import replace

    from livecoach.pipeline.processor import Pipeline
    from livecoach.plan import constant_power_strategy, make_plan
    from sim.engine import Simulation
    from sim.scenario import load_scenario, truth_ride

    sc = load_scenario(scenario_ref)
    if rider not in RIDER_CHOICES:
        raise ValueError(f"rider must be one of {RIDER_CHOICES}")
    if rider == "coach":
        sc = replace(sc, rider=replace(sc.rider, mode="coach"))
    elif rider == "scripted":
        sc = replace(sc, rider=replace(sc.rider, mode="scripted"))
    elif rider == "constant":
        p = constant_power_strategy(truth_ride(sc)).power_w
        sc = replace(sc, rider=replace(sc.rider, mode="scripted", profile=[[0.0, p]]))
    plan = make_plan(sc.ride)
    coaching = (sc.rider.mode == "coach") if coach is None else coach
    optimum = make_plan(
        truth_ride(sc), air_density_kgpm3=_true_density(sc), headwind_mps=None
    ).trap_speed_mps
    pipeline = Pipeline(sc.ride, plan if coaching else None, keep_for_batch=True)
    fault_checks = [
        (i, f.channel, f.start_s + f.duration_s + RECOVERY_S)
        for i, f in enumerate(sc.faults)
        if f.kind in ("dropout", "disconnect", "stuck") and f.duration_s > 0.0
    ]
    observer = _Observer(pipeline, fault_checks, sc.true_cda_m2)
    sim = Simulation(sc, seed, observer, keep_truth=False)
    for _ in sim.events():
        pass
    s = sim.summary
    st = pipeline.state
    summary = pipeline.summary()
    cda_true = sim.cda_at(sim.state.distance_m)
    crr_true = sim.crr_at(sim.state.distance_m)
    records = sim.faults.records
    injected = [r for r in records if r.affected > 0 or r.link_events > 0]
    survived = 0
    for r in injected:
        if r.kind in ("dropout", "disconnect", "stuck") and r.end_s < s.end_t_s - RECOVERY_S:
            survived += r.index in observer.survived
        elif r.kind in ("dropout", "disconnect", "stuck"):
            survived += 0       # too close to the end to tell
        else:
            survived += 1       # the loop ran on through it to the end
    rec: dict[str, Any] = {
        "scenario": sc.name,
        "seed": int(sim.seed),
        "rider": sc.rider.mode,
        "coached": coaching,
        "end_reason": s.end_reason,
        "end_t_s": s.end_t_s,
        "trap_speed_mps": s.trap_speed_mps,
        "module_trap_speed_mps": summary.get("trap_speed_mps"),
        "planned_trap_speed_mps": plan.trap_speed_mps,
        "optimum_trap_speed_mps": optimum,
        "trap_speed_ratio": (s.trap_speed_mps / optimum) if s.trap_speed_mps and optimum else None,
        # The planner knows one CdA and Crr: with drag or rolling steps in the
        # scenario the optimum uses the starting values and is an upper bound.
        "optimum_upper_bound": bool(sc.truth.cda_steps or sc.truth.crr_steps),
        "predicted_trap_speed_mps": st.predicted_trap_speed_mps,
        "w_prime_left_j": s.w_prime_at_trap_exit_j,
        "cda_true_m2": cda_true,
        "crr_true": crr_true,
        "events": s.events,
        "rejected_samples": summary.get("rejected_samples"),
        "warnings": observer.warnings,
        "cues": dict(sorted(observer.cues.items())),
        "cue_changes": sum(observer.cues.values()),
        "alarms": len(observer.alarm_times_s),
        "alarm_times_s": observer.alarm_times_s,
        "first_useful_cda_s": (
            observer.first_useful_t_s - observer.rolling_t_s
            if observer.first_useful_t_s is not None and observer.rolling_t_s is not None else None
        ),
        "faults_injected": len(injected),
        "faults_survived": survived,
        "fault_payloads": sim.faults.counts(),
        "batch_cda_m2": summary.get("batch_cda_m2"),
        "batch_crr": summary.get("batch_crr"),
    }
    rec.update(_estimate_fields("cda", st.cda_m2, st.cda_sd_m2, cda_true, "_m2"))
    rec.update(_estimate_fields("crr", st.crr, st.crr_sd, crr_true, ""))
    for name, true in (("batch_cda_m2", cda_true), ("batch_crr", crr_true)):
        value = rec[name]
        rec[name.replace("_m2", "") + "_error_pct"] = (
            100.0 * (value / true - 1.0) if value is not None and true else None
        )
    return rec


def _true_density(sc) -> float:
    from sim.environment import Air

    return Air(sc, sc.ride.course.elevation_m(0.0)).density0_kgpm3


def _estimate_fields(name: str, value: float | None, sd: float | None, true: float, unit: str) -> dict:
    ok = value is not None and math.isfinite(value)
    err = (value - true) if ok else None
    return {
        f"{name}{unit}": value,
        f"{name}_sd{unit}": sd,
        f"{name}_error{unit}": err,
        f"{name}_error_pct": 100.0 * err / true if err is not None and true else None,
        f"{name}_within_2sd": (abs(err) <= 2.0 * sd) if err is not None and sd is not None else None,
    }


# ----------------------------------------------------------------- many runs
def _run_safe(scenario_ref: str, seed: int, rider: str, coach: bool | None) -> dict[str, Any]:
    try:
        return bench_run(scenario_ref, seed, rider, coach)
    except Exception as exc:  # one bad run is reported, the others go on
        return {"seed": seed, "error": f"{type(exc).__name__}: {exc}"}


def run_bench(scenario_ref: str, seeds: list[int], workers: int = 1, rider: str = "scenario",
              coach: bool | None = None, progress: Callable[[int, int], None] | None = None) -> list[dict[str, Any]]:
    """:func:`bench_run` over ``seeds`` in ``workers`` processes; records sorted by seed.

    ``progress(done, total)`` is called after each run. A run that raises is
    returned as ``{"seed": s, "error": text}``.
    """
    records: list[dict[str, Any]] = []
    total = len(seeds)
    if workers <= 1 or total <= 1:
        for i, seed in enumerate(seeds):
            records.append(_run_safe(scenario_ref, seed, rider, coach))
            if progress:
                progress(i + 1, total)
    else:
        import multiprocessing

        ctx = multiprocessing.get_context("spawn")
        with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
            futures = [pool.submit(_run_safe, scenario_ref, seed, rider, coach) for seed in seeds]
            for done, fut in enumerate(as_completed(futures), start=1):
                records.append(fut.result())
                if progress:
                    progress(done, total)
    return sorted(records, key=lambda r: r["seed"])


def _stats(values: list[float]) -> dict[str, float | None]:
    xs = [v for v in values if v is not None and math.isfinite(v)]
    if not xs:
        return {"n": 0, "mean": None, "sd": None, "min": None, "max": None, "rms": None}
    return {
        "n": len(xs),
        "mean": statistics.fmean(xs),
        "sd": statistics.stdev(xs) if len(xs) > 1 else 0.0,
        "min": min(xs),
        "max": max(xs),
        "rms": math.sqrt(statistics.fmean(x * x for x in xs)),
    }


def _share(flags: list[Any]) -> float | None:
    xs = [bool(f) for f in flags if f is not None]
    return sum(xs) / len(xs) if xs else None


def summarise(records: list[dict[str, Any]]) -> dict[str, Any]:
    """Summary statistics of bench records (errors in % of the truth unless named)."""
    ok = [r for r in records if "error" not in r]
    out: dict[str, Any] = {"runs": len(records), "failed": len(records) - len(ok)}
    if not ok:
        return out
    col = lambda key: [r.get(key) for r in ok]  # noqa: E731
    out["trap_speed_mps"] = {
        "achieved": _stats(col("trap_speed_mps")),
        "module_measured": _stats(col("module_trap_speed_mps")),
        "planned": _stats(col("planned_trap_speed_mps")),
        "optimum": _stats(col("optimum_trap_speed_mps")),
        "achieved_over_optimum": _stats(col("trap_speed_ratio")),
    }
    for name in ("cda", "crr"):
        unit = "_m2" if name == "cda" else ""
        sds = [s for s in col(f"{name}_sd{unit}") if s is not None]
        live_rms = _stats(col(f"{name}_error_pct"))["rms"]
        batch_rms = _stats(col(f"batch_{name}_error_pct"))["rms"]
        out[name] = {
            "error_pct": _stats(col(f"{name}_error_pct")),
            "error_abs": _stats(col(f"{name}_error{unit}")),
            "within_2sd_share": _share(col(f"{name}_within_2sd")),
            "mean_2sd_interval_width": 4.0 * statistics.fmean(sds) if sds else None,
            "batch_error_pct": _stats(col(f"batch_{name}_error_pct")),
            "live_over_batch_rms": (live_rms / batch_rms) if live_rms and batch_rms else None,
        }
    out["optimum_upper_bound"] = any(r.get("optimum_upper_bound") for r in ok)
    cue_names = sorted({k for r in ok for k in r.get("cues", {})})
    out["cues_per_run"] = {k: statistics.fmean(r.get("cues", {}).get(k, 0) for r in ok) for k in cue_names}
    out["cue_changes"] = _stats(col("cue_changes"))
    out["alarms"] = {"runs_with_alarm": sum(1 for r in ok if r.get("alarms")), **_stats(col("alarms"))}
    useful = col("first_useful_cda_s")
    out["first_useful_cda_s"] = {
        **_stats(useful),
        "share_within_60_s": _share([u is not None and u <= 60.0 for u in useful]),
    }
    out["faults"] = {
        "injected": sum(r.get("faults_injected", 0) for r in ok),
        "survived": sum(r.get("faults_survived", 0) for r in ok),
    }
    out["rejected_samples"] = _stats(col("rejected_samples"))
    return out
