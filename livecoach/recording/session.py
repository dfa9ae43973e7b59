"""Set up the recording of one live ride (imperative shell: reads the clocks).

:func:`open_ride_recording` picks a new file in the ride file's
``[recording] directory``, writes into the header the ride file, the course
profile, the sensor identities, the run-up plan (so replay coaches with the
very same plan) and the start times, and returns a :class:`RecordingSink`
for :class:`livecoach.live.loop.LiveLoop` (its ``start()`` creates the file).
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path
from typing import Any, Callable

from livecoach.recording.format import SensorIdentity, header_for_ride
from livecoach.recording.outputs import RecordingSink
from livecoach.recording.replay import PLAN_KEY
from livecoach.recording.writer import Recorder, recording_path


def recording_folder(ride: Any) -> Path:
    """The ``[recording] directory`` of ``ride``, relative to the ride file's folder."""
    folder = Path(ride.recording.directory)
    if folder.is_absolute():
        return folder
    source = Path(ride.source)
    base = source.parent if source.suffix and source.parent.exists() else Path.cwd()
    return base / folder


def plan_csv_text(plan: Any) -> str:
    """The plan in its CSV form (livecoach.plan.plan.save_plan), as text."""
    from livecoach.plan.plan import save_plan

    with tempfile.TemporaryDirectory(prefix="livecoach-plan-") as folder:
        path = Path(folder) / "plan.csv"
        save_plan(plan, path)
        return path.read_text(encoding="utf-8")


def open_ride_recording(
    ride: Any,
    *,
    plan: Any = None,
    sensors: tuple[SensorIdentity, ...] | None = None,
    on_warning: Callable[[str], None] | None = None,
    path: str | Path | None = None,
    label: str = "ride",
    clock: Callable[[], float] = time.monotonic,
    wall_clock: Callable[[], float] = time.time,
) -> RecordingSink:
    """A recording sink for a live ride (the file is created by ``start()``).

    ``clock`` must be the clock the sources stamp events with.
    ``on_warning`` may be called from the writer thread (see
    :class:`livecoach.recording.writer.Recorder`): hand the text to the loop
    thread-safely, e.g. with ``asyncio_loop.call_soon_threadsafe``.
    """
    wall, mono = wall_clock(), clock()
    extra: dict[str, Any] = {}
    if plan is not None:
        extra[PLAN_KEY] = plan_csv_text(plan)
    header = header_for_ride(ride, start_wall_time_unix_s=wall, start_monotonic_s=mono,
                             sensors=sensors, extra=extra)
    target = Path(path) if path is not None else recording_path(recording_folder(ride), wall, label)
    recorder = Recorder(target, header, flush_interval_s=ride.recording.flush_interval_s,
                        on_warning=on_warning)
    return RecordingSink(recorder)
