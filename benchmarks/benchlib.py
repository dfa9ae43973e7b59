"""Shared helpers of the benchmark scripts (not part of the installed package).

* cached simulated recordings, written with the real recorder
  (:class:`livecoach.recording.writer.Recorder`) through the live loop's
  event handling, kept under ``benchmarks/cache/`` (git-ignored) and rebuilt
  when the simulator, the codecs, the recording format or the scenario change;
* statistics (median and percentiles of per-event times);
* peak resident memory of a child process (``os.wait4`` -> ``ru_maxrss``);
* the machine's load, written next to every result so a figure taken on a
  busy shared machine can be read for what it is.

Run the scripts with the project's interpreter, e.g.
``.venv/bin/python benchmarks/run_all.py``.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path
from typing import Any, Iterable, Sequence

ROOT = Path(__file__).resolve().parent.parent
BENCH_DIR = ROOT / "benchmarks"
CACHE_DIR = BENCH_DIR / "cache"
RESULTS_DIR = BENCH_DIR / "results"

if str(ROOT) not in sys.path:          # `python benchmarks/x.py` from a fresh clone
    sys.path.insert(0, str(ROOT))

#: One sample period of a 10 Hz sensor, s: the budget the per-event cost is compared with.
SAMPLE_PERIOD_10HZ_S = 0.1


# --------------------------------------------------------------------------- statistics
def quantile(sorted_values: Sequence[float], q: float) -> float:
    """The ``q`` quantile (0..1) of already sorted values, nearest-rank method."""
    if not sorted_values:
        raise ValueError("quantile of an empty sequence")
    k = min(len(sorted_values) - 1, max(0, int(round(q * (len(sorted_values) - 1)))))
    return float(sorted_values[k])


def summarise_us(values_ns: Iterable[int]) -> dict[str, float]:
    """Median, p90, p99, max and mean of times given in ns, returned in us."""
    xs = sorted(values_ns)
    n = len(xs)
    return {
        "n": n,
        "median_us": quantile(xs, 0.5) / 1e3,
        "p90_us": quantile(xs, 0.9) / 1e3,
        "p99_us": quantile(xs, 0.99) / 1e3,
        "max_us": xs[-1] / 1e3,
        "mean_us": sum(xs) / n / 1e3,
    }


# --------------------------------------------------------------------------- machine
def machine_info() -> dict[str, Any]:
    """Where the figures were taken: CPU, cores, Python, and the load average."""
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    try:
        load = [float(x) for x in Path("/proc/loadavg").read_text().split()[:3]]
    except (OSError, ValueError):
        load = []
    return {
        "cpu": cpu,
        "cores": os.cpu_count(),
        "python": platform.python_version(),
        "platform": platform.platform(),
        "load_average_1_5_15_min": load,
        "utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }


def rss_now_bytes() -> int:
    """Resident set size of this process now, bytes (Linux /proc/self/statm)."""
    pages = int(Path("/proc/self/statm").read_text().split()[1])
    return pages * os.sysconf("SC_PAGE_SIZE")


def peak_rss_self_bytes() -> int:
    """Peak resident set size of this process so far, bytes (getrusage; KiB on Linux)."""
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


@dataclasses.dataclass
class ChildRun:
    """A finished child process: exit code, wall time (s), peak RSS (bytes), output."""

    returncode: int
    wall_s: float
    peak_rss_bytes: int
    stdout: str
    stderr: str


def run_child(argv: Sequence[str], *, env: dict[str, str] | None = None, timeout_s: float = 1800.0,
              cwd: Path | None = None) -> ChildRun:
    """Run ``argv`` to the end; its own peak RSS comes from ``os.wait4`` (ru_maxrss of
    exactly that child, KiB on Linux), so other processes do not count."""
    import tempfile

    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        proc = subprocess.Popen(list(argv), stdout=out, stderr=err, env=env, cwd=cwd)
        deadline = t0 + timeout_s
        while True:
            pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
            if pid:
                break
            if time.perf_counter() > deadline:
                proc.kill()
                pid, status, usage = os.wait4(proc.pid, 0)
                break
            time.sleep(0.01)
        wall = time.perf_counter() - t0
        proc.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        return ChildRun(proc.returncode, wall, usage.ru_maxrss * 1024,
                        out.read().decode("utf-8", "replace"), err.read().decode("utf-8", "replace"))


def livecoach_cmd() -> list[str]:
    """The ``livecoach`` entry point of this interpreter's environment."""
    exe = Path(sys.executable).with_name("livecoach")
    if exe.exists():
        return [str(exe)]
    return [sys.executable, "-m", "livecoach"]


# --------------------------------------------------------------------------- cached recordings
def _sources_digest(extra: bytes) -> str:
    """A digest of everything a cached recording depends on."""
    h = hashlib.sha256(extra)
    folders = [ROOT / "sim", ROOT / "livecoach" / "codecs", ROOT / "livecoach" / "recording",
               ROOT / "livecoach" / "plan", ROOT / "livecoach" / "coach", ROOT / "livecoach" / "data"]
    for folder in folders:
        for p in sorted(folder.rglob("*")):
            if p.is_file() and p.suffix in (".py", ".toml"):
                h.update(str(p.relative_to(ROOT)).encode())
                h.update(p.read_bytes())
    return h.hexdigest()[:16]


@dataclasses.dataclass(frozen=True)
class RecordingSpec:
    """A simulated ride to record.

    scenario: shipped scenario name; duration_s: simulated time (None: the
    scenario's own end); coached: the module coaches with the plan made from
    the ride file, which goes into the header (as on the day); rider_follows:
    the simulated rider follows the coach's target power (else the
    scenario's scripted profile); label: cache file stem.
    """

    label: str
    scenario: str
    duration_s: float | None = None
    coached: bool = True
    rider_follows: bool = True


#: The closed-loop default run-up (about 5 min): the stream the per-event cost is measured on.
RUNUP = RecordingSpec("runup-default", "default", None, True, True)
#: One hour of riding with the module coaching (re-plans until the trap exit), 10 Hz GPS
#: (RMC + GGA), 10 Hz air speed, 2 Hz power and wheel, barometer and heart rate; the rider
#: keeps to the soak scenario's easy scripted power: the replay-throughput recording.
HOUR = RecordingSpec("hour-soak", "soak", 3600.0, True, False)


def scenario_for(spec: RecordingSpec):
    """The scenario of ``spec`` (time limit and rider mode applied)."""
    from sim.scenario import load_scenario

    sc = load_scenario(spec.scenario)
    if spec.duration_s is not None:
        sc = dataclasses.replace(sc, run=dataclasses.replace(sc.run, max_time_s=float(spec.duration_s)))
    return sc


def cached_recording(spec: RecordingSpec, *, say=print) -> Path:
    """The recording of ``spec`` under ``benchmarks/cache/``, simulated and written now if missing."""
    from livecoach.recording.format import FORMAT_VERSION, SUFFIX

    sc_path = ROOT / "sim" / "scenarios" / f"{spec.scenario}.toml"
    key = _sources_digest(json.dumps([dataclasses.asdict(spec), FORMAT_VERSION]).encode()
                          + sc_path.read_bytes())
    path = CACHE_DIR / f"{spec.label}-{key}{SUFFIX}"
    if path.exists():
        return path
    CACHE_DIR.mkdir(parents=True, exist_ok=True)
    for old in CACHE_DIR.glob(f"{spec.label}-*{SUFFIX}"):
        old.unlink()
    say(f"  (simulating and recording {spec.label}: once, then cached in {CACHE_DIR.relative_to(ROOT)})")
    tmp = path.with_suffix(".part")
    if tmp.exists():
        tmp.unlink()
    write_simulated_recording(spec, tmp)
    tmp.rename(path)
    return path


def write_simulated_recording(spec: RecordingSpec, path: Path) -> dict[str, Any]:
    """Simulate ``spec`` and record it as the live loop does: each event goes to the
    recorder, then through the pipeline (closed loop: the simulated rider follows its
    target power), and the outputs are stored. Returns counts."""
    import tempfile

    from livecoach.live.loop import LiveLoop
    from livecoach.plan import make_plan, save_plan
    from livecoach.recording.format import header_for_ride
    from livecoach.recording.outputs import RecordingSink
    from livecoach.recording.replay import PLAN_KEY
    from livecoach.recording.writer import Recorder
    from sim.engine import Simulation

    sc = scenario_for(spec)
    ride = sc.ride
    plan = make_plan(ride) if spec.coached else None
    extra: dict[str, Any] = {"simulator": {"scenario": sc.name, "seed": sc.seed}}
    if plan is not None:
        with tempfile.TemporaryDirectory() as folder:
            extra[PLAN_KEY] = save_plan(plan, Path(folder) / "plan.csv").read_text(encoding="utf-8")
    header = header_for_ride(ride, start_wall_time_unix_s=1_937_000_000.0, start_monotonic_s=0.0, extra=extra)
    warnings: list[str] = []
    rec = Recorder(path, header, flush_interval_s=ride.recording.flush_interval_s, on_warning=warnings.append)
    if not rec.start():
        raise RuntimeError(f"cannot record to {path}: {warnings}")
    loop = LiveLoop(ride, plan, sinks=[RecordingSink(rec)])
    mode = "coach" if (spec.coached and spec.rider_follows) else "scripted"
    sc = dataclasses.replace(sc, rider=dataclasses.replace(sc.rider, mode=mode))
    sim = Simulation(sc, None, _LoopController(loop), keep_truth=False)
    n = 0
    for _ in sim.events():
        n += 1
        if rec.queued > 50_000:           # let the writer thread catch up (a bench, not a ride)
            while rec.queued > 5_000 and rec.ok:
                time.sleep(0.01)
    rec.close(reason="closed")
    if rec.status != "closed":
        raise RuntimeError(f"recording {path} failed: {rec.failure}")
    return {"events": n, "outputs": rec.outputs_written}


class _LoopController:
    """The simulator's closed-loop controller: every event goes through ``LiveLoop.handle``
    (recorder first, then the pipeline, then the sinks), as in the live loop."""

    def __init__(self, loop: Any) -> None:
        self.loop = loop

    def feed(self, event: Any) -> Any:
        return self.loop.handle(event)


def read_events(path: Path) -> tuple[Any, list[Any], Any]:
    """(ride config, raw events, plan from the header or None) of a recording."""
    from livecoach.recording.reader import RecordingReader
    from livecoach.recording.replay import plan_from_header

    reader = RecordingReader(path)
    events = list(reader.events())
    ride = reader.header.ride_config(str(path))
    return ride, events, plan_from_header(reader.header, ride)


# --------------------------------------------------------------------------- results
def write_results(name: str, data: dict[str, Any]) -> Path:
    """Write ``data`` (with the machine info) to ``benchmarks/results/<name>.json``."""
    RESULTS_DIR.mkdir(parents=True, exist_ok=True)
    path = RESULTS_DIR / f"{name}.json"
    payload = {"machine": machine_info(), **data}
    path.write_text(json.dumps(payload, indent=2, sort_keys=True, default=str) + "\n", encoding="utf-8")
    return path
