"""The simulator as a source of the live loop (:class:`livecoach.live.loop.LiveLoop`).

:class:`SimSource` plays a simulation at ``speed`` times real time onto the
loop's queue, and is also the loop's clock (:meth:`SimSource.clock` returns
the simulated time of the latest event handed over), so the loop's ticks
carry simulated times too. In closed loop the rider reads the target power
from the running pipeline at every step (``target_fn``). The queue hand-off
waits when the queue is full: the simulation never loses an event, it falls
behind instead (it is a bench, not a radio). In ``lockstep`` (the default)
it hands over one event at a time and waits until the loop has processed
it, so a closed-loop run through the live loop is as deterministic as one
with an in-process controller; the scenario's own ticks (every 0.25 s of
simulated time) then stand in for the loop's ticker.
"""

from __future__ import annotations

import asyncio
import time
from typing import Callable

from livecoach.stream.events import RawEvent
from sim.engine import Simulation
from sim.scenario import Scenario


class SimSource:
    """Plays ``scenario`` at ``speed`` x real time (``speed`` None: as fast as possible)."""

    def __init__(self, scenario: Scenario, *, seed: int | None = None, speed: float | None = 20.0,
                 target_fn: Callable[[], float | None] | None = None, keep_truth: bool = False,
                 lockstep: bool = True, wall_clock: Callable[[], float] = time.monotonic) -> None:
        self.sim = Simulation(scenario, seed, keep_truth=keep_truth, truth_every=10, target_fn=target_fn)
        self.speed = speed
        self.lockstep = lockstep
        self.now_s = 0.0
        self.sent = 0
        self._wall = wall_clock
        self._stopped = False

    def clock(self) -> float:
        """The simulated time, s, of the latest event handed to the loop."""
        return self.now_s

    async def run(self, queue: "asyncio.Queue[RawEvent]") -> None:
        start = self._wall()
        for ev in self.sim.events():
            if self._stopped:
                break
            if self.speed is not None:
                delay = start + ev.t_s / self.speed - self._wall()
                if delay > 0.0:
                    await asyncio.sleep(delay)
            if self.sent % 64 == 0:
                await asyncio.sleep(0)        # let the loop run even when we are behind
            self.now_s = ev.t_s
            await queue.put(ev)
            self.sent += 1
            if self.lockstep:
                # Wait until the loop has taken (and so processed) every event:
                # the rider then sees the state after exactly the events
                # released so far, as with an in-process controller.
                while queue.qsize() > 0 and not self._stopped:
                    await asyncio.sleep(0)

    async def stop(self) -> None:
        self._stopped = True
