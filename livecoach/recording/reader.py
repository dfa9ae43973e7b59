"""Read LCREC recordings (format: :mod:`livecoach.recording.format`).

:class:`RecordingReader` opens a file, checks the signature and the header
(raising :class:`livecoach.errors.RecordingError` with the file name and byte
offset when it is not a recording), and iterates its records: the raw events
as :class:`livecoach.stream.events.RawEvent` and the stored outputs as
:class:`OutputRecord`.

Damage never stops a replay unless asked (``strict=True``): a damaged frame
is skipped by resynchronising on the next good frame, and a torn last record
(an interrupted write) is skipped; each case adds a warning with the byte
range and the number of records lost to :attr:`RecordingReader.warnings`.

The file is read in 1 MiB chunks, so memory stays flat for any file size.
"""

from __future__ import annotations

import json
import zlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

from livecoach.errors import RecordingError
from livecoach.recording.format import (
    F64,
    FRAME_HEAD,
    FRAME_OVERHEAD,
    MAGIC,
    MAX_HEADER_BODY,
    MAX_RECORD_BODY,
    RECORD_TYPES,
    SYNC,
    TYPE_END,
    TYPE_EVENT,
    TYPE_HEADER,
    TYPE_OUTPUT,
    U32,
    RecordingHeader,
)
from livecoach.stream.builders import positional_builder
from livecoach.stream.events import RawEvent

_CHUNK = 1 << 20
_KEEP = FRAME_OVERHEAD + MAX_RECORD_BODY   # a whole frame is in the buffer unless at end of file
_MAX_LISTED_DAMAGE = 20
_raw_event = positional_builder(RawEvent)   # RawEvent(t_s, channel, payload), by position


@dataclass(frozen=True, slots=True)
class OutputRecord:
    """A stored pipeline output: ``kind`` (e.g. "notice", "state") at ``t_s`` (s).

    ``value_json`` is the canonical JSON text as written; :attr:`value` parses it.
    """

    t_s: float
    kind: str
    value_json: bytes

    @property
    def value(self) -> Any:
        return json.loads(self.value_json)


@dataclass(frozen=True, slots=True)
class EndRecord:
    """The record a clean close writes: counts and the reason the recording ended."""

    events: int
    outputs: int
    dropped: int
    reason: str


def is_recording(path: str | Path) -> bool:
    """True if the file starts with the LCREC signature (any version)."""
    try:
        with open(path, "rb") as f:
            return f.read(5) == MAGIC[:5]
    except OSError:
        return False


class RecordingReader:
    """Open a recording and read its header; iterate with :meth:`records` or :meth:`events`.

    ``strict``: raise :class:`RecordingError` at the first damaged record
    instead of skipping it. After a full pass, :attr:`warnings` lists every
    problem found and :attr:`stats` counts events, outputs, damaged bytes and
    records lost; :attr:`end` is the end record (None if the recording was
    not closed cleanly, e.g. after a power cut).
    """

    def __init__(self, path: str | Path, *, strict: bool = False) -> None:
        self.path = Path(path)
        self.strict = strict
        self.warnings: list[str] = []
        self.stats: dict[str, int] = {}
        self.end: EndRecord | None = None
        self.header, self._data_offset = self._read_header()

    # ------------------------------------------------------------------ header
    def _read_header(self) -> tuple[RecordingHeader, int]:
        where = str(self.path)
        if not self.path.exists():
            raise RecordingError(f"recording '{where}' not found")
        if self.path.is_dir():
            raise RecordingError(f"'{where}' is a folder, not a recording")
        try:
            with open(self.path, "rb") as f:
                sig = f.read(len(MAGIC))
                if len(sig) == 0:
                    raise RecordingError(f"{where}: the file is empty; it is not a recording")
                if sig != MAGIC:
                    if sig[:5] == MAGIC[:5] and len(sig) == len(MAGIC):
                        raise RecordingError(
                            f"{where}: recording format {sig[5:7].decode('ascii', 'replace')!r} "
                            f"is not supported (this livecoach reads format 01)"
                        )
                    raise RecordingError(
                        f"{where}: not a livecoach recording (it starts with {sig[:8]!r}, "
                        f"a recording starts with {MAGIC!r})"
                    )
                head = f.read(FRAME_HEAD.size)
                if len(head) < FRAME_HEAD.size:
                    raise RecordingError(
                        f"{where}: the header record is incomplete (the file ends at byte "
                        f"{len(MAGIC) + len(head)}); the recording was cut off as it started"
                    )
                sync, rtype, flags, n, seq = FRAME_HEAD.unpack(head)
                if sync != SYNC or rtype != TYPE_HEADER or flags != 0 or seq != 0:
                    raise RecordingError(
                        f"{where}: bad header record at byte {len(MAGIC)} (sync {sync!r}, "
                        f"type 0x{rtype:02x}, flags {flags}, sequence {seq})"
                    )
                if n > MAX_HEADER_BODY:
                    raise RecordingError(
                        f"{where}: header record at byte {len(MAGIC)} claims {n} bytes, "
                        f"more than the limit of {MAX_HEADER_BODY}"
                    )
                rest = f.read(n + 4)
        except OSError as exc:
            raise RecordingError(f"{where}: cannot be read: {exc}") from None
        if len(rest) < n + 4:
            raise RecordingError(
                f"{where}: the header record is incomplete ({len(rest)} of {n + 4} bytes); "
                "the recording was cut off as it started"
            )
        body = rest[:n]
        crc = U32.unpack_from(rest, n)[0]
        if zlib.crc32(body, zlib.crc32(head[2:])) != crc:
            raise RecordingError(f"{where}: the header record (byte {len(MAGIC)}) fails its CRC-32 check")
        header = RecordingHeader.from_json(body, where)
        return header, len(MAGIC) + FRAME_HEAD.size + n + 4

    # ------------------------------------------------------------------ records
    def events(self) -> Iterator[RawEvent]:
        """The raw events, in recorded order (outputs and the end record skipped)."""
        return self._iterate(events_only=True)

    def outputs(self) -> list[OutputRecord]:
        """All stored outputs (a full pass over the file)."""
        return [r for r in self.records() if type(r) is OutputRecord]

    def records(self) -> Iterator[RawEvent | OutputRecord | EndRecord]:
        """Every record after the header, in file order. Each call reads the file anew
        and resets :attr:`warnings`, :attr:`stats` and :attr:`end`."""
        return self._iterate(events_only=False)

    def _iterate(self, events_only: bool) -> Iterator[RawEvent | OutputRecord | EndRecord]:
        self.warnings = []
        self.end = None
        stats = {"events": 0, "outputs": 0, "damaged_regions": 0, "damaged_bytes": 0,
                 "records_lost": 0, "duplicates_skipped": 0}
        self.stats = stats
        where = str(self.path)
        unpack_head = FRAME_HEAD.unpack_from
        unpack_f64 = F64.unpack_from
        unpack_u32 = U32.unpack_from
        crc32 = zlib.crc32
        keep, overhead, max_body, sync_bytes = _KEEP, FRAME_OVERHEAD, MAX_RECORD_BODY, SYNC
        t_event, t_output, t_end = TYPE_EVENT, TYPE_OUTPUT, TYPE_END
        channels: dict[bytes, str] = {}
        raw_event = _raw_event
        n_events = 0
        n_outputs = 0

        try:
            f = open(self.path, "rb")
        except OSError as exc:
            raise RecordingError(f"{where}: cannot be read: {exc}") from None
        with f:
            f.seek(self._data_offset)
            buf = b""
            base = self._data_offset        # file offset of buf[0]
            pos = 0
            eof = False
            expected = 1                    # next sequence number
            damage_at: int | None = None    # file offset where the current damage began
            damage_reason = ""
            while True:
                if not eof and len(buf) - pos < keep:
                    try:
                        chunk = f.read(_CHUNK)
                    except OSError as exc:
                        raise RecordingError(f"{where}: read error at byte {base + len(buf)}: {exc}") from None
                    buf = buf[pos:] + chunk
                    base += pos
                    pos = 0
                    if not chunk:
                        eof = True
                    continue
                blen = len(buf)
                if pos >= blen:
                    break
                # ---- validate the frame at pos (fast path first)
                reason = ""
                if blen - pos >= overhead:
                    sync, rtype, flags, n, seq = unpack_head(buf, pos)
                    end = pos + 12 + n
                    if not (sync == sync_bytes and flags == 0 and end + 4 <= blen
                            and (rtype == t_event or rtype == t_output or rtype == t_end)
                            and n <= max_body
                            and crc32(buf[pos + 2:end]) == unpack_u32(buf, end)[0]):
                        reason = _frame_problem(buf, pos)
                    elif damage_at is not None and ((seq - expected) & 0xFFFFFFFF) >= 0x80000000:
                        reason = "stale frame (sequence number not after the last good record)"
                else:
                    reason = f"incomplete record ({blen - pos} bytes before the end of the file)"
                if reason:
                    if damage_at is None:
                        damage_at = base + pos
                        damage_reason = reason
                        if self.strict:
                            raise RecordingError(f"{where}: damaged record at byte {damage_at}: {reason}")
                    nxt = buf.find(sync_bytes, pos + 1)
                    if nxt >= 0:
                        pos = nxt
                    elif eof:
                        pos = blen
                    else:
                        pos = max(pos + 1, blen - 1)   # keep a last byte that may begin SYNC
                    continue
                # ---- a good frame
                if damage_at is not None:
                    lost = (seq - expected) & 0xFFFFFFFF
                    self._damage(where, damage_at, base + pos, damage_reason, lost, tail=False)
                    stats["records_lost"] += lost
                    expected = seq
                    damage_at = None
                if seq != expected:
                    gap = (seq - expected) & 0xFFFFFFFF
                    if gap >= 0x80000000:
                        stats["duplicates_skipped"] += 1
                        pos = end + 4
                        continue
                    self.warnings.append(
                        f"{where}: {gap} record(s) missing before byte {base + pos} "
                        f"(sequence jumps from {expected} to {seq})"
                    )
                    stats["records_lost"] += gap
                expected = (seq + 1) & 0xFFFFFFFF
                nxt_pos = end + 4
                if rtype == t_event:
                    k = buf[pos + 20]
                    name = buf[pos + 21:pos + 21 + k]
                    ch = channels.get(name)
                    if ch is None:
                        ch = channels[name] = name.decode("ascii", "replace")
                    n_events += 1
                    yield raw_event(unpack_f64(buf, pos + 12)[0], ch, buf[pos + 21 + k:end])
                elif rtype == t_output:
                    k = buf[pos + 20]
                    n_outputs += 1
                    if not events_only:
                            yield OutputRecord(unpack_f64(buf, pos + 12)[0],
                                           buf[pos + 21:pos + 21 + k].decode("ascii", "replace"),
                                           buf[pos + 21 + k:end])
                else:  # TYPE_END
                    self.end = _parse_end(buf[pos + 12:end])
                    if not events_only:
                        yield self.end
                pos = nxt_pos
            if damage_at is not None:
                self._damage(where, damage_at, base + len(buf), damage_reason, None, tail=True)
        if stats["duplicates_skipped"]:
            self.warnings.append(f"{where}: {stats['duplicates_skipped']} repeated record(s) skipped")
        stats["events"] = n_events
        stats["outputs"] = n_outputs
        if self.end is None:
            self.warnings.append(
                f"{where}: no end record: the recording was not closed cleanly "
                "(power cut, crash or kill); everything before the damage above, if any, was read"
            )
        else:
            if self.end.dropped:
                self.warnings.append(
                    f"{where}: the recorder dropped {self.end.dropped} record(s) ({self.end.reason})"
                )
            elif self.end.reason != "closed":
                self.warnings.append(f"{where}: recording ended early: {self.end.reason}")

    def _damage(self, where: str, start: int, stop: int, reason: str, lost: int | None,
                tail: bool) -> None:
        self.stats["damaged_regions"] += 1
        self.stats["damaged_bytes"] += stop - start
        if self.stats["damaged_regions"] > _MAX_LISTED_DAMAGE:
            if self.stats["damaged_regions"] == _MAX_LISTED_DAMAGE + 1:
                self.warnings.append(f"{where}: more damaged regions follow (not listed one by one)")
            return
        if tail:
            self.warnings.append(
                f"{where}: torn or unreadable tail skipped: bytes {start}..{stop} "
                f"({stop - start} bytes; {reason}); the records before it were read"
            )
        else:
            self.warnings.append(
                f"{where}: damaged data skipped: bytes {start}..{stop} ({stop - start} bytes; "
                f"{reason}); {lost} record(s) lost; reading resumed at the next good record"
            )

    # ------------------------------------------------------------------ context
    def __enter__(self) -> "RecordingReader":
        return self

    def __exit__(self, *exc: Any) -> None:
        return None


def _frame_problem(buf: bytes, pos: int) -> str:
    """Why the frame at ``buf[pos:]`` is not good (at least 16 bytes are there)."""
    sync, rtype, flags, n, _seq = FRAME_HEAD.unpack_from(buf, pos)
    end = pos + 12 + n
    if sync != SYNC:
        return "no record starts here (bad sync bytes)"
    if rtype not in RECORD_TYPES or rtype == TYPE_HEADER:
        return f"unknown record type 0x{rtype:02x}"
    if flags != 0:
        return f"unknown flags 0x{flags:02x}"
    if n > MAX_RECORD_BODY:
        return f"record length {n} exceeds {MAX_RECORD_BODY}"
    if end + 4 > len(buf):
        return f"incomplete record ({len(buf) - pos} of {n + FRAME_OVERHEAD} bytes before the end of the file)"
    return "CRC-32 mismatch"


def _parse_end(body: bytes) -> EndRecord:
    try:
        obj = json.loads(body.decode("utf-8"))
        return EndRecord(int(obj.get("events", 0)), int(obj.get("outputs", 0)),
                         int(obj.get("dropped", 0)), str(obj.get("reason", "")))
    except (UnicodeDecodeError, ValueError, AttributeError, TypeError):
        return EndRecord(0, 0, 0, "end record unreadable")


def read_recording(path: str | Path, *, strict: bool = False
                   ) -> tuple[RecordingHeader, list[RawEvent], list[str]]:
    """Header, all raw events and the reader's warnings, in one call."""
    reader = RecordingReader(path, strict=strict)
    events = list(reader.events())
    return reader.header, events, list(reader.warnings)
