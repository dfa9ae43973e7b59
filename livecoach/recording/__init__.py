"""Crash-safe recording of every raw payload, and reading it back.

* :mod:`livecoach.recording.format` — the LCREC file format (documented there
  and in ``docs/recording_format.md``).
* :mod:`livecoach.recording.writer` — :class:`Recorder`: non-blocking append,
  background write + fsync, stops with a warning on disk trouble.
* :mod:`livecoach.recording.reader` — :class:`RecordingReader`: header, raw
  events, stored outputs; skips a torn tail and resynchronises after damage.
* :mod:`livecoach.recording.outputs` — which outputs are stored, the live
  :class:`RecordingSink`, and the replay-reproduces-outputs check.
* :mod:`livecoach.recording.replay` — feed a recording through the pipeline.
* :mod:`livecoach.recording.session` — :func:`open_ride_recording`: the sink a
  live ride plugs into :class:`livecoach.live.loop.LiveLoop`.
"""

from livecoach.recording.format import (
    MAGIC,
    SUFFIX,
    RecordingHeader,
    SensorIdentity,
    header_for_ride,
    sensors_from_ride,
)
from livecoach.recording.outputs import OutputCheck, OutputTap, RecordingSink
from livecoach.recording.reader import (
    EndRecord,
    OutputRecord,
    RecordingReader,
    is_recording,
    read_recording,
)
from livecoach.recording.writer import Recorder, recording_path

__all__ = [
    "MAGIC", "SUFFIX", "RecordingHeader", "SensorIdentity", "header_for_ride", "sensors_from_ride",
    "OutputCheck", "OutputTap", "RecordingSink",
    "EndRecord", "OutputRecord", "RecordingReader", "is_recording", "read_recording",
    "Recorder", "recording_path",
]
