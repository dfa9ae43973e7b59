"""Export a ride as plain CSV in the import form of :mod:`livecoach.io.csv_ride`.

One row per pipeline state update: the input columns first (``time_s``,
``power_w``, ``speed_mps``, ``distance_m``, ``cadence_rpm``,
``heart_rate_bpm``, ``airspeed_mps``; SI units), then the pipeline's outputs
(:data:`livecoach.io.csv_ride.OUTPUT_COLUMNS`: phase, cue, target power,
predictions, W' balance, CdA and Crr with their standard deviations), which
the importer recognises and ignores. Rows before power and speed are both
known are not written (the form requires them), and are counted.

Numbers are written in Python's shortest round-trip form, so a re-import
reads back the very same values; unknown values are empty cells. The file
is written to ``OUT.part`` and renamed when complete: an interrupted export
never leaves half a file under the final name.
"""

from __future__ import annotations

import csv
import math
import os
from pathlib import Path
from typing import Any

from livecoach.errors import ExportError
from livecoach.io.csv_ride import OUTPUT_COLUMNS

#: Input columns written from the state (the importer's names).
STATE_INPUT_COLUMNS = ("time_s", "power_w", "speed_mps", "distance_m", "cadence_rpm",
                       "heart_rate_bpm", "airspeed_mps")
#: LiveState attribute for each input column.
_STATE_ATTR = {"time_s": "t_s"}
EXPORT_COLUMNS = STATE_INPUT_COLUMNS + OUTPUT_COLUMNS


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "1" if value else "0"
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ""
    if isinstance(value, int):
        return str(value)
    return str(value)


class CsvRideWriter:
    """Write states as CSV rows to an open text file (header on creation)."""

    def __init__(self, fh: Any) -> None:
        self._writer = csv.writer(fh, lineterminator="\n")
        self._writer.writerow(EXPORT_COLUMNS)
        self.rows = 0
        self.skipped = 0
        self._last_t_s: float | None = None

    def write_state(self, state: Any) -> bool:
        """Write one row for ``state``; False (counted) if power or speed is unknown
        or the time is not finite."""
        t = state.t_s
        if (state.power_w is None or state.speed_mps is None or not math.isfinite(t)
                or not math.isfinite(state.power_w) or not math.isfinite(state.speed_mps)):
            self.skipped += 1
            return False
        self._writer.writerow([_cell(getattr(state, _STATE_ATTR.get(c, c), None)) for c in EXPORT_COLUMNS])
        self.rows += 1
        self._last_t_s = t
        return True

    def take(self, result: Any) -> None:
        """``on_step`` callback: write the state of a pipeline StepResult."""
        self.write_state(result.state)


def export_recording_csv(recording: str | Path, out: str | Path, *, ride: Any = None,
                         plan: Any = None, strict: bool = False) -> dict[str, Any]:
    """Replay ``recording`` through the pipeline and write one CSV row per state update.

    Returns {"rows", "skipped", "events", "warnings"}. ``out`` is replaced
    only when the export completes.
    """
    from livecoach.recording.replay import replay_recording

    out_path = Path(out)
    part = out_path.with_name(out_path.name + ".part")
    try:
        fh = open(part, "w", encoding="utf-8", newline="")
    except OSError as exc:
        raise ExportError(f"cannot write '{part}': {exc}") from None
    try:
        with fh:
            writer = CsvRideWriter(fh)
            result = replay_recording(recording, ride=ride, plan=plan, strict=strict,
                                      check_outputs=False, on_step=writer.take)
        os.replace(part, out_path)
    except OSError as exc:
        _remove(part)
        raise ExportError(f"cannot write '{out_path}': {exc}") from None
    except BaseException:
        _remove(part)
        raise
    return {"rows": writer.rows, "skipped": writer.skipped, "events": result.events,
            "warnings": list(result.reader_warnings), "output": str(out_path)}


def _remove(path: Path) -> None:
    try:
        path.unlink()
    except OSError:
        pass
