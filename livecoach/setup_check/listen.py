"""Listen to the configured sensors for a few seconds (imperative shell).

Works with any source that has ``async run(queue)`` (and optionally
``async stop()``), the interface of the live loop's sources: each puts
:class:`~livecoach.stream.events.RawEvent` objects on one asyncio queue and
reports its link state on the ``link`` channel. What arrives within the
window, per configured sensor, becomes a
:class:`~livecoach.setup_check.facts.SensorTraffic` for the pure checks.
"""

from __future__ import annotations

import asyncio
import time
from typing import Any, Callable

from livecoach.setup_check.facts import SensorSpec, SensorTraffic
from livecoach.stream.events import CH_LINK, RawEvent

#: Longest wait for a source to stop after the window, s.
STOP_TIMEOUT_S = 3.0


async def listen(
    sources: list[tuple[SensorSpec, Any]],
    window_s: float,
    *,
    clock: Callable[[], float] = time.monotonic,
    failed: dict[SensorSpec, str] | None = None,
) -> tuple[SensorTraffic, ...]:
    """Run every (spec, source) pair for ``window_s`` seconds and collect what arrives.

    ``failed``: specs whose source could not even be built, with the reason;
    they are reported as not connected. A source that raises is reported as
    not connected with its error; nothing here raises for a sensor's fault.
    """
    queue: asyncio.Queue[RawEvent] = asyncio.Queue()
    tasks: dict[SensorSpec, asyncio.Task] = {}
    for spec, source in sources:
        tasks[spec] = asyncio.create_task(source.run(queue), name=f"check-{spec.role}")
    by_channel: dict[str, list[RawEvent]] = {spec.channel: [] for spec, _ in sources}
    link_up: set[str] = set()
    link_errors: dict[str, str] = {}
    deadline = clock() + window_s
    try:
        while True:
            remaining = deadline - clock()
            if remaining <= 0.0:
                break
            try:
                ev = await asyncio.wait_for(queue.get(), timeout=remaining)
            except asyncio.TimeoutError:
                break
            if ev.channel == CH_LINK:
                text = ev.payload.decode("utf-8", "replace").split()
                if len(text) >= 2:
                    if text[1] == "up":
                        link_up.add(text[0])
                    else:
                        link_errors.setdefault(text[0], f"link {text[1]}")
                continue
            if ev.channel in by_channel:
                by_channel[ev.channel].append(ev)
    finally:
        await _stop_all(sources, tasks)
    source_of = dict(sources)
    out: list[SensorTraffic] = []
    for spec, _ in sources:
        events = tuple(by_channel[spec.channel])
        task = tasks[spec]
        error = None
        if task.done() and not task.cancelled() and task.exception() is not None:
            exc = task.exception()
            error = f"{type(exc).__name__}: {exc}"
        connected = bool(events) or spec.channel in link_up
        if not connected and error is None:
            error = (getattr(source_of[spec], "last_error", None)
                     or link_errors.get(spec.channel, "no link within the listening window"))
        out.append(SensorTraffic(spec, connected, events, window_s, error if not connected else None))
    for spec, reason in (failed or {}).items():
        out.append(SensorTraffic(spec, False, (), window_s, reason))
    return tuple(out)


async def _stop_all(sources: list[tuple[SensorSpec, Any]], tasks: dict[SensorSpec, asyncio.Task]) -> None:
    for spec, source in sources:
        stop = getattr(source, "stop", None)
        if stop is not None:
            try:
                await asyncio.wait_for(stop(), timeout=STOP_TIMEOUT_S)
            except Exception:  # a source that fails to stop must not hide the others' results
                pass
    for task in tasks.values():
        if not task.done():
            task.cancel()
    await asyncio.gather(*tasks.values(), return_exceptions=True)
