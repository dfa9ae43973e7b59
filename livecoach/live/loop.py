"""The live loop: one asyncio queue of raw events, one pipeline, many sinks.

Sources (BLE, serial, simulator) put :class:`RawEvent` objects on the queue
from their own tasks. The loop takes each event, hands it to the sinks that
want raw events (the recorder), feeds it to the pure pipeline and passes the
resulting state and notices to every sink. A periodic tick event lets
time-driven logic (staleness, cue dwell) run when no sensor speaks; ticks
are recorded like any other event, so replay sees the same sequence.

A sink that raises is counted and, after repeated failures, switched off
with a warning: no sink can stop the coaching.
"""

from __future__ import annotations

import asyncio
import collections
import time
from dataclasses import dataclass, field
from typing import Any, Callable, Iterable

from livecoach.config.ridefile import RideConfig
from livecoach.pipeline.processor import Pipeline, StepResult
from livecoach.pipeline.state import NOTICE_WARNING, Notice
from livecoach.stream.events import CH_TICK, RawEvent

#: A sink that fails this many times in a row is switched off.
SINK_FAILURE_LIMIT = 20


@dataclass
class LoopStats:
    """Counters of one live run."""

    events: int = 0
    ticks: int = 0
    sink_errors: dict[str, int] = field(default_factory=dict)
    sinks_disabled: list[str] = field(default_factory=list)
    first_event_latency_s: float | None = None


class LiveLoop:
    """Runs sources and sinks around one :class:`Pipeline`.

    ``sources``: objects with ``async run(queue)`` (and optionally ``async stop()``).
    ``sinks``: objects with ``on_state(state)``, ``on_notice(notice)``, optionally
    ``on_event(event)`` (raw events, for recording), ``async start()``, ``async stop()``.
    ``clock``: the monotonic clock the sources stamp events with.
    """

    def __init__(
        self,
        ride: RideConfig,
        plan: Any = None,
        sources: Iterable[Any] = (),
        sinks: Iterable[Any] = (),
        *,
        clock: Callable[[], float] = time.monotonic,
        tick_s: float = 0.25,
        queue_size: int = 10000,
    ) -> None:
        self.ride = ride
        self.pipeline = Pipeline(ride, plan, keep_for_batch=False)
        self.sources = list(sources)
        self.sinks = list(sinks)
        self.clock = clock
        self.tick_s = tick_s
        self.queue: asyncio.Queue[RawEvent] = asyncio.Queue(maxsize=queue_size)
        self.stats = LoopStats()
        self._failures: dict[int, int] = {}
        self._started_at = clock()
        # Warnings from the shell (recorder thread, sinks): drained on the loop.
        self._inbox: collections.deque[str] = collections.deque()

    def post_warning(self, text: str) -> None:
        """Hand a warning to the loop from any thread (e.g. the recorder's
        writer thread); it reaches every sink as a Notice on the next event."""
        self._inbox.append(text)

    # ------------------------------------------------------------------ sinks
    def _call(self, sink: Any, method: str, arg: Any) -> None:
        fn = getattr(sink, method, None)
        if fn is None:
            return
        key = id(sink)
        try:
            fn(arg)
            self._failures[key] = 0
        except Exception as exc:  # a sink must never stop the loop
            name = type(sink).__name__
            self.stats.sink_errors[name] = self.stats.sink_errors.get(name, 0) + 1
            self._failures[key] = self._failures.get(key, 0) + 1
            if self._failures[key] >= SINK_FAILURE_LIMIT and sink in self.sinks:
                self.sinks.remove(sink)
                self.stats.sinks_disabled.append(name)
                self._broadcast_notice(Notice(
                    self.pipeline.state.t_s, NOTICE_WARNING,
                    f"{name} switched off after repeated errors: {type(exc).__name__}: {exc}",
                    {"sink": name, "origin": "shell"},
                ))

    def _broadcast_notice(self, notice: Notice) -> None:
        for sink in list(self.sinks):
            self._call(sink, "on_notice", notice)

    def handle(self, event: RawEvent) -> StepResult:
        """Process one event: record it, run the pipeline, feed the sinks."""
        while self._inbox:
            self._broadcast_notice(Notice(event.t_s, NOTICE_WARNING, self._inbox.popleft(),
                                          {"origin": "shell"}))
        for sink in list(self.sinks):
            self._call(sink, "on_event", event)
        result = self.pipeline.feed(event)
        if event.channel == CH_TICK:
            self.stats.ticks += 1
        else:
            self.stats.events += 1
            if self.stats.first_event_latency_s is None:
                self.stats.first_event_latency_s = self.clock() - self._started_at
        for notice in result.notices:
            self._broadcast_notice(notice)
        for sink in list(self.sinks):
            self._call(sink, "on_state", result.state)
        return result

    # ------------------------------------------------------------------- run
    async def _ticker(self) -> None:
        while True:
            await asyncio.sleep(self.tick_s)
            try:
                self.queue.put_nowait(RawEvent(self.clock(), CH_TICK, b""))
            except asyncio.QueueFull:
                pass

    async def run(self, stop: asyncio.Event | None = None, duration_s: float | None = None) -> LoopStats:
        """Run until ``stop`` is set, ``duration_s`` passes, or all sources end."""
        stop = stop or asyncio.Event()
        for sink in self.sinks:
            start = getattr(sink, "start", None)
            if start is not None:
                try:
                    await start()
                except Exception as exc:
                    self._broadcast_notice(Notice(self.clock(), NOTICE_WARNING,
                                                  f"{type(sink).__name__} did not start: {exc}",
                                                  {"origin": "shell"}))
        self._started_at = self.clock()
        source_tasks = [asyncio.create_task(src.run(self.queue)) for src in self.sources]
        ticker = asyncio.create_task(self._ticker())
        deadline = None if duration_s is None else self._started_at + duration_s
        try:
            while not stop.is_set():
                if deadline is not None and self.clock() >= deadline:
                    break
                if source_tasks and all(t.done() for t in source_tasks) and self.queue.empty():
                    break
                try:
                    event = await asyncio.wait_for(self.queue.get(), timeout=0.5)
                except asyncio.TimeoutError:
                    continue
                self.handle(event)
        finally:
            ticker.cancel()
            for src in self.sources:
                stop_fn = getattr(src, "stop", None)
                if stop_fn is not None:
                    try:
                        await stop_fn()
                    except Exception:
                        pass
            for t in source_tasks:
                t.cancel()
            await asyncio.gather(ticker, *source_tasks, return_exceptions=True)
            for sink in self.sinks:
                stop_fn = getattr(sink, "stop", None)
                if stop_fn is not None:
                    try:
                        await stop_fn()
                    except Exception:
                        pass
        return self.stats
