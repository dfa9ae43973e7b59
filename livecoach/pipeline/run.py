"""Drive the pipeline over a finished sequence: replay of recordings and CSV rides.

These are thin loops around :class:`livecoach.pipeline.processor.Pipeline`;
they keep a decimated trace of states (for reports and export) and every notice.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Iterable

from livecoach.config.ridefile import RideConfig
from livecoach.pipeline.processor import Pipeline, StepResult
from livecoach.pipeline.state import LiveState, Notice
from livecoach.stream.events import RawEvent


@dataclass
class Trace:
    """The result of a replay: decimated states, all notices, the JSON summary."""

    states: list[LiveState] = field(default_factory=list)
    notices: list[Notice] = field(default_factory=list)
    summary: dict[str, Any] = field(default_factory=dict)


class _Collector:
    def __init__(self, every_s: float | None) -> None:
        self.every_s = every_s
        self.trace = Trace()
        self._next_t_s = float("-inf")

    def take(self, result: StepResult) -> None:
        if result.notices:
            self.trace.notices.extend(result.notices)
        if self.every_s is None:
            return
        st = result.state
        if st.t_s >= self._next_t_s or result.notices:
            self.trace.states.append(st)
            self._next_t_s = st.t_s + self.every_s


def replay_events(
    ride: RideConfig,
    events: Iterable[RawEvent],
    plan: Any = None,
    *,
    trace_every_s: float | None = None,
    warnings: Iterable[str] = (),
    on_step: Callable[[StepResult], None] | None = None,
) -> Trace:
    """Feed ``events`` through a fresh pipeline; returns notices, summary and
    (when ``trace_every_s`` is given) a state every ``trace_every_s`` seconds
    of event time plus a state at every notice."""
    pipe = Pipeline(ride, plan, keep_for_batch=True)
    col = _Collector(trace_every_s)
    for ev in events:
        res = pipe.feed(ev)
        col.take(res)
        if on_step is not None:
            on_step(res)
    for w in warnings:
        pipe.add_warning(w)
    col.trace.summary = pipe.summary()
    if trace_every_s is not None and (not col.trace.states or col.trace.states[-1] is not pipe.state):
        col.trace.states.append(pipe.state)
    return col.trace


def replay_samples(
    ride: RideConfig,
    samples: Iterable[Any],
    plan: Any = None,
    *,
    trace_every_s: float | None = None,
    warnings: Iterable[str] = (),
) -> Trace:
    """The same as :func:`replay_events` for already-decoded samples (CSV rides)."""
    pipe = Pipeline(ride, plan, keep_for_batch=True)
    col = _Collector(trace_every_s)
    for s in samples:
        col.take(pipe.feed_sample(s))
    for w in warnings:
        pipe.add_warning(w)
    col.trace.summary = pipe.summary()
    if trace_every_s is not None and (not col.trace.states or col.trace.states[-1] is not pipe.state):
        col.trace.states.append(pipe.state)
    return col.trace


def replay_trace(ride: RideConfig, events: Iterable[RawEvent], plan: Any = None,
                 every_s: float = 0.5, warnings: Iterable[str] = ()) -> Trace:
    """A replay keeping a state every ``every_s`` seconds (for reports)."""
    return replay_events(ride, events, plan, trace_every_s=every_s, warnings=warnings)
