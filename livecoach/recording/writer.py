"""The recorder: append raw events (and outputs) from the live loop; a background
thread writes and syncs them (format: :mod:`livecoach.recording.format`).

Guarantees
----------
* :meth:`Recorder.append` never blocks and never raises: it puts the event in
  an in-memory queue (a :class:`collections.deque`, safe between threads)
  and returns. The writer thread encodes, writes and ``fsync``\\s what is
  queued at least every ``flush_interval_s`` (<= 1 s), so a kill or a power
  cut at any moment loses at most the records of the last interval plus the
  one write in flight; the file stays readable (the reader skips a torn tail).
* The file is created exclusively (an existing recording is never
  overwritten) and written append-only; nothing written is ever rewritten.
* A write or sync error (disk full, read-only file system, I/O error) or a
  disk so slow that the queue falls ``stall_limit_s`` behind stops recording:
  :attr:`Recorder.status` becomes ``"failed"``, :attr:`Recorder.failure` says
  why, and ``on_warning`` is called once with a loud message. Records already
  written stay on disk; the live loop goes on, and later appends are counted
  as dropped. ``on_warning`` may be called from the writer thread: it must be
  quick and thread-safe (e.g. put the text on a queue).

This is the imperative shell: it reads the monotonic clock for its own
stall watchdog, never for anything stored in the recording.
"""

from __future__ import annotations

import collections
import errno
import os
import struct
import threading
import time
from pathlib import Path
from typing import Any, BinaryIO, Callable

from livecoach.errors import RecordingError
from livecoach.recording.format import (
    MAGIC,
    SUFFIX,
    TYPE_END,
    TYPE_EVENT,
    TYPE_HEADER,
    TYPE_OUTPUT,
    RecordingHeader,
    canonical_json,
    event_body,
    frame,
    output_body,
)
from livecoach.stream.events import RawEvent

STATUS_IDLE = "idle"
STATUS_RECORDING = "recording"
STATUS_CLOSED = "closed"
STATUS_FAILED = "failed"

_OUTPUT = object()   # queue marker for output records


def _default_open(path: Path) -> BinaryIO:
    return open(path, "xb", buffering=0)


class Recorder:
    """Write one recording.

    path: the file to create (must not exist). header: what goes in the
    header record. flush_interval_s: longest time a record waits in memory
    before it is written and synced, s (0 < x <= 1). on_warning: called with
    a message when recording stops or degrades. stall_limit_s: the queue may
    fall this far behind a blocked write before recording is stopped, s.
    max_queue_records: stop recording (instead of growing memory) when this
    many records wait. opener: makes the file object (tests inject faults
    through it); it must return an unbuffered binary file with ``write`` and
    ``fileno``.
    """

    def __init__(
        self,
        path: str | Path,
        header: RecordingHeader,
        *,
        flush_interval_s: float = 0.5,
        on_warning: Callable[[str], None] | None = None,
        stall_limit_s: float = 5.0,
        max_queue_records: int = 200_000,
        opener: Callable[[Path], BinaryIO] = _default_open,
    ) -> None:
        if not 0.0 < flush_interval_s <= 1.0:
            raise RecordingError(f"flush_interval_s = {flush_interval_s!r}: expected 0 < x <= 1 s")
        self.path = Path(path)
        self.header = header
        self.flush_interval_s = float(flush_interval_s)
        self.stall_limit_s = float(stall_limit_s)
        self.max_queue_records = int(max_queue_records)
        self._on_warning = on_warning
        self._opener = opener
        self._queue: collections.deque = collections.deque()
        self._wake = threading.Event()
        self._closing = False
        self._end_reason = "closed"
        self._thread: threading.Thread | None = None
        self._file: BinaryIO | None = None
        self._seq = 0
        self._good_offset = 0          # file size after the last complete write
        self._progress_mono = 0.0      # monotonic time of the last completed write
        self._appends = 0
        self.status = STATUS_IDLE
        self.failure: str | None = None
        self.warnings: list[str] = []
        self.events_written = 0
        self.outputs_written = 0
        self.bytes_written = 0
        self.dropped = 0
        self.syncs = 0

    # ------------------------------------------------------------------ control
    def start(self) -> bool:
        """Create the file, write and sync the header, start the writer thread.

        Returns True when recording; False (with a warning, status "failed")
        when the file cannot be created or written, e.g. on a read-only file
        system. Never raises for I/O errors: the ride goes on without recording.
        """
        if self.status != STATUS_IDLE:
            raise RecordingError(f"recorder for {self.path} was started already")
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            f = self._opener(self.path)
        except FileExistsError:
            self._fail(f"recording file {self.path} exists already; it was not overwritten")
            return False
        except OSError as exc:
            self._fail(f"cannot create recording file {self.path}: {_os_text(exc)}")
            return False
        self._file = f
        try:
            data = MAGIC + frame(TYPE_HEADER, 0, self.header.to_json())
            self._write_all(data)
            os.fsync(f.fileno())
            _sync_dir(self.path.parent)
        except OSError as exc:
            self._fail(f"cannot write the recording header to {self.path}: {_os_text(exc)}")
            self._close_file()
            return False
        self._seq = 1
        self.bytes_written = self._good_offset = len(data)
        self.syncs += 1
        self._progress_mono = time.monotonic()
        self.status = STATUS_RECORDING
        self._thread = threading.Thread(target=self._run, name=f"recorder:{self.path.name}",
                                        daemon=True)
        self._thread.start()
        return True

    def append(self, event: RawEvent) -> None:
        """Queue one raw event (never blocks, never raises)."""
        if self.status != STATUS_RECORDING:
            if self.status == STATUS_FAILED:
                self.dropped += 1
            return
        q = self._queue
        q.append(event)
        self._appends += 1
        if len(q) > self.max_queue_records or (
            (self._appends & 63) == 0
            and time.monotonic() - self._progress_mono > self.stall_limit_s
        ):
            self._stall()

    def append_output(self, t_s: float, kind: str, value: Any) -> None:
        """Queue one pipeline output (JSON-able ``value``) of type ``kind`` at ``t_s``."""
        if self.status != STATUS_RECORDING:
            if self.status == STATUS_FAILED:
                self.dropped += 1
            return
        self._queue.append((_OUTPUT, t_s, kind, value))
        if len(self._queue) > self.max_queue_records:
            self._stall()

    def check(self) -> bool:
        """Watchdog for the caller to run now and then (e.g. on a tick): stops
        recording if a write has been blocked longer than ``stall_limit_s``.
        Returns True while recording."""
        if (self.status == STATUS_RECORDING and self._queue
                and time.monotonic() - self._progress_mono > self.stall_limit_s):
            self._stall()
        return self.status == STATUS_RECORDING

    def close(self, timeout_s: float = 10.0, reason: str = "closed") -> None:
        """Write what is queued and an end record, sync and close the file."""
        if self.status == STATUS_IDLE:
            self.status = STATUS_CLOSED
            return
        self._closing = True
        self._end_reason = reason
        self._wake.set()
        if self._thread is not None:
            self._thread.join(timeout_s)
            if self._thread.is_alive():
                self._fail(f"recording to {self.path}: the writer did not finish within {timeout_s:g} s "
                           "(disk blocked?); the file keeps what was synced")
                return
        if self.status == STATUS_RECORDING:
            self.status = STATUS_CLOSED

    @property
    def ok(self) -> bool:
        """True while recording works."""
        return self.status == STATUS_RECORDING

    @property
    def queued(self) -> int:
        """Records waiting to be written."""
        return len(self._queue)

    def __enter__(self) -> "Recorder":
        if self.status == STATUS_IDLE:
            self.start()
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    # ------------------------------------------------------------------ writer thread
    def _run(self) -> None:
        wait = self._wake.wait
        while True:
            wait(self.flush_interval_s)
            self._wake.clear()
            closing = self._closing
            if self.status != STATUS_RECORDING:
                break
            if self._queue and not self._write_batch():
                break
            if closing:
                self._write_end()
                break
        self._close_file()

    def _write_batch(self) -> bool:
        q = self._queue
        popleft = q.popleft
        parts: list[bytes] = []
        seq = self._seq
        n_ev = n_out = 0
        while True:
            try:
                item = popleft()
            except IndexError:
                break
            try:
                if type(item) is tuple:
                    _, t_s, kind, value = item
                    parts.append(frame(TYPE_OUTPUT, seq, output_body(t_s, kind, canonical_json(value))))
                    n_out += 1
                else:
                    parts.append(frame(TYPE_EVENT, seq, event_body(item.t_s, item.channel, item.payload)))
                    n_ev += 1
            except (RecordingError, UnicodeEncodeError, TypeError, ValueError, AttributeError,
                    struct.error) as exc:
                # A record that cannot be encoded is skipped (counted); the rest is kept.
                self.dropped += 1
                self._warn(f"recording: one record could not be encoded and was skipped ({exc})")
                continue
            seq += 1
        data = b"".join(parts)
        try:
            self._write_all(data)
            os.fsync(self._file.fileno())  # type: ignore[union-attr]
        except OSError as exc:
            self._fail(f"recording to {self.path} stopped: {_os_text(exc)}; "
                       f"the {self.events_written} events written before are kept; coaching goes on")
            self._truncate_partial()
            return False
        self._seq = seq
        self._good_offset += len(data)
        self.bytes_written += len(data)
        self.events_written += n_ev
        self.outputs_written += n_out
        self.syncs += 1
        self._progress_mono = time.monotonic()
        return True

    def _write_end(self) -> None:
        body = canonical_json({"events": self.events_written, "outputs": self.outputs_written,
                               "dropped": self.dropped, "reason": self._end_reason})
        data = frame(TYPE_END, self._seq, body)
        try:
            self._write_all(data)
            os.fsync(self._file.fileno())  # type: ignore[union-attr]
        except OSError as exc:
            self._fail(f"recording to {self.path}: the end record could not be written: {_os_text(exc)}")
            self._truncate_partial()
            return
        self._seq += 1
        self._good_offset += len(data)
        self.bytes_written += len(data)

    def _write_all(self, data: bytes) -> None:
        f = self._file
        view = memoryview(data)
        while view:
            n = f.write(view)  # type: ignore[union-attr]
            if n is None:      # non-blocking file with nothing written: treat as a stall
                raise OSError(errno.EAGAIN, "write would block")
            if n <= 0:
                raise OSError(errno.EIO, "write returned 0 bytes")
            view = view[n:]

    def _truncate_partial(self) -> None:
        """After a failed write, cut off a partly written record (best effort)."""
        try:
            os.ftruncate(self._file.fileno(), self._good_offset)  # type: ignore[union-attr]
            os.fsync(self._file.fileno())  # type: ignore[union-attr]
        except (OSError, AttributeError, ValueError):
            pass   # the reader skips a torn tail anyway

    def _close_file(self) -> None:
        f, self._file = self._file, None
        if f is not None:
            try:
                f.close()
            except OSError:
                pass

    # ------------------------------------------------------------------ failure
    def _stall(self) -> None:
        behind = len(self._queue)
        self._fail(f"recording to {self.path} stopped: the disk is not keeping up "
                   f"({behind} records waiting, no write finished for "
                   f"{time.monotonic() - self._progress_mono:.1f} s); coaching goes on")
        self._queue.clear()
        self.dropped += behind

    def _fail(self, message: str) -> None:
        if self.status == STATUS_FAILED:
            return
        self.status = STATUS_FAILED
        self.failure = message
        self._warn(message)
        self._wake.set()

    def _warn(self, message: str) -> None:
        self.warnings.append(message)
        if self._on_warning is not None:
            try:
                self._on_warning(message)
            except Exception:  # a broken callback must not stop the recorder or the loop
                pass


def _os_text(exc: OSError) -> str:
    if exc.errno == errno.ENOSPC:
        return "the disk is full (ENOSPC)"
    if exc.errno == errno.EROFS:
        return "the file system is read-only (EROFS)"
    if exc.errno == errno.EIO:
        return f"input/output error on the storage device (EIO): {exc.strerror or exc}"
    if exc.errno == errno.EDQUOT:
        return "disk quota exceeded (EDQUOT)"
    if exc.errno in (errno.EACCES, errno.EPERM):
        return f"permission denied ({exc.strerror or exc})"
    return f"{type(exc).__name__}: {exc}"


def _sync_dir(folder: Path) -> None:
    """fsync a folder so a new file's directory entry survives a power cut."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def recording_path(folder: str | Path, start_wall_time_unix_s: float, label: str = "ride") -> Path:
    """A new file name ``<label>-YYYYmmdd-HHMMSS[-n].lcrec`` (UTC) in ``folder`` that does not exist yet."""
    import datetime as _dt

    stamp = _dt.datetime.fromtimestamp(start_wall_time_unix_s, _dt.timezone.utc).strftime("%Y%m%d-%H%M%S")
    folder = Path(folder)
    candidate = folder / f"{label}-{stamp}{SUFFIX}"
    n = 1
    while candidate.exists():
        n += 1
        candidate = folder / f"{label}-{stamp}-{n}{SUFFIX}"
    return candidate
