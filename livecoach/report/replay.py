"""Make a report from a recording or a CSV ride: replay it, keep a trace, build the page.

The replay is the same one ``livecoach replay`` runs
(:mod:`livecoach.recording.replay`); this module only keeps a decimated
trace of states (one every ``every_s`` seconds of event time, plus one at
every notice) and every notice, then calls :func:`build_report`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from livecoach.errors import ConfigError, RecordingError
from livecoach.pipeline.state import LiveState, Notice
from livecoach.report.build import build_report

#: Default spacing of the kept states, s of event time.
DEFAULT_EVERY_S = 0.5


@dataclass
class TraceCollector:
    """Keeps a state every ``every_s`` seconds (and at every notice) and all notices.

    Pass :meth:`take` as the replay's ``on_step`` callback.
    """

    every_s: float = DEFAULT_EVERY_S
    states: list[LiveState] = field(default_factory=list)
    notices: list[Notice] = field(default_factory=list)
    _next_t_s: float = float("-inf")
    _last: LiveState | None = None

    def __post_init__(self) -> None:
        if not self.every_s > 0.0:
            raise ConfigError(f"report state spacing {self.every_s!r} s: expected a positive number")

    def take(self, result: Any) -> None:
        st = result.state
        self._last = st
        if result.notices:
            self.notices.extend(result.notices)
        if st.t_s >= self._next_t_s or result.notices:
            self.states.append(st)
            self._next_t_s = st.t_s + self.every_s

    def finish(self) -> list[LiveState]:
        """The trace, ending with the very last state."""
        if self._last is not None and (not self.states or self.states[-1] is not self._last):
            self.states.append(self._last)
        return self.states


@dataclass(frozen=True)
class ReportOutcome:
    """Where the report went and the replay summary it was made from."""

    path: Path
    summary: dict[str, Any]
    states: int
    notices: int


def report_from_recording(path: str | Path, out_dir: str | Path, *, ride: Any = None, plan: Any = None,
                          every_s: float = DEFAULT_EVERY_S, strict: bool = False) -> ReportOutcome:
    """Replay a recording (its own ride file and plan unless given) and write the report."""
    from livecoach.recording.reader import RecordingReader
    from livecoach.recording.replay import plan_from_header, replay_recording

    header = RecordingReader(path).header
    use_ride = ride if ride is not None else header.ride_config(f"{path} (ride file in the header)")
    use_plan = plan if plan is not None else plan_from_header(header, use_ride)
    col = TraceCollector(every_s)
    result = replay_recording(path, ride=ride, plan=use_plan, strict=strict, check_outputs=False,
                              on_step=col.take)
    states = col.finish()
    if not states:
        raise RecordingError(f"{path}: the recording holds no events, so there is nothing to report")
    notes = []
    if ride is not None:
        notes.append(f"ride file {ride.source} used instead of the one in the recording")
    out = build_report(states, col.notices, result.summary, use_ride, use_plan, out_dir,
                       source=str(path), warnings=notes)
    return ReportOutcome(out, result.summary, len(states), len(col.notices))


def report_from_csv(path: str | Path, ride: Any, out_dir: str | Path, *, plan: Any = None,
                    every_s: float = DEFAULT_EVERY_S) -> ReportOutcome:
    """Replay a CSV ride with ``ride`` (a RideConfig) and write the report."""
    from livecoach.recording.replay import replay_csv

    col = TraceCollector(every_s)
    summary, _ = replay_csv(path, ride, plan=plan, on_step=col.take)
    states = col.finish()
    if not states:
        from livecoach.errors import CsvImportError

        raise CsvImportError(f"{path}: no usable rows, so there is nothing to report")
    out = build_report(states, col.notices, summary, ride, plan, out_dir, source=str(path))
    return ReportOutcome(out, summary, len(states), len(col.notices))
