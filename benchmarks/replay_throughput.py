"""Benchmark: replay throughput and peak memory of ``livecoach replay`` on a one-hour recording.

The recording is one simulated hour (``sim/scenarios/soak.toml`` cut to
3600 s: 10 Hz GPS with RMC + GGA, 10 Hz air speed, 2 Hz power and wheel,
barometer, heart rate, the loop's 4 Hz ticks) with the module coaching
from the plan stored in its header, written by the real recorder through
the live loop's event handling; it is made once and cached under
``benchmarks/cache/``.

Measured:

* ``livecoach replay RECORDING --json`` as a child process: wall time from
  exec to exit, events per second and times real time, and the child's
  peak resident memory (``os.wait4`` -> ``ru_maxrss``);
* the same replay in this process (no interpreter start-up), with the
  recorded plan (coaching, as the CLI does) and without a plan (estimation
  only), and reading the file alone.

With ``--stages``: the cost per event of each stage, in CPU seconds of
this process (``time.process_time``, best of ``--repeat`` runs; less
sensitive than wall time to other jobs on the machine), on the events read
into memory first: decoding alone (``Decoder.feed``), the estimator alone on
the decoded samples (``feed`` + ``live_values`` per event), the pipeline
without and with coaching, and the time of the re-plans within the latter.
The pipeline's own bookkeeping (health, trap, phase, state) is the pipeline
without coaching less decoding and estimator; coaching between re-plans is
the coached pipeline less the uncoached one and the re-plans.

Targets (issue 8): >= 50,000 events/s in replay; peak RSS <= 80 MB.

Run: .venv/bin/python benchmarks/replay_throughput.py [--json] [--stages [--repeat N]]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import benchlib  # noqa: E402

TARGET_EVENTS_PER_S = 50_000.0
TARGET_RSS_MB = 80.0


def _inprocess(path: Path, plan_mode: str) -> dict:
    """Replay in this process. plan_mode: "recorded" (as the CLI) or "none"."""
    from livecoach.pipeline.processor import Pipeline
    from livecoach.recording.reader import RecordingReader
    from livecoach.recording.replay import replay_recording

    if plan_mode == "recorded":
        t0 = time.perf_counter()
        res = replay_recording(path)
        wall = time.perf_counter() - t0
        return {"events": res.events, "wall_s": wall, "output_check": res.output_check}
    t0 = time.perf_counter()
    reader = RecordingReader(path)
    ride = reader.header.ride_config(str(path))
    pipe = Pipeline(ride, None, keep_for_batch=True)
    n = 0
    for ev in reader.events():
        pipe.feed(ev)
        n += 1
    pipe.summary()
    return {"events": n, "wall_s": time.perf_counter() - t0}


def _read_only(path: Path) -> dict:
    from livecoach.recording.reader import RecordingReader

    t0 = time.perf_counter()
    n = sum(1 for _ in RecordingReader(path).events())
    return {"events": n, "wall_s": time.perf_counter() - t0}


def stages(path: Path, repeat: int = 3) -> dict:
    """CPU µs per event of each stage (see the module docstring), best of ``repeat``."""
    import gc

    from livecoach.pipeline.decode import Decoder
    from livecoach.pipeline.processor import Pipeline
    from livecoach.estimate import LiveDragEstimator
    from livecoach.recording.reader import RecordingReader
    from livecoach.recording.replay import plan_from_header
    from livecoach.stream.events import CH_TICK

    reader = RecordingReader(path)
    ride = reader.header.ride_config(str(path))
    plan = plan_from_header(reader.header, ride)
    events = list(reader.events())
    decoder = Decoder(ride)
    decoded = [decoder.feed(e) if e.channel != CH_TICK else [] for e in events]
    replan_s = [0.0]

    def read() -> None:
        for _ in RecordingReader(path).events():
            pass

    def decode() -> None:
        feed = Decoder(ride).feed
        for e in events:
            feed(e)

    def estimate() -> None:
        est = LiveDragEstimator(ride)
        feed, values = est.feed, est.live_values
        for samples in decoded:
            for s in samples:
                feed(s)
            values()

    def pipeline(with_plan: bool) -> None:
        pipe = Pipeline(ride, plan if with_plan else None)
        if pipe.coach is not None:
            replanner = pipe.coach.replanner
            inner = replanner.replan
            replan_s[0] = 0.0

            def timed(*args, **kwargs):
                t0 = time.process_time()
                try:
                    return inner(*args, **kwargs)
                finally:
                    replan_s[0] += time.process_time() - t0

            replanner.replan = timed
        feed = pipe.feed
        for e in events:
            feed(e)

    def best(fn) -> tuple[float, float]:
        runs = []
        for _ in range(repeat):
            gc.collect()
            t0 = time.process_time()
            fn()
            runs.append((time.process_time() - t0, replan_s[0]))
        return min(runs)

    n = len(events)
    us = 1e6 / n
    out = {"events": n, "repeat": repeat, "clock": "process_time"}
    out["read_us"] = best(read)[0] * us
    out["decode_us"] = best(decode)[0] * us
    out["estimator_us"] = best(estimate)[0] * us
    out["pipeline_estimation_only_us"] = best(lambda: pipeline(False))[0] * us
    coach_s, replans_s = best(lambda: pipeline(True))
    out["pipeline_coaching_us"] = coach_s * us
    out["replans_us"] = replans_s * us
    out["bookkeeping_us"] = out["pipeline_estimation_only_us"] - out["decode_us"] - out["estimator_us"]
    out["coaching_between_replans_us"] = (out["pipeline_coaching_us"] - out["pipeline_estimation_only_us"]
                                          - out["replans_us"])
    return out


def print_stages(st: dict) -> None:
    print(f"CPU per event ({st['events']} events in memory, best of {st['repeat']}):")
    for key, label in (("read_us", "reading the file"), ("decode_us", "decoding"),
                       ("estimator_us", "estimator (feed + live values)"),
                       ("bookkeeping_us", "pipeline bookkeeping and state"),
                       ("pipeline_estimation_only_us", "= pipeline, estimation only"),
                       ("coaching_between_replans_us", "coaching between re-plans"),
                       ("replans_us", "re-plans (amortised)"),
                       ("pipeline_coaching_us", "= pipeline with coaching")):
        v = st[key]
        print(f"  {label:34s} {v:7.1f} us  ({1e6 / v:>9,.0f} events/s)" if v > 0 else
              f"  {label:34s} {v:7.1f} us")


def run(say=print) -> dict:
    from livecoach.recording.reader import RecordingReader

    path = benchlib.cached_recording(benchlib.HOUR, say=say)
    reader = RecordingReader(path)
    first = last = None
    n_events = 0
    for ev in reader.events():
        if first is None:
            first = ev.t_s
        last = ev.t_s
        n_events += 1
    span_s = (last or 0.0) - (first or 0.0)
    size = path.stat().st_size

    child = benchlib.run_child([*benchlib.livecoach_cmd(), "replay", str(path), "--json"])
    if child.returncode != 0:
        raise RuntimeError(f"livecoach replay failed ({child.returncode}): {child.stderr[-2000:]}")
    summary = json.loads(child.stdout)
    results: dict = {
        "recording": {"file": path.name, "bytes": size, "events": n_events, "span_s": span_s,
                      "events_per_s_of_ride": n_events / span_s},
        "cli": {
            "command": "livecoach replay RECORDING --json",
            "wall_s": child.wall_s,
            "events_per_s": n_events / child.wall_s,
            "x_real_time": span_s / child.wall_s,
            "peak_rss_mb": child.peak_rss_bytes / 2**20,
            "warnings": summary.get("warnings", []),
        },
    }
    for name, mode in (("inprocess_coaching", "recorded"), ("inprocess_estimation_only", "none")):
        r = _inprocess(path, mode)
        r["events_per_s"] = r["events"] / r["wall_s"]
        r["x_real_time"] = span_s / r["wall_s"]
        results[name] = r
    rd = _read_only(path)
    rd["events_per_s"] = rd["events"] / rd["wall_s"]
    results["read_only"] = rd
    results["targets"] = {
        "events_per_s": TARGET_EVENTS_PER_S,
        "peak_rss_mb": TARGET_RSS_MB,
        "cli_events_per_s_met": results["cli"]["events_per_s"] >= TARGET_EVENTS_PER_S,
        "estimation_only_events_per_s_met": results["inprocess_estimation_only"]["events_per_s"]
        >= TARGET_EVENTS_PER_S,
        "cli_peak_rss_met": results["cli"]["peak_rss_mb"] <= TARGET_RSS_MB,
    }
    return results


def print_report(r: dict) -> None:
    rec = r["recording"]
    print(f"recording: {rec['events']} events over {rec['span_s'] / 3600:.2f} h "
          f"({rec['events_per_s_of_ride']:.1f} events/s of ride), {rec['bytes'] / 2**20:.1f} MiB")
    c = r["cli"]
    print(f"livecoach replay (child process): {c['wall_s']:.2f} s, {c['events_per_s']:,.0f} events/s, "
          f"{c['x_real_time']:,.0f} x real time, peak RSS {c['peak_rss_mb']:.1f} MB")
    for name in ("inprocess_coaching", "inprocess_estimation_only", "read_only"):
        x = r[name]
        extra = f", {x['x_real_time']:,.0f} x real time" if "x_real_time" in x else ""
        print(f"  {name:27s} {x['wall_s']:6.2f} s  {x['events_per_s']:>10,.0f} events/s{extra}")
    t = r["targets"]
    print(f"target >= {t['events_per_s']:,.0f} events/s: livecoach replay "
          f"{'met' if t['cli_events_per_s_met'] else 'NOT met'}; estimation only "
          f"{'met' if t['estimation_only_events_per_s_met'] else 'NOT met'}; "
          f"peak RSS <= {t['peak_rss_mb']:.0f} MB: {'met' if t['cli_peak_rss_met'] else 'NOT met'}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--json", action="store_true", help="print the results as JSON")
    ap.add_argument("--stages", action="store_true", help="also measure the CPU cost of each stage")
    ap.add_argument("--repeat", type=int, default=3, help="runs per stage with --stages (best is kept)")
    args = ap.parse_args()
    r = run()
    if args.stages:
        r["stages"] = stages(benchlib.cached_recording(benchlib.HOUR), max(args.repeat, 1))
    benchlib.write_results("replay_throughput", r)
    if args.json:
        print(json.dumps(r, indent=2, sort_keys=True))
    else:
        print_report(r)
        if "stages" in r:
            print_stages(r["stages"])


if __name__ == "__main__":
    main()
