"""Shared pieces of the sources (imperative shell): link events and queue hand-off.

Every source stamps what it receives with the injectable monotonic clock
(``time.monotonic`` live) and puts :class:`RawEvent` objects on the live
loop's asyncio queue. Link changes go on :data:`CH_LINK` as UTF-8 text
``"<channel> <state>"`` with state ``up``, ``down`` or ``reconnecting``.
"""

from __future__ import annotations

import asyncio
from typing import Callable

from livecoach.stream.events import CH_LINK, RawEvent

LINK_UP = "up"
LINK_DOWN = "down"
LINK_RECONNECTING = "reconnecting"

Clock = Callable[[], float]


def link_event(t_s: float, channel: str, state: str) -> RawEvent:
    """The :data:`CH_LINK` event saying ``channel`` is now ``state``."""
    return RawEvent(t_s, CH_LINK, f"{channel} {state}".encode("utf-8"))


class QueueFeeder:
    """Puts events on an asyncio queue without ever blocking the caller.

    A full queue drops the event and counts it (``dropped``): a source must
    not stall its radio or serial reader because the loop is behind.
    Use :meth:`put` from the event-loop thread and :meth:`put_threadsafe`
    from a reader thread.
    """

    def __init__(self, queue: "asyncio.Queue[RawEvent]", loop: asyncio.AbstractEventLoop) -> None:
        self.queue = queue
        self.loop = loop
        self.sent = 0
        self.dropped = 0

    def put(self, event: RawEvent) -> None:
        try:
            self.queue.put_nowait(event)
            self.sent += 1
        except asyncio.QueueFull:
            self.dropped += 1

    def put_threadsafe(self, event: RawEvent) -> bool:
        """Hand ``event`` to the loop thread; False when the loop is closed."""
        try:
            self.loop.call_soon_threadsafe(self.put, event)
        except RuntimeError:  # loop closed: the run is over
            return False
        return True


def normalize_address(address: str) -> str:
    """A BLE address in one canonical form: upper case; a 6-byte address
    written with dashes (``aa-bb-cc-dd-ee-ff``) gets colons. Platform UUIDs
    (macOS) are only upper-cased."""
    a = address.strip().upper()
    if len(a) == 17 and a.count("-") == 5:
        a = a.replace("-", ":")
    return a
