"""A short soak: simulated minutes of riding through the live loop with a fault every 20 s.

The same harness as ``make soak`` (benchmarks/soak.py: the soak scenario, the
fault cycle over every sensor, the full pipeline with the plan, the real
recorder), cut to four simulated minutes. ``make soak`` checks the process's
resident memory over 12 simulated hours (issue 8: at most 2 MB of growth
after the warm-up); here, where other tests share the process, memory is
checked on what the module itself keeps: the bytes of every object
reachable from the pipeline (decoder, estimator, rider model, coach,
health, trap), walked with ``gc.get_referents``. Its bounded buffers make
it swing by some tens of kB (the coach's cache of course models) and grow
by about 350 B/s during the first hour (the estimator keeps its last 600
energy windows, about 1.4 MB, then levels off: measured with this walk over
two simulated hours); a leak of even one small object per event (40
events/s) would add about 400 kB in the two minutes compared, so the lowest
value of the last minute may exceed that of the first minute after the
warm-up by at most 128 kB. Slower leaks are the 12-hour soak's job.
"""

from __future__ import annotations

import asyncio
import gc
import sys
import types
from pathlib import Path


sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "benchmarks"))

import soak  # noqa: E402  (benchmarks/soak.py)

SIM_S = 240.0
MEASURE_FROM_S = 60.0        # warm-up: buffers filled and turned over
MAX_GROWTH_BYTES = 128 * 1024
_SKIP_TYPES = (type, types.ModuleType, types.FunctionType, types.BuiltinFunctionType, types.CodeType,
               types.MethodType, types.FrameType)


def retained_bytes(*roots) -> int:
    """Bytes of every object reachable from ``roots`` (classes, modules and code excluded)."""
    seen: set[int] = set()
    stack = list(roots)
    total = 0
    while stack:
        obj = stack.pop()
        if id(obj) in seen or isinstance(obj, _SKIP_TYPES):
            continue
        seen.add(id(obj))
        total += sys.getsizeof(obj)
        stack.extend(gc.get_referents(obj))
    return total


class MemoryProbe:
    """Samples the pipeline's retained bytes every 5 s of ride after the warm-up."""

    def __init__(self) -> None:
        self.samples: list[tuple[float, int]] = []
        self.next_s = MEASURE_FROM_S
        self.pipeline = None

    def on_state(self, st) -> None:
        if st.t_s >= self.next_s and self.pipeline is not None:
            self.samples.append((st.t_s, retained_bytes(self.pipeline)))
            self.next_s = st.t_s + 5.0


def test_four_minutes_with_faults_through_the_live_loop(tmp_path):
    from livecoach.live.loop import LiveLoop
    from livecoach.plan import make_plan
    from livecoach.recording.replay import replay_recording
    from livecoach.recording.session import open_ride_recording
    from sim.source import SimSource

    sc = soak.soak_scenario(SIM_S / 3600.0, fault_every_s=20.0, first_fault_s=40.0)
    assert sum(1 for f in sc.faults if f.start_s < SIM_S) >= 7
    ride = sc.ride
    plan = make_plan(ride)
    warnings: list[str] = []
    sink = open_ride_recording(ride, plan=plan, path=tmp_path / "soak.lcrec", on_warning=warnings.append,
                               clock=lambda: 0.0, wall_clock=lambda: 1_937_000_000.0)
    probe = soak.Probe(every_s=30.0)
    memory = MemoryProbe()
    holder = {}
    source = SimSource(sc, speed=None, target_fn=lambda: holder["loop"].pipeline.state.target_power_w)
    loop = LiveLoop(ride, plan, [source], [sink, probe, memory], clock=source.clock, tick_s=1e9)
    holder["loop"] = loop
    memory.pipeline = loop.pipeline
    stats = asyncio.run(asyncio.wait_for(loop.run(), 600.0))

    assert stats.sink_errors == {} and stats.sinks_disabled == [] and warnings == []
    assert probe.last_state.t_s >= SIM_S - 1.0
    summary = loop.pipeline.summary()
    assert not any("decoder error" in w for w in summary["warnings"])
    records = [r for r in source.sim.faults.records if r.start_s < SIM_S - 30.0]
    assert all(r.affected or r.link_events for r in records), records                  # the faults happened
    assert {"ble.cycling_power", "serial.gps"} <= probe.stale_seen                    # and were flagged
    assert probe.notices.get("warning", 0) >= 6

    # the recording of it all replays to the very outputs the live run stored
    result = replay_recording(tmp_path / "soak.lcrec")
    assert result.output_check == "reproduced" and result.events == stats.events + stats.ticks

    first = [b for t, b in memory.samples if t < MEASURE_FROM_S + 60.0]
    last = [b for t, b in memory.samples if t >= SIM_S - 60.0]
    assert len(first) >= 10 and len(last) >= 10
    assert min(last) - min(first) <= MAX_GROWTH_BYTES, (
        f"the pipeline keeps {min(last) - min(first)} more bytes after two minutes: {memory.samples}")
