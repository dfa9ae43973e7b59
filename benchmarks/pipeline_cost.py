"""Benchmark: the pipeline's cost per event on a realistic simulated event stream.

The stream is the closed-loop default run-up (``sim/scenarios/default.toml``:
the simulated rider follows the live coach; 10 Hz GPS with RMC + GGA, 2 Hz
power and wheel, 1 Hz heart rate, ticks), recorded once with the real
recorder and cached. A fresh :class:`livecoach.pipeline.processor.Pipeline`
with the run-up plan (coaching on, as on the day) is fed every event; each
``feed`` is timed with the wall clock (``perf_counter_ns``) and with this
thread's CPU clock (``thread_time_ns``; less disturbed by other processes on
a shared machine). The same stream is then fed without a plan (estimation
only).

Printed per configuration: median, p90, p99, max and mean per event, the
median as a share of one 10 Hz sample period (100 ms), the median per
channel, and the share of events that ran a re-plan with their cost.
Target (issue 8): median <= 100 us per event.

Run: .venv/bin/python benchmarks/pipeline_cost.py [--profile] [--json]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import benchlib  # noqa: E402

TARGET_MEDIAN_US = 100.0


def measure(ride, plan, events, *, repeats: int = 3) -> dict:
    """Feed ``events`` through fresh pipelines ``repeats`` times; per-event times are
    the minimum over the repeats (removes most of the noise of a shared machine)."""
    from livecoach.pipeline.processor import Pipeline

    n = len(events)
    wall = [1 << 62] * n
    cpu = [1 << 62] * n
    replanned = [False] * n
    perf = time.perf_counter_ns
    thread = time.thread_time_ns
    for _ in range(repeats):
        pipe = Pipeline(ride, plan, keep_for_batch=False)
        feed = pipe.feed
        for i, ev in enumerate(events):
            c0 = thread()
            w0 = perf()
            feed(ev)
            w1 = perf()
            c1 = thread()
            if w1 - w0 < wall[i]:
                wall[i] = w1 - w0
            if c1 - c0 < cpu[i]:
                cpu[i] = c1 - c0
            if plan is not None:
                out = pipe._coach_out
                replanned[i] = bool(getattr(out, "replanned", False)) and getattr(out, "t_s", None) == ev.t_s
    by_channel: dict[str, list[int]] = {}
    for ev, w in zip(events, wall):
        by_channel.setdefault(ev.channel, []).append(w)
    out = {
        "events": n,
        "repeats": repeats,
        "wall": benchlib.summarise_us(wall),
        "cpu": benchlib.summarise_us(cpu),
        "median_share_of_10hz_period_pct": benchlib.summarise_us(wall)["median_us"] / 1e6
        / benchlib.SAMPLE_PERIOD_10HZ_S * 100.0,
        "by_channel_median_us": {ch: benchlib.summarise_us(xs)["median_us"] for ch, xs in sorted(by_channel.items())},
        "by_channel_count": {ch: len(xs) for ch, xs in sorted(by_channel.items())},
    }
    if plan is not None:
        rp = [w for w, r in zip(wall, replanned) if r]
        other = [w for w, r in zip(wall, replanned) if not r]
        out["replans"] = len(rp)
        out["replan_event_share_pct"] = 100.0 * len(rp) / n
        if rp:
            out["replan_events"] = benchlib.summarise_us(rp)
        out["without_replan_events"] = benchlib.summarise_us(other)
        out["events_per_replan"] = n / max(len(rp), 1)
    return out


def profile(ride, plan, events, top: int = 25) -> str:
    """cProfile of one pass (cumulative), as text."""
    import cProfile
    import io
    import pstats

    from livecoach.pipeline.processor import Pipeline

    pipe = Pipeline(ride, plan, keep_for_batch=False)
    pr = cProfile.Profile()
    pr.enable()
    for ev in events:
        pipe.feed(ev)
    pr.disable()
    buf = io.StringIO()
    pstats.Stats(pr, stream=buf).sort_stats("tottime").print_stats(top)
    return buf.getvalue()


def run(*, repeats: int = 3, say=print) -> dict:
    path = benchlib.cached_recording(benchlib.RUNUP, say=say)
    ride, events, plan = benchlib.read_events(path)
    if plan is None:
        raise RuntimeError(f"{path}: the recording carries no plan")
    span_s = events[-1].t_s - events[0].t_s
    coached = measure(ride, plan, events, repeats=repeats)
    estimation = measure(ride, None, events, repeats=repeats)
    return {
        "stream": {"recording": path.name, "scenario": benchlib.RUNUP.scenario, "events": len(events),
                   "span_s": span_s, "events_per_s": len(events) / span_s},
        "coaching": coached,
        "estimation_only": estimation,
        "target_median_us": TARGET_MEDIAN_US,
        "target_met": coached["wall"]["median_us"] <= TARGET_MEDIAN_US,
    }


def print_report(r: dict) -> None:
    s = r["stream"]
    print(f"stream: {s['events']} events over {s['span_s']:.0f} s ({s['events_per_s']:.1f} events/s), "
          f"closed-loop '{s['scenario']}' run")
    for name in ("coaching", "estimation_only"):
        c = r[name]
        w, u = c["wall"], c["cpu"]
        print(f"{name:16s} wall: median {w['median_us']:7.1f} us  p90 {w['p90_us']:7.1f}  p99 {w['p99_us']:9.1f}  "
              f"max {w['max_us']:9.1f}  mean {w['mean_us']:8.1f}  | cpu median {u['median_us']:6.1f} us")
        print(f"{'':16s} median = {c['median_share_of_10hz_period_pct']:.3f} % of a 10 Hz sample period")
        if "replans" in c:
            rp = c.get("replan_events", {})
            wo = c["without_replan_events"]
            print(f"{'':16s} re-plans: {c['replans']} ({c['replan_event_share_pct']:.1f} % of events), "
                  f"median {rp.get('median_us', 0) / 1e3:.1f} ms, max {rp.get('max_us', 0) / 1e3:.1f} ms; "
                  f"other events p99 {wo['p99_us']:.1f} us")
        chans = ", ".join(f"{ch} {m:.1f}" for ch, m in c["by_channel_median_us"].items())
        print(f"{'':16s} median by channel (us): {chans}")
    print(f"target median <= {r['target_median_us']:.0f} us: {'met' if r['target_met'] else 'NOT met'}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeats", type=int, default=3, help="passes over the stream (minimum per event)")
    ap.add_argument("--profile", action="store_true", help="print a cProfile of one pass (coaching and not)")
    ap.add_argument("--json", action="store_true", help="print the results as JSON")
    args = ap.parse_args()
    if args.profile:
        ride, events, plan = benchlib.read_events(benchlib.cached_recording(benchlib.RUNUP))
        print("=== coaching ===")
        print(profile(ride, plan, events))
        print("=== estimation only ===")
        print(profile(ride, None, events))
        return
    r = run(repeats=args.repeats)
    benchlib.write_results("pipeline_cost", r)
    if args.json:
        print(json.dumps(r, indent=2, sort_keys=True))
    else:
        print_report(r)


if __name__ == "__main__":
    main()
