"""Benchmark: recording and replay I/O.

Run: .venv/bin/python benchmarks/recording_io.py [--hours H]

Prints
* the cost of ``Recorder.append`` on the live loop's thread (median, p99, us),
  with the writer thread running and syncing every 0.5 s;
* file size per hour of riding;
* reader throughput (raw events/s) on an H-hour recording made of the default
  bench scenario's events repeated end to end (real payloads, invented ride);
* end-to-end replay (read + Pipeline + summary) events/s and x real time,
  and the share of that time spent reading;
* peak RSS of this process (MB).

Targets (issue 8): replay >= 50,000 events/s end to end; reading well above.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from livecoach.recording import Recorder, RecordingReader, header_for_ride  # noqa: E402
from livecoach.recording.replay import replay_recording  # noqa: E402
from livecoach.stream.events import RawEvent  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--hours", type=float, default=1.0, help="length of the recording to read (default 1 h)")
    args = ap.parse_args()

    from sim.run import simulate

    run = simulate("default")
    ride = run.scenario.ride
    base = run.events
    span_s = base[-1].t_s - base[0].t_s + 0.1
    rate = len(base) / span_s
    print(f"source: bench scenario 'default', {len(base)} events over {span_s:.1f} s ({rate:.1f} events/s)")

    with tempfile.TemporaryDirectory(prefix="lc-bench-") as folder:
        path = Path(folder) / "hour.lcrec"
        header = header_for_ride(ride, start_wall_time_unix_s=1.9e9, start_monotonic_s=0.0)
        rec = Recorder(path, header, flush_interval_s=0.5)
        rec.start()
        target = int(args.hours * 3600.0 * rate)
        costs_ns: list[int] = []
        perf = time.perf_counter_ns
        n = 0
        rep = 0
        t_write0 = time.perf_counter()
        while n < target:
            off = rep * span_s
            for ev in base:
                e = RawEvent(ev.t_s + off, ev.channel, ev.payload)
                t0 = perf()
                rec.append(e)
                costs_ns.append(perf() - t0)
                n += 1
                if n >= target:
                    break
            rep += 1
        rec.close()
        t_write = time.perf_counter() - t_write0
        size = path.stat().st_size
        costs_ns.sort()
        print(f"append: median {statistics.median(costs_ns) / 1000:.2f} us, "
              f"p99 {costs_ns[int(0.99 * len(costs_ns))] / 1000:.2f} us over {n} events "
              f"(writer thread: {rec.syncs} syncs, status {rec.status}); all written in {t_write:.1f} s")
        print(f"file: {size / 1e6:.1f} MB for {args.hours:g} h ({size / n:.1f} bytes/event)")

        reader = RecordingReader(path)
        t0, c0 = time.perf_counter(), time.process_time()
        count = sum(1 for _ in reader.events())
        t_read, c_read = time.perf_counter() - t0, time.process_time() - c0
        print(f"read: {count} events in {t_read:.2f} s = {count / t_read:,.0f} events/s "
              f"({count / c_read:,.0f} events per CPU second)")

        one_run = Path(folder) / "run.lcrec"
        rec = Recorder(one_run, header, flush_interval_s=0.5)
        rec.start()
        for ev in base:
            rec.append(ev)
        rec.close()
        t0, c0 = time.perf_counter(), time.process_time()
        result = replay_recording(one_run)
        t_replay, c_replay = time.perf_counter() - t0, time.process_time() - c0
        t0 = time.perf_counter()
        sum(1 for _ in RecordingReader(one_run).events())
        t_read_one = time.perf_counter() - t0
        print(f"replay end to end (one run, {result.events} events): {t_replay:.2f} s = "
              f"{result.events / t_replay:,.0f} events/s ({result.events / c_replay:,.0f} per CPU second) "
              f"= {span_s / t_replay:.0f}x real time; "
              f"reading is {100 * t_read_one / t_replay:.1f} % of it")
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"peak RSS: {peak_mb:.0f} MB (includes the simulator and the {n} append timings)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
