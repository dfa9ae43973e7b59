"""Build the live loop's sinks from a ride file (the imperative shell's wiring).

Used by ``livecoach ride`` (real sensors) and by the simulator's demo, so the
two run the very same sinks: recording, the rider's display, audio cues, the
crew web page and radio telemetry.
"""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from livecoach.config.ridefile import RideConfig


@dataclass
class SinkSet:
    """The sinks of one run, and the recorder behind the recording sink."""

    sinks: list[Any] = field(default_factory=list)
    recorder: Any = None
    recording_path: Path | None = None
    web: Any = None
    warnings: list[str] = field(default_factory=list)

    def close(self, reason: str = "closed") -> None:
        if self.recorder is not None:
            self.recorder.close(reason=reason)


def build_sinks(
    ride: RideConfig,
    plan: Any = None,
    *,
    record: bool = True,
    recording_dir: str | Path | None = None,
    label: str = "ride",
    display: bool = True,
    display_console: Any = None,
    audio: bool | None = None,
    web: bool | None = None,
    radio: bool | None = None,
    clock: Callable[[], float] = time.monotonic,
    wall_clock: Callable[[], float] = time.time,
    on_warning: Callable[[str], None] | None = None,
) -> SinkSet:
    """Sinks for a run. ``audio``/``web``/``radio`` None means "as the ride file says"
    ([audio] muted, [web] enabled, [radio] enabled); True/False force them.
    ``on_warning`` receives the recorder's warnings (from its writer thread:
    pass :meth:`LiveLoop.post_warning`, which is thread-safe); the recording
    file is created when the loop starts its sinks."""
    out = SinkSet()
    warn = out.warnings.append

    if record:
        from livecoach.recording.session import open_ride_recording, recording_folder

        folder = Path(recording_dir) if recording_dir is not None else recording_folder(ride)
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            warn(f"RECORDING OFF: cannot create {folder}: {exc}")
        else:
            from livecoach.recording.writer import recording_path

            path = recording_path(folder, wall_clock(), label)
            sink = open_ride_recording(ride, plan=plan, on_warning=on_warning or warn, path=path,
                                       label=label, clock=clock, wall_clock=wall_clock)
            out.recorder = sink.recorder
            out.recording_path = path
            out.sinks.append(sink)

    if display:
        from livecoach.sinks.display import DisplaySink

        out.sinks.append(DisplaySink.from_ride(ride, display_console, screen=display_console is None))

    acfg = ride.section("audio")
    if audio if audio is not None else not acfg.muted:
        from livecoach.sinks.audio import AudioCueSink

        sink = AudioCueSink.from_ride(ride)
        if sink.player is None and acfg.player != "none":
            warn("audio cues: no sound player found (aplay, paplay or sox play); cues are silent")
        out.sinks.append(sink)

    wcfg = ride.section("web")
    if web if web is not None else wcfg.enabled:
        from livecoach.sinks.web import CrewWebSink

        out.web = CrewWebSink(ride, plan)
        out.sinks.append(out.web)

    rcfg = ride.section("radio")
    if radio if radio is not None else rcfg.enabled:
        if not rcfg.port:
            warn("radio telemetry: [radio] port is empty; no telemetry")
        else:
            from livecoach.telemetry.sender import RadioSink

            out.sinks.append(RadioSink.from_ride(ride))
    return out


def print_warnings(sinks: SinkSet, stream: Any = sys.stderr) -> None:
    for w in sinks.warnings:
        print(f"livecoach: {w}", file=stream)
