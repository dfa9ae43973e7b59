"""Soak: hours of simulated riding through the live loop with faults switched on.

The simulator (:class:`sim.source.SimSource`, in lockstep, as fast as the
CPU allows) feeds the real live loop (:class:`livecoach.live.loop.LiveLoop`)
running the full pipeline with the run-up plan (coaching on), the real
recorder (:class:`livecoach.recording.writer.Recorder`) and a probe sink. The
scenario is ``sim/scenarios/soak.toml`` (the rider rides on at an easy power
past the course, which continues flat; every sensor keeps talking) with a
fault every ``--fault-every-min`` minutes, cycling through dropouts,
disconnects, frozen sensors, garbage bursts, duplicates and reordering on
every sensor.

Checked: no exception escapes (the run completes; no sink error; no
"decoder error" among the rejects, which would be a bug swallowed by the
pipeline's guard); the resident memory after the warm-up grows by at most
``--max-growth-mb`` (issue 8: 2 MB over 12 simulated hours). Exit code 0
when all checks pass, 1 otherwise.

Run: .venv/bin/python benchmarks/soak.py --hours 12      (``make soak``)
     .venv/bin/python benchmarks/soak.py --scenario default --no-faults   (one simulated run-up)
"""

from __future__ import annotations

import argparse
import asyncio
import dataclasses
import json
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))

import benchlib  # noqa: E402

#: Faults cycled through in the soak, one every --fault-every-min: (kind, channel, duration_s, extra TOML).
FAULT_CYCLE: tuple[tuple[str, str, float, str], ...] = (
    ("disconnect", "power", 20.0, ""),
    ("garbage", "gps", 30.0, "count = 40"),
    ("stuck", "wheel", 8.0, ""),
    ("dropout", "gps", 12.0, ""),
    ("duplicate", "power", 60.0, "probability = 0.4"),
    ("garbage", "mcu", 20.0, "count = 25"),
    ("stuck", "power", 10.0, ""),
    ("out_of_order", "wheel", 60.0, "probability = 0.3"),
    ("disconnect", "wheel", 15.0, ""),
    ("garbage", "power", 20.0, "count = 20"),
    ("stuck", "gps", 6.0, ""),
    ("dropout", "heart_rate", 30.0, ""),
    ("garbage", "wheel", 20.0, "count = 20"),
    ("disconnect", "gps", 10.0, ""),
    ("stuck", "mcu", 5.0, ""),
)


def soak_scenario(hours: float | None, *, scenario: str = "soak", fault_every_s: float | None = 600.0,
                  first_fault_s: float = 420.0):
    """The scenario with ``hours`` of simulated time (None: its own) and the fault cycle added."""
    from sim.scenario import SCENARIO_DIR, parse_scenario_text, resolve_scenario_path

    path = resolve_scenario_path(scenario)
    text = path.read_text(encoding="utf-8")
    end_s = hours * 3600.0 if hours is not None else None
    if fault_every_s:
        limit = end_s if end_s is not None else 1800.0
        t, k = first_fault_s, 0
        blocks = []
        while t < limit - 60.0:
            kind, channel, duration, extra = FAULT_CYCLE[k % len(FAULT_CYCLE)]
            blocks.append(f"\n[[fault]]\nkind = \"{kind}\"\nchannel = \"{channel}\"\nstart_s = {t:.1f}\n"
                          f"duration_s = {duration:.1f}\n{extra}\n")
            t += fault_every_s
            k += 1
        text += "".join(blocks)
    sc = parse_scenario_text(text, f"{path.name} (soak faults added)", SCENARIO_DIR)
    if end_s is not None:
        sc = dataclasses.replace(sc, run=dataclasses.replace(sc.run, max_time_s=end_s))
    return sc


class Probe:
    """A sink that samples memory and counts what the loop produced."""

    def __init__(self, every_s: float = 60.0) -> None:
        self.every_s = every_s
        self._next_s = 0.0
        self.samples: list[tuple[float, int, int]] = []     # (sim time s, RSS bytes, events)
        self.states = 0
        self.notices: dict[str, int] = {}
        self.stale_seen: set[str] = set()
        self.last_state: Any = None

    def on_state(self, st: Any) -> None:
        self.states += 1
        self.last_state = st
        if st.t_s >= self._next_s:
            self._next_s = st.t_s + self.every_s
            self.samples.append((st.t_s, benchlib.rss_now_bytes(), self.states))
        for h in st.sensors:
            if h.stale:
                self.stale_seen.add(h.channel)

    def on_notice(self, n: Any) -> None:
        self.notices[n.kind] = self.notices.get(n.kind, 0) + 1


def run_soak(sc, *, record_dir: Path, warmup_s: float, say=print, progress_every_s: float = 3600.0) -> dict:
    """Run ``sc`` through the live loop; returns the measurements."""
    from livecoach.live.loop import LiveLoop
    from livecoach.plan import make_plan
    from livecoach.recording.format import header_for_ride
    from livecoach.recording.outputs import RecordingSink
    from livecoach.recording.writer import Recorder
    from sim.source import SimSource

    ride = sc.ride
    plan = make_plan(ride)
    warnings: list[str] = []
    rec = Recorder(record_dir / "soak.lcrec",
                   header_for_ride(ride, start_wall_time_unix_s=1_937_000_000.0, start_monotonic_s=0.0),
                   flush_interval_s=ride.recording.flush_interval_s, on_warning=warnings.append)
    probe = Probe()
    holder: dict[str, Any] = {}

    class Progress:
        def __init__(self) -> None:
            self.next_s = progress_every_s
            self.t0 = time.monotonic()

        def on_state(self, st: Any) -> None:
            if st.t_s >= self.next_s:
                self.next_s += progress_every_s
                say(f"  {st.t_s / 3600:5.1f} h simulated, {time.monotonic() - self.t0:6.0f} s wall, "
                    f"RSS {benchlib.rss_now_bytes() / 2**20:6.1f} MB")

    source = SimSource(sc, speed=None, lockstep=True,
                       target_fn=lambda: holder["loop"].pipeline.state.target_power_w)
    loop = LiveLoop(ride, plan, sources=[source], sinks=[RecordingSink(rec), probe, Progress()],
                    clock=source.clock, tick_s=1e9)   # the scenario's ticks stand in for the ticker
    holder["loop"] = loop
    t0 = time.monotonic()
    escaped = None
    try:
        stats = asyncio.run(loop.run())
    except Exception as exc:      # the measurement: anything escaping is a failure
        escaped = f"{type(exc).__name__}: {exc}"
        stats = loop.stats
    wall = time.monotonic() - t0
    rec.close()
    summary = loop.pipeline.summary()
    decoder_bugs = [w for w in summary["warnings"] if "decoder error" in w]
    post = [(t, rss) for t, rss, _ in probe.samples if t >= warmup_s]
    growth_mb = (post[-1][1] - post[0][1]) / 2**20 if len(post) >= 2 else None
    spread_mb = (max(r for _, r in post) - min(r for _, r in post)) / 2**20 if post else None
    sim_s = probe.last_state.t_s if probe.last_state is not None else 0.0
    return {
        "scenario": sc.name,
        "simulated_s": sim_s,
        "wall_s": wall,
        "events": stats.events,
        "ticks": stats.ticks,
        "events_per_wall_s": (stats.events + stats.ticks) / wall if wall > 0 else None,
        "exception_escaped": escaped,
        "sink_errors": dict(stats.sink_errors),
        "sinks_disabled": list(stats.sinks_disabled),
        "decoder_errors_swallowed": decoder_bugs,
        "faults": [dataclasses.asdict(f) for f in source.sim.faults.records],
        "fault_counts": source.sim.faults.counts(),
        "notices": probe.notices,
        "channels_seen_stale": sorted(probe.stale_seen),
        "rejected_samples": summary["rejected_samples"],
        "recording": {"status": rec.status, "events_written": rec.events_written, "dropped": rec.dropped,
                      "bytes": rec.bytes_written, "warnings": warnings},
        "rss_samples_mb": [(round(t, 1), round(r / 2**20, 3)) for t, r, _ in probe.samples],
        "warmup_s": warmup_s,
        "rss_growth_after_warmup_mb": growth_mb,
        "rss_spread_after_warmup_mb": spread_mb,
        "peak_rss_mb": benchlib.peak_rss_self_bytes() / 2**20,
    }


def check(r: dict, max_growth_mb: float) -> list[str]:
    """The soak's pass conditions; returns what failed."""
    bad = []
    if r["exception_escaped"]:
        bad.append(f"an exception escaped the live loop: {r['exception_escaped']}")
    if r["sink_errors"]:
        bad.append(f"sink errors: {r['sink_errors']}")
    if r["decoder_errors_swallowed"]:
        bad.append(f"decoder errors caught by the pipeline's guard: {r['decoder_errors_swallowed']}")
    if r["recording"]["status"] != "closed":
        bad.append(f"recording ended {r['recording']['status']}: {r['recording']['warnings']}")
    g = r["rss_growth_after_warmup_mb"]
    if g is not None and g > max_growth_mb:
        bad.append(f"RSS grew {g:.2f} MB after the warm-up (limit {max_growth_mb} MB)")
    return bad


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--hours", type=float, default=None,
                    help="simulated hours (default: 12 for the soak scenario, else the scenario's own end)")
    ap.add_argument("--scenario", default="soak", help="scenario name (default soak)")
    ap.add_argument("--no-faults", action="store_true", help="do not add the fault cycle")
    ap.add_argument("--fault-every-min", type=float, default=10.0, help="one fault every N simulated minutes")
    ap.add_argument("--warmup-h", type=float, default=1.0, help="warm-up excluded from the RSS growth, h")
    ap.add_argument("--max-growth-mb", type=float, default=2.0)
    ap.add_argument("--json", action="store_true", help="print the results as JSON")
    args = ap.parse_args()
    hours = args.hours if args.hours is not None else (12.0 if args.scenario == "soak" else None)
    sc = soak_scenario(hours, scenario=args.scenario,
                       fault_every_s=None if args.no_faults else args.fault_every_min * 60.0)
    say = (lambda _t: None) if args.json else (lambda text: print(text, flush=True))
    if not args.json:
        print(f"soak: scenario {sc.name}, {sc.run.max_time_s / 3600:.2f} h simulated at most, "
              f"{len(sc.faults)} faults")
    with tempfile.TemporaryDirectory(prefix="livecoach-soak-") as tmp:
        r = run_soak(sc, record_dir=Path(tmp), warmup_s=min(args.warmup_h * 3600.0, sc.run.max_time_s / 2),
                     say=say)
    failures = check(r, args.max_growth_mb)
    r["failures"] = failures
    r["max_growth_mb"] = args.max_growth_mb
    benchlib.write_results(f"soak-{sc.name}", r)
    if args.json:
        print(json.dumps(r, indent=2, sort_keys=True))
    else:
        g = r["rss_growth_after_warmup_mb"]
        print(f"simulated {r['simulated_s'] / 3600:.2f} h in {r['wall_s']:.0f} s wall: {r['events']} events, "
              f"{r['ticks']} ticks, {r['rejected_samples']} rejected, faults {r['fault_counts']}")
        print(f"notices {r['notices']}; channels seen stale: {', '.join(r['channels_seen_stale']) or 'none'}")
        print(f"recording: {r['recording']['status']}, {r['recording']['events_written']} events, "
              f"{r['recording']['bytes'] / 2**20:.1f} MiB")
        print(f"RSS after warm-up: growth {'-' if g is None else f'{g:+.2f} MB'}, "
              f"spread {r['rss_spread_after_warmup_mb'] or 0:.2f} MB; peak {r['peak_rss_mb']:.1f} MB")
        print("PASS" if not failures else "FAIL:\n  " + "\n  ".join(failures))
    return 0 if not failures else 1


if __name__ == "__main__":
    sys.exit(main())
