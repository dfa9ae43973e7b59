"""Run every benchmark and print one table (``make bench``).

Each benchmark runs as its own child process (so one's memory or imports
cannot colour another's figures) and reports JSON; this script prints the
table with the targets of issue 8 and writes everything to
``benchmarks/results/latest.json`` (git-ignored; copy figures into README
with the command that produced them). The machine and its load average go
into the file too: on a shared machine wall-clock figures vary from run to
run, instruction counts (callgrind) do not.

Run: .venv/bin/python benchmarks/run_all.py [--quick] [--skip NAME ...]
  --quick   skip the slow parts (callgrind, the simulated-ride memory run)
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import benchlib  # noqa: E402

HERE = Path(__file__).resolve().parent
STEPS = ("pipeline_cost", "replay_throughput", "startup", "plan_timing", "sim_ride_memory", "callgrind")
SLOW = ("sim_ride_memory", "callgrind")
#: Script of each step (the rest are ``<step>.py``).
SCRIPTS = {"callgrind": "callgrind_events.py"}


def _json_child(script: str, *args: str, timeout_s: float = 3600.0) -> tuple[dict, benchlib.ChildRun]:
    child = benchlib.run_child([sys.executable, str(HERE / script), *args, "--json"], timeout_s=timeout_s)
    if child.returncode not in (0, 1):
        raise RuntimeError(f"{script} failed ({child.returncode}):\n{child.stderr[-3000:]}")
    try:
        return json.loads(child.stdout), child
    except ValueError:
        raise RuntimeError(f"{script} printed no JSON:\n{child.stdout[-2000:]}\n{child.stderr[-2000:]}") from None


def _text_child(script: str, *args: str) -> str:
    proc = subprocess.run([sys.executable, str(HERE / script), *args], capture_output=True, text=True, timeout=1800)
    return proc.stdout + (proc.stderr if proc.returncode else "")


def collect(skip: set[str], say=print) -> dict:
    results: dict = {}
    benchlib.cached_recording(benchlib.RUNUP, say=say)      # build caches first (not timed)
    if "replay_throughput" not in skip:
        benchlib.cached_recording(benchlib.HOUR, say=say)
    for step in STEPS:
        if step in skip:
            continue
        say(f"- {step} ...")
        t0 = time.monotonic()
        try:
            if step == "sim_ride_memory":
                data, child = _json_child("soak.py", "--scenario", "default", "--no-faults")
                data = {"peak_rss_mb": child.peak_rss_bytes / 2**20, "simulated_s": data.get("simulated_s"),
                        "events": data.get("events"), "wall_s": data.get("wall_s"),
                        "failures": data.get("failures")}
            else:
                data, _ = _json_child(SCRIPTS.get(step, f"{step}.py"))
        except (RuntimeError, OSError) as exc:     # one broken benchmark must not hide the others
            say(f"  {step} FAILED: {exc}")
            results.setdefault("failed", {})[step] = str(exc)
            continue
        data["bench_wall_s"] = time.monotonic() - t0
        results[step] = data
    if "decode_layer" not in skip:
        results["decode_layer_text"] = _text_child("decode_layer.py")
    if (HERE / "plan_bench.py").exists() and "plan_bench" not in skip:
        results["plan_bench_text"] = _text_child("plan_bench.py")
    return results


def rows(r: dict) -> list[tuple[str, str, str, str]]:
    """(measure, value, target, verdict) rows of the table."""
    out = []

    def ok(flag: bool) -> str:
        return "met" if flag else "NOT MET"

    pc = r.get("pipeline_cost")
    if pc:
        c, e = pc["coaching"], pc["estimation_only"]
        out.append(("per event, median (coaching, plan on)", f"{c['wall']['median_us']:.1f} us "
                    f"({c['median_share_of_10hz_period_pct']:.3f} % of 100 ms)", "<= 100 us",
                    ok(c["wall"]["median_us"] <= 100.0)))
        out.append(("per event, p99 (coaching)", f"{c['wall']['p99_us'] / 1e3:.2f} ms", "", ""))
        out.append(("per event, p99 without re-plan events", f"{c['without_replan_events']['p99_us']:.1f} us", "", ""))
        if "replan_events" in c:
            out.append(("re-plan events (in the pipeline)", f"{c['replans']} = {c['replan_event_share_pct']:.1f} %, "
                        f"median {c['replan_events']['median_us'] / 1e3:.1f} ms, max "
                        f"{c['replan_events']['max_us'] / 1e3:.1f} ms", "", ""))
        out.append(("per event, median (estimation only)", f"{e['wall']['median_us']:.1f} us", "", ""))
    rt = r.get("replay_throughput")
    if rt:
        cli = rt["cli"]
        out.append(("replay 1 h recording: livecoach replay", f"{cli['events_per_s']:,.0f} events/s, "
                    f"{cli['x_real_time']:,.0f} x real time", ">= 50,000 events/s",
                    ok(cli["events_per_s"] >= 50_000)))
        eo = rt["inprocess_estimation_only"]
        out.append(("replay, in process, estimation only", f"{eo['events_per_s']:,.0f} events/s, "
                    f"{eo['x_real_time']:,.0f} x real time", ">= 50,000 events/s", ok(eo["events_per_s"] >= 50_000)))
        out.append(("peak RSS: livecoach replay (1 h)", f"{cli['peak_rss_mb']:.1f} MB", "<= 80 MB",
                    ok(cli["peak_rss_mb"] <= 80.0)))
    sm = r.get("sim_ride_memory")
    if sm:
        out.append(("peak RSS: simulated ride (live loop)", f"{sm['peak_rss_mb']:.1f} MB", "<= 80 MB",
                    ok(sm["peak_rss_mb"] <= 80.0)))
    su = r.get("startup")
    if su:
        out.append(("start-up: livecoach ride -> first event", f"{su['ride_with_plan_file_s']['median']:.3f} s",
                    "<= 1 s", ok(su["ride_with_plan_file_s"]["median"] <= 1.0)))
        out.append(("start-up, planning at start", f"{su['ride_planning_at_start_s']['median']:.3f} s", "", ""))
    pt = r.get("plan_timing")
    if pt:
        out.append(("plan (make_plan)", f"{pt['plan_s']['median'] * 1e3:.0f} ms", "", ""))
        out.append(("re-plan", f"median {pt['replan_ms']['median']:.1f} ms, max {pt['replan_ms']['max']:.1f} ms", "", ""))
    cg = r.get("callgrind")
    if cg and "skipped" not in cg:
        for name in ("estimation_only", "coaching", "coaching_between_replans"):
            x = cg[name]
            out.append((f"instructions/event ({name.replace('_', ' ')})",
                        f"{x['instructions_per_event'] / 1e3:.0f} k -> Pi 4 ~{x['pi4']['estimate_us']:.0f} us "
                        f"({x['pi4']['range_us'][0]:.0f}-{x['pi4']['range_us'][1]:.0f})", "", "assumed"))
        x = cg["replan"]
        out.append(("instructions per re-plan", f"{x['instructions_per_replan'] / 1e6:.0f} M -> Pi 4 "
                    f"~{x['pi4']['estimate_us'] / 1e3:.0f} ms", "", "assumed"))
    return out


def print_table(r: dict) -> None:
    table = rows(r)
    w = [max(len(row[i]) for row in table + [("measure", "value", "target", "")]) for i in range(4)]
    head = ("measure", "value", "target", "")
    print(f"{head[0]:<{w[0]}}  {head[1]:<{w[1]}}  {head[2]:<{w[2]}}  {head[3]}")
    print("-" * (sum(w) + 6))
    for m, v, t, ok in table:
        print(f"{m:<{w[0]}}  {v:<{w[1]}}  {t:<{w[2]}}  {ok}")
    mach = benchlib.machine_info()
    print(f"\nmachine: {mach['cpu']}, {mach['cores']} cores, Python {mach['python']}, "
          f"load average {mach['load_average_1_5_15_min']}")
    cg = r.get("callgrind")
    if cg and "assumptions" in cg:
        a = cg["assumptions"]
        print(f"Pi 4 estimates assume a Cortex-A72 at {a['pi4_clock_hz'] / 1e9:.1f} GHz, "
              f"{a['pi4_instructions_per_cycle']} instruction per cycle (range {a['pi4_ipc_range']}), "
              f"{a['aarch64_per_x86_64_instructions']} AArch64 instructions per x86-64 instruction "
              "(assumptions, from memory; not measured on a Pi)")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="skip callgrind and the simulated-ride memory run")
    ap.add_argument("--skip", nargs="*", default=[], help=f"steps to skip: {', '.join(STEPS)}, decode_layer, plan_bench")
    args = ap.parse_args()
    skip = set(args.skip) | (set(SLOW) if args.quick else set())
    t0 = time.monotonic()
    r = collect(skip)
    path = benchlib.write_results("latest", {"results": r, "total_wall_s": time.monotonic() - t0})
    print()
    print_table(r)
    for step, why in r.get("failed", {}).items():
        print(f"FAILED: {step}: {why.splitlines()[0] if why else ''}")
    print(f"\nresults: {path.relative_to(benchlib.ROOT)}")
    return 1 if r.get("failed") else 0


if __name__ == "__main__":
    sys.exit(main())
