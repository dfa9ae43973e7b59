"""Replay: feed a recording (or a CSV ride) through the same Pipeline the live loop ran.

:func:`replay_recording` reads a recording, rebuilds the ride file (and the
run-up plan, when the header carries one) from its header, feeds every raw
event to :class:`livecoach.pipeline.processor.Pipeline` in recorded order,
and returns the pipeline's JSON summary with the reader's warnings (torn
tail, damage) added. It also checks that the replay reproduces the outputs
the recording stored (see :mod:`livecoach.recording.outputs`).

The replay itself is pure: the only clock use is the optional pacing at
``speed`` x real time, which sleeps between events and never changes what
the pipeline computes, so two replays give identical summaries.
"""

from __future__ import annotations

import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from livecoach.errors import RecordingError
from livecoach.recording.format import RecordingHeader
from livecoach.recording.outputs import OutputCheck
from livecoach.recording.reader import OutputRecord, RecordingReader
from livecoach.stream.events import RawEvent

#: Header ``extra`` key under which the live runtime may store the plan CSV text.
PLAN_KEY = "plan_csv"


@dataclass
class ReplayResult:
    """What a replay gives.

    summary: the pipeline's summary dict (stable keys, see README), with the
    reader's and the output check's warnings in ``summary["warnings"]``.
    output_check: "reproduced", "differs", "none stored" or "skipped: <why>".
    """

    summary: dict[str, Any]
    header: RecordingHeader | None = None
    events: int = 0
    reader_warnings: list[str] = field(default_factory=list)
    outputs_stored: int = 0
    outputs_compared: int = 0
    output_mismatches: int = 0
    output_check: str = "none stored"


def plan_from_header(header: RecordingHeader, ride: Any) -> Any:
    """The run-up plan stored in the header (``extra["plan_csv"]``), or None."""
    text = header.extra.get(PLAN_KEY) if isinstance(header.extra, dict) else None
    if not text:
        return None
    from livecoach.plan.plan import load_plan

    with tempfile.TemporaryDirectory(prefix="livecoach-plan-") as folder:
        path = Path(folder) / "plan.csv"
        path.write_text(str(text), encoding="utf-8")
        return load_plan(path, ride)


class _Pacer:
    """Sleep so events come at ``speed`` x their recorded pace (shell only)."""

    def __init__(self, speed: float, sleep: Callable[[float], None], clock: Callable[[], float]) -> None:
        if not speed > 0.0:
            raise RecordingError(f"--speed {speed!r}: expected a positive factor")
        self.speed, self.sleep, self.clock = speed, sleep, clock
        self.t0_event: float | None = None
        self.t0_wall = 0.0

    def wait(self, t_s: float) -> None:
        if self.t0_event is None:
            self.t0_event, self.t0_wall = t_s, self.clock()
            return
        due = self.t0_wall + (t_s - self.t0_event) / self.speed
        delay = due - self.clock()
        if delay > 0.0:
            self.sleep(delay)


def replay_recording(
    path: str | Path,
    *,
    ride: Any = None,
    plan: Any = None,
    speed: float | None = None,
    strict: bool = False,
    check_outputs: bool = True,
    on_step: Callable[[Any], None] | None = None,
    sleep: Callable[[float], None] = time.sleep,
    clock: Callable[[], float] = time.monotonic,
) -> ReplayResult:
    """Replay a recording.

    ride: a RideConfig to use instead of the one in the header (the output
    check is then skipped: different settings give different outputs).
    plan: a run-up plan (default: the one stored in the header, if any).
    speed: pace at this many times real time (None: as fast as possible).
    strict: stop with RecordingError at the first damaged record.
    on_step: called with each StepResult (export uses it).
    """
    from livecoach.pipeline.processor import Pipeline

    reader = RecordingReader(path, strict=strict)
    header = reader.header
    own_ride = ride is None
    if own_ride:
        if not header.ride_text.strip():
            from livecoach.errors import ConfigError

            raise ConfigError(f"{path}: the recording's header holds no ride file; "
                              "give one with --config RIDE.toml")
        ride = header.ride_config(f"{path} (ride file in the header)")
    if plan is None:
        plan = plan_from_header(header, ride)
    pipe = Pipeline(ride, plan, keep_for_batch=True)
    check = OutputCheck() if (check_outputs and own_ride) else None
    pacer = _Pacer(speed, sleep, clock) if speed is not None else None
    n_events = 0
    for rec in reader.records():
        kind = type(rec)
        if kind is RawEvent:
            if pacer is not None:
                pacer.wait(rec.t_s)
            result = pipe.feed(rec)
            n_events += 1
            if check is not None:
                check.replayed(result)
            if on_step is not None:
                on_step(result)
        elif kind is OutputRecord and check is not None:
            check.recorded(rec.kind, rec.t_s, rec.value_json)
    out = ReplayResult(summary={}, header=header, events=n_events, reader_warnings=list(reader.warnings))
    for w in reader.warnings:
        pipe.add_warning(w)
    if check is None:
        out.output_check = ("skipped: ride file given instead of the recorded one" if not own_ride
                            else "skipped")
    elif reader.stats.get("records_lost") or reader.stats.get("damaged_regions", 0) > (
            0 if reader.end is not None else 1):
        out.output_check = "skipped: the recording is damaged"
        out.outputs_stored = check.recorded_count
    else:
        check.finish(recording_cut_short=reader.end is None)
        out.outputs_stored = check.recorded_count
        out.outputs_compared = check.compared
        out.output_mismatches = check.mismatches
        if check.recorded_count == 0:
            out.output_check = "none stored"
        elif check.mismatches:
            out.output_check = "differs"
            pipe.add_warning(f"replay differs from the outputs stored in the recording "
                             f"({check.mismatches} difference(s) in {check.compared} compared)")
            for text in check.messages:
                pipe.add_warning(text)
        else:
            out.output_check = "reproduced"
    out.summary = pipe.summary()
    return out


def replay_csv(path: str | Path, ride: Any, *, plan: Any = None,
               on_step: Callable[[Any], None] | None = None) -> tuple[dict[str, Any], Any]:
    """Replay a CSV ride through ``Pipeline.feed_sample``. Returns the summary
    (rejected rows added to ``rejected_samples`` and listed in ``warnings``,
    import notes too) and the :class:`livecoach.io.csv_ride.CsvRide`."""
    from livecoach.io.csv_ride import read_csv_ride
    from livecoach.pipeline.processor import Pipeline

    csv_ride = read_csv_ride(path, ride)
    pipe = Pipeline(ride, plan, keep_for_batch=True)
    for sample in csv_ride.samples:
        result = pipe.feed_sample(sample)
        if on_step is not None:
            on_step(result)
    for text in csv_ride.notes + csv_ride.reject_warnings():
        pipe.add_warning(text)
    summary = pipe.summary()
    if isinstance(summary.get("rejected_samples"), int):
        summary["rejected_samples"] += csv_ride.rejected_rows
    return summary, csv_ride
