"""Which pipeline outputs a recording stores, and the check that a replay reproduces them.

:class:`OutputTap` is pure: from the sequence of notices and states it picks
the output records to store: every notice (cues, alarms, warnings, phase
changes) as kind ``"notice"``, and a compact state (phase, cue, target
power, planned speed, predicted trap speed, CdA, Crr, W' balance, ...) as
kind ``"state"`` whenever phase or cue changes and otherwise once per
``state_every_s`` of event time. Live, :class:`RecordingSink` feeds it from
the sink callbacks; in replay, :class:`OutputCheck` feeds a second tap from
the replayed pipeline and compares the two streams byte for byte (canonical
JSON, see :func:`livecoach.recording.format.canonical_json`).

:class:`RecordingSink` is the sink the live runtime plugs in: ``on_event``
for each raw event (call it in the order events are fed to the pipeline),
``on_state`` / ``on_notice`` for the outputs; all return at once.
"""

from __future__ import annotations

import collections
import math
from typing import Any, Callable

from livecoach.recording.format import canonical_json

KIND_NOTICE = "notice"
KIND_STATE = "state"
#: Notices from the shell (recorder trouble, a sink switched off): stored for
#: the record, not compared on replay (the pure pipeline does not make them).
KIND_SHELL = "shell"

#: LiveState fields stored in a "state" output record.
STATE_OUTPUT_FIELDS = (
    "phase", "cue", "target_power_w", "planned_speed_mps", "predicted_trap_speed_mps",
    "distance_m", "speed_mps", "power_w", "w_prime_balance_j", "cda_m2", "cda_sd_m2",
    "crr", "crr_sd", "trap_speed_mps",
)


class OutputTap:
    """Pick the outputs to store (pure and deterministic).

    state_every_s: store a state at least this often in event time, s,
    besides every phase or cue change.
    """

    def __init__(self, state_every_s: float = 1.0) -> None:
        self.state_every_s = float(state_every_s)
        self._next_state_t_s = -math.inf
        self._last_key: tuple[Any, Any] | None = None

    def from_notice(self, notice: Any) -> tuple[float, str, dict[str, Any]]:
        """The output record for one notice: (t_s, "notice", value)."""
        return notice.t_s, KIND_NOTICE, {
            "t_s": notice.t_s, "kind": notice.kind, "text": notice.text, "data": dict(notice.data),
        }

    def from_state(self, state: Any) -> tuple[float, str, dict[str, Any]] | None:
        """The output record for a state, or None when this state is not stored."""
        key = (state.phase, state.cue)
        t_s = state.t_s
        if key == self._last_key and t_s < self._next_state_t_s:
            return None
        self._last_key = key
        self._next_state_t_s = t_s + self.state_every_s
        value = {name: getattr(state, name, None) for name in STATE_OUTPUT_FIELDS}
        value["t_s"] = t_s
        return t_s, KIND_STATE, value


class RecordingSink:
    """A sink that records raw events and the pipeline's outputs through a
    :class:`livecoach.recording.writer.Recorder`. Every method returns at once."""

    def __init__(self, recorder: Any, tap: OutputTap | None = None) -> None:
        self.recorder = recorder
        self.tap = tap if tap is not None else OutputTap()

    def on_event(self, event: Any) -> None:
        self.recorder.append(event)
        if event.channel == "tick":     # the live loop's periodic tick: run the stall watchdog
            self.recorder.check()

    def on_state(self, state: Any) -> None:
        out = self.tap.from_state(state)
        if out is not None:
            self.recorder.append_output(*out)

    def on_notice(self, notice: Any) -> None:
        t_s, kind, value = self.tap.from_notice(notice)
        if notice.data.get("origin") == "shell":
            kind = KIND_SHELL
        self.recorder.append_output(t_s, kind, value)

    async def start(self) -> None:
        import asyncio

        if self.recorder.status == "idle":
            await asyncio.to_thread(self.recorder.start)

    async def stop(self) -> None:
        import asyncio

        await asyncio.to_thread(self.recorder.close)


class OutputCheck:
    """Compare the outputs a replay produces with the ones the recording stored.

    Feed recorded outputs with :meth:`recorded` and replayed step results with
    :meth:`replayed` in any interleaving; each kind is matched in order.
    After :meth:`finish`, :attr:`compared`, :attr:`mismatches` and
    :attr:`messages` say how it went.
    """

    def __init__(self, tap: OutputTap | None = None, max_messages: int = 5) -> None:
        self.tap = tap if tap is not None else OutputTap()
        self.max_messages = max_messages
        self._recorded: dict[str, collections.deque] = collections.defaultdict(collections.deque)
        self._produced: dict[str, collections.deque] = collections.defaultdict(collections.deque)
        self.recorded_count = 0
        self.compared = 0
        self.mismatches = 0
        self.messages: list[str] = []

    def recorded(self, kind: str, t_s: float, value_json: bytes) -> None:
        if kind == KIND_SHELL:
            return
        self.recorded_count += 1
        self._recorded[kind].append((t_s, value_json))
        self._match(kind)

    def replayed(self, result: Any) -> None:
        for notice in result.notices:
            t_s, kind, value = self.tap.from_notice(notice)
            self._produced[kind].append((t_s, canonical_json(value)))
            self._match(kind)
        out = self.tap.from_state(result.state)
        if out is not None:
            t_s, kind, value = out
            self._produced[kind].append((t_s, canonical_json(value)))
            self._match(kind)

    def _match(self, kind: str) -> None:
        rec, prod = self._recorded[kind], self._produced[kind]
        while rec and prod:
            (t_rec, j_rec), (t_prod, j_prod) = rec.popleft(), prod.popleft()
            self.compared += 1
            if j_rec != j_prod:
                self._mismatch(f"{kind} output #{self.compared} differs: recorded at t = {t_rec:.3f} s "
                               f"{_short(j_rec)}, replay at t = {t_prod:.3f} s {_short(j_prod)}")

    def finish(self, *, recording_cut_short: bool = False) -> None:
        """Count outputs left unmatched on either side. ``recording_cut_short``:
        the recording has no end record (power cut, kill), so outputs of its
        last events may be missing from the file; replayed outputs beyond the
        last recorded one are then not counted as differences."""
        for kind, rec in self._recorded.items():
            if rec:
                self._mismatch(f"{len(rec)} recorded {kind} output(s) were not reproduced "
                               f"(first at t = {rec[0][0]:.3f} s)")
                rec.clear()
        if self.recorded_count and not recording_cut_short:
            for kind, prod in self._produced.items():
                if prod:
                    self._mismatch(f"replay produced {len(prod)} {kind} output(s) the recording does "
                                   f"not have (first at t = {prod[0][0]:.3f} s)")
                    prod.clear()
        else:
            for prod in self._produced.values():
                prod.clear()

    def _mismatch(self, text: str) -> None:
        self.mismatches += 1
        if len(self.messages) < self.max_messages:
            self.messages.append(text)


def _short(value_json: bytes, limit: int = 160) -> str:
    text = value_json.decode("utf-8", "replace")
    return text if len(text) <= limit else text[:limit] + "..."


def warning_sink(messages: list[str]) -> Callable[[str], None]:
    """An ``on_warning`` callback that appends to ``messages`` (thread-safe: list.append)."""
    return messages.append
