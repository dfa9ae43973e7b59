"""Benchmark: time from process start to the first processed event (``livecoach ride``).

A pseudo-terminal stands in for the GPS: a thread writes a fresh NMEA
sentence every 5 ms from before the child starts. The child is the real
live job, ``livecoach ride --config RIDE --plan PLAN --no-display --mute``
(recording on, crew web page on an ephemeral port), stopped after a few
seconds. Its recording gives the receive time of the first event on the
system's monotonic clock (``CLOCK_MONOTONIC``, shared by all processes on
Linux); the parent read the same clock just before starting the child, so
the difference is the start-up time: interpreter, imports, ride file, plan
file, sinks, opening the port and the first line. The loop processes that
event as soon as it is queued (the queue is empty at start), within the
per-event cost measured by ``pipeline_cost.py``.

Also measured: the same without ``--plan`` (the plan is then optimised at
start), and ``livecoach --version`` (interpreter and command-line start only).

Target (issue 8): start-up <= 1 s.

Run: .venv/bin/python benchmarks/startup.py [--repeats N] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import benchlib  # noqa: E402

TARGET_S = 1.0


class GpsFeeder:
    """Writes a new RMC sentence to a pty master every ``period_s`` until stopped."""

    def __init__(self, period_s: float = 0.005) -> None:
        import tty

        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        os.set_blocking(self.master, False)
        self.port = os.ttyname(self.slave)
        self.period_s = period_s
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        from livecoach.codecs.nmea import encode_rmc, utc_time_text

        k = 0
        while not self._stop.is_set():
            line = encode_rmc(utc_time=utc_time_text(20000.0 + k * 0.01), utc_date="170531",
                              latitude_deg=31.2, longitude_deg=-113.5, speed_mps=0.0, course_deg=0.0)
            try:
                os.write(self.master, line + b"\r\n")
            except (BlockingIOError, OSError):
                pass            # nobody reading yet: the pty buffer is full
            k += 1
            self._stop.wait(self.period_s)

    def __enter__(self) -> "GpsFeeder":
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        self._thread.join(2.0)
        os.close(self.master)
        os.close(self.slave)


def ride_text(gps_port: str) -> str:
    from livecoach.cli.commands.init import example_ride_text

    text = example_ride_text().replace('gps_port = ""', f'gps_port = "{gps_port}"')
    return text + "\n[web]\nport = 0\n"


def one_start(with_plan: bool, folder: Path) -> float:
    """Seconds from just before exec to the first event's receive time."""
    from livecoach.recording.reader import RecordingReader

    with GpsFeeder() as gps:
        ride = folder / "ride.toml"
        ride.write_text(ride_text(gps.port), encoding="utf-8")
        rec_dir = folder / f"rec-{time.monotonic_ns()}"
        argv = [*benchlib.livecoach_cmd(), "ride", "--config", str(ride), "--no-display", "--mute",
                "--duration", "2", "--recordings", str(rec_dir)]
        if with_plan:
            argv += ["--plan", str(folder / "plan.csv")]
        t0 = time.monotonic()
        child = benchlib.run_child(argv, timeout_s=120.0)
    if child.returncode != 0:
        raise RuntimeError(f"livecoach ride exited {child.returncode}: {child.stderr[-2000:]}")
    files = sorted(rec_dir.glob("*.lcrec"))
    if not files:
        raise RuntimeError(f"livecoach ride wrote no recording: {child.stderr[-2000:]}")
    first = next(iter(RecordingReader(files[0]).events()), None)
    if first is None:
        raise RuntimeError("the recording holds no event: the GPS lines did not arrive")
    return first.t_s - t0


def run(repeats: int = 3, say=print) -> dict:
    from livecoach.plan import make_plan, save_plan

    with tempfile.TemporaryDirectory(prefix="livecoach-startup-") as tmp:
        folder = Path(tmp)
        import tomllib

        from livecoach.config.ridefile import parse_ride_dict

        ride = parse_ride_dict(tomllib.loads(ride_text("/dev/null")), "bench ride")
        save_plan(make_plan(ride), folder / "plan.csv")
        with_plan = [one_start(True, folder) for _ in range(repeats)]
        without_plan = [one_start(False, folder) for _ in range(max(1, repeats // 2))]
        version = []
        for _ in range(repeats):
            c = benchlib.run_child([*benchlib.livecoach_cmd(), "--version"])
            version.append(c.wall_s)
    out = {
        "ride_with_plan_file_s": {"median": statistics.median(with_plan), "all": with_plan},
        "ride_planning_at_start_s": {"median": statistics.median(without_plan), "all": without_plan},
        "version_only_s": {"median": statistics.median(version), "all": version},
        "target_s": TARGET_S,
    }
    out["target_met"] = out["ride_with_plan_file_s"]["median"] <= TARGET_S
    return out


def print_report(r: dict) -> None:
    print(f"livecoach ride --plan PLAN: first event {r['ride_with_plan_file_s']['median']:.3f} s after exec "
          f"(median of {len(r['ride_with_plan_file_s']['all'])})")
    print(f"livecoach ride (plans at start): {r['ride_planning_at_start_s']['median']:.3f} s")
    print(f"livecoach --version: {r['version_only_s']['median']:.3f} s")
    print(f"target <= {r['target_s']:.1f} s: {'met' if r['target_met'] else 'NOT met'}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    r = run(args.repeats)
    benchlib.write_results("startup", r)
    if args.json:
        print(json.dumps(r, indent=2, sort_keys=True))
    else:
        print_report(r)


if __name__ == "__main__":
    main()
