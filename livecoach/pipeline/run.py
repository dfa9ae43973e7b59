"""Drive the pipeline over a finished sequence of raw events, in process.

The CLI's replay (with pacing, output checks and recording warnings) lives in
:mod:`livecoach.recording.replay` and the report's state trace in
:mod:`livecoach.report.replay`; this is the bare loop for code that already
holds the events (tests, benchmarks).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable

from livecoach.config.ridefile import RideConfig
from livecoach.pipeline.processor import Pipeline
from livecoach.pipeline.state import Notice
from livecoach.stream.events import RawEvent


@dataclass
class Trace:
    """The result of a replay: every notice and the JSON summary."""

    notices: list[Notice] = field(default_factory=list)
    summary: dict[str, Any] = field(default_factory=dict)


def replay_events(ride: RideConfig, events: Iterable[RawEvent], plan: Any = None,
                  *, warnings: Iterable[str] = ()) -> Trace:
    """Feed ``events`` through a fresh pipeline; returns its notices and summary."""
    pipe = Pipeline(ride, plan, keep_for_batch=True)
    trace = Trace()
    for ev in events:
        trace.notices.extend(pipe.feed(ev).notices)
    for w in warnings:
        pipe.add_warning(w)
    trace.summary = pipe.summary()
    return trace
