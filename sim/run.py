"""Run the simulator in-process, as fast as the CPU allows, deterministically.

* :func:`simulate` -- a whole run: every event and the truth log in memory.
* :func:`iter_events` -- the events of a run, lazily (for long soak runs:
  memory stays flat; no truth log).
* :class:`sim.engine.Simulation` -- both: iterate ``events()`` and read the
  (optionally decimated) truth log as you go.

``controller`` closes the loop: an object with ``feed(event)`` returning a
result whose ``.state.target_power_w`` the rider follows in a scenario with
``[rider] mode = "coach"`` -- :class:`livecoach.pipeline.processor.Pipeline`
has exactly that shape.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator

from livecoach.stream.events import RawEvent
from sim.engine import Simulation
from sim.faults import FaultRecord
from sim.scenario import Scenario, load_scenario
from sim.truth import TruthLog, TruthSummary


@dataclass
class SimRun:
    """A finished run: the events in receive order, the truth, the faults."""

    scenario: Scenario
    seed: int
    events: list[RawEvent]
    truth: TruthLog | None
    summary: TruthSummary
    faults: list[FaultRecord] = field(default_factory=list)

    def event_bytes(self) -> bytes:
        """All events as one byte string (time, channel, payload): for identity checks."""
        import struct

        out = bytearray()
        for ev in self.events:
            ch = ev.channel.encode()
            out += struct.pack("<dB", ev.t_s, len(ch)) + ch + struct.pack("<I", len(ev.payload)) + ev.payload
        return bytes(out)


def as_scenario(scenario: Scenario | str | Path) -> Scenario:
    """A :class:`Scenario` from itself, a shipped name or a path."""
    return scenario if isinstance(scenario, Scenario) else load_scenario(scenario)


def simulate(scenario: Scenario | str | Path, seed: int | None = None, controller: Any = None,
             *, keep_truth: bool = True, truth_every: int = 1) -> SimRun:
    """Run ``scenario`` to the end (seed: the scenario's own unless given)."""
    sim = Simulation(as_scenario(scenario), seed, controller, keep_truth, truth_every)
    events = list(sim.events())
    return SimRun(sim.scenario, sim.seed, events, sim.truth, sim.summary, sim.faults.records)


def iter_events(scenario: Scenario | str | Path, seed: int | None = None,
                controller: Any = None) -> Iterator[RawEvent]:
    """The events of a run, produced lazily (no truth log kept)."""
    sim = Simulation(as_scenario(scenario), seed, controller, keep_truth=False)
    yield from sim.events()
