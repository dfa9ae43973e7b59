"""The built-in demo: the default scenario in closed loop through the real live loop.

The simulator (:class:`sim.source.SimSource`) feeds the live loop
(:class:`livecoach.live.loop.LiveLoop`) at accelerated time; the loop runs
the module's pipeline with the run-up plan and hands its outputs to the
rider's display (on a terminal; a line of text every so often elsewhere) and
to the recorder; the rider in the simulation follows the coach's target
power. Afterwards the recording is replayed -- which must reproduce the live
outputs exactly -- and the post-ride report is written from that replay.
"""

from __future__ import annotations

import asyncio
import dataclasses
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from sim.scenario import Scenario, load_scenario


@dataclass
class DemoResult:
    """Where the demo's files went and what happened (SI units)."""

    out_dir: Path
    plan_path: Path | None = None
    recording_path: Path | None = None
    report_path: Path | None = None
    truth_trap_speed_mps: float | None = None
    module_trap_speed_mps: float | None = None
    planned_trap_speed_mps: float | None = None
    cda_m2: float | None = None
    true_cda_m2: float | None = None
    output_check: str = ""
    events: int = 0
    wall_s: float = 0.0
    notes: list[str] = field(default_factory=list)


class TextProgress:
    """A sink for a screen-less run: a status line every ``every_s`` of ride
    time, and every cue, alarm and phase change as it happens."""

    def __init__(self, say: Callable[[str], None], every_s: float = 30.0) -> None:
        self.say = say
        self.every_s = every_s
        self._next_s = 0.0

    def on_state(self, st: Any) -> None:
        if st.t_s < self._next_s:
            return
        self._next_s = st.t_s + self.every_s

        def f(x, spec):
            return "--" if x is None else format(x, spec)

        self.say(
            f"t {st.t_s:6.1f} s  {st.phase:<7}  {f(st.distance_m, '7.0f')} m  "
            f"{f(None if st.speed_mps is None else st.speed_mps * 3.6, '6.1f')} km/h  "
            f"{f(st.power_w, '4.0f')} W (target {f(st.target_power_w, '4.0f')})  "
            f"W' {f(st.w_prime_balance_j, '6.0f')} J  CdA {f(st.cda_m2, '.4f')}"
        )

    def on_notice(self, n: Any) -> None:
        if n.kind in ("cue", "alarm", "phase"):
            self.say(f"t {n.t_s:6.1f} s  {n.kind}: {n.text}")


def _next_free(folder: Path, stem: str, suffix: str) -> Path:
    for k in range(1, 100000):
        p = folder / f"{stem}-{k:03d}{suffix}"
        if not p.exists():
            return p
    raise FileExistsError(f"{folder}: no free {stem}-NNN{suffix} name")


def run_demo(
    out_dir: str | Path = "demo-output",
    *,
    scenario: Scenario | str = "default",
    seed: int | None = None,
    speed: float = 40.0,
    display: bool | None = None,
    report: bool = True,
    say: Callable[[str], None] = print,
) -> DemoResult:
    """Run the demo; write the plan, the recording and the report under ``out_dir``.

    ``speed``: simulated seconds per wall second (the module's own computing
    may hold it back). ``display``: the full-screen rider display (default:
    only when stdout is a terminal).
    """
    from livecoach.live.loop import LiveLoop
    from livecoach.plan import make_plan, save_plan
    from livecoach.recording.format import SUFFIX, header_for_ride
    from livecoach.recording.outputs import RecordingSink
    from livecoach.recording.replay import PLAN_KEY
    from livecoach.recording.writer import Recorder
    from sim.source import SimSource

    t_wall0 = time.monotonic()
    sc = load_scenario(scenario) if not isinstance(scenario, Scenario) else scenario
    # The scenario's own ticks (simulated time) stand in for the loop's ticker.
    if sc.run.tick_hz <= 0.0:
        sc = dataclasses.replace(sc, run=dataclasses.replace(sc.run, tick_hz=4.0))
    if sc.rider.mode != "coach":
        sc = dataclasses.replace(sc, rider=dataclasses.replace(sc.rider, mode="coach"))
    ride = sc.ride
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    res = DemoResult(out_dir=out, true_cda_m2=sc.true_cda_m2)

    plan = make_plan(ride)
    res.plan_path = save_plan(plan, out / "plan.csv")
    res.planned_trap_speed_mps = plan.trap_speed_mps
    say(f"demo: {sc.name} scenario ({ride.vehicle.name}; {ride.course.name}), plan: "
        f"{plan.trap_speed_mps * 3.6:.1f} km/h through the {ride.course.trap_m:g} m trap")

    rec_dir = out / "recordings"
    rec_dir.mkdir(exist_ok=True)
    res.recording_path = _next_free(rec_dir, "demo", SUFFIX)
    header = header_for_ride(
        ride, start_wall_time_unix_s=time.time(), start_monotonic_s=0.0,
        extra={PLAN_KEY: res.plan_path.read_text(encoding="utf-8"),
               "simulator": {"scenario": sc.name, "seed": sc.seed if seed is None else seed}},
    )
    warnings: list[str] = []
    recorder = Recorder(res.recording_path, header, flush_interval_s=ride.recording.flush_interval_s,
                        on_warning=warnings.append)

    holder: dict[str, Any] = {}
    source = SimSource(sc, seed=seed, speed=speed, keep_truth=False,
                       target_fn=lambda: holder["loop"].pipeline.state.target_power_w)
    show = sys.stdout.isatty() if display is None else display
    sinks: list[Any] = [RecordingSink(recorder)]
    screen = None
    if show:
        from livecoach.sinks.display import DisplaySink

        screen = DisplaySink.from_ride(ride)
        sinks.append(screen)
    else:
        sinks.append(TextProgress(say))
    # The loop's own wall-clock ticker is not needed: the simulation sends ticks.
    loop = LiveLoop(ride, plan, sources=[source], sinks=sinks, clock=source.clock, tick_s=1e6)
    holder["loop"] = loop
    asyncio.run(loop.run())
    recorder.close(reason="demo finished")   # (the sink's stop closed it already; harmless)
    res.notes.extend(warnings)
    if screen is not None and screen.errors:
        res.notes.append(f"display: {screen.errors} drawing error(s), last: {screen.last_error}")
    summ = source.sim.summary
    res.truth_trap_speed_mps = summ.trap_speed_mps
    res.events = source.sent
    st = loop.pipeline.state
    res.module_trap_speed_mps = st.trap_speed_mps
    res.cda_m2 = st.cda_m2

    if report:
        from livecoach.recording.replay import replay_recording
        from livecoach.report import build_report
        from livecoach.report.replay import TraceCollector

        say("replaying the recording and writing the report ...")
        col = TraceCollector(0.5)
        replay = replay_recording(res.recording_path, on_step=col.take)
        res.output_check = replay.output_check
        states = col.finish()
        res.report_path = build_report(states, col.notices, replay.summary, ride, plan, out / "report",
                                       source=str(res.recording_path),
                                       warnings=[f"simulated run: scenario {sc.name}"])
    res.wall_s = time.monotonic() - t_wall0
    return res
