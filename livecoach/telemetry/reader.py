"""Receive side: split a byte stream into frames, decode them, count losses.

Pure and deterministic: feed it bytes in any chunking, get frames and faults
back in order. Nothing here can raise on bad input; every bad packet becomes
a :class:`FrameFault` with the reason and is counted in :class:`ReceiveStats`.

Counting rules:

* ``lost``: sequence numbers never received intact, from the gaps between
  consecutive good frames (so a corrupted frame also counts as lost once the
  next good frame shows the gap);
* ``bad_cobs`` / ``bad_crc`` / ``bad_layout`` / ``oversize``: packets rejected
  for that reason (``corrupt`` is their sum);
* ``restarts``: the sequence jumped backwards (the module restarted), which
  is not counted as loss; ``duplicates``: the same number twice in a row;
* ``bytes_discarded``: bytes skipped after an oversize packet until the next delimiter.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

from livecoach.errors import FrameError
from livecoach.telemetry.cobs import cobs_decode
from livecoach.telemetry.frame import Frame, NoticeFrame, check_crc, parse_body

#: A packet longer than this (bytes, before its delimiter) is garbage.
MAX_PACKET_BYTES = 512


@dataclass(frozen=True, slots=True)
class FrameFault:
    """A rejected packet: ``kind`` in {"cobs", "crc", "layout", "oversize"}."""

    kind: str
    reason: str
    raw: bytes


@dataclass(slots=True)
class ReceiveStats:
    """Counters of one receiving session (see the module docstring)."""

    bytes_received: int = 0
    frames_ok: int = 0
    state_frames: int = 0
    notice_frames: int = 0
    lost: int = 0
    bad_cobs: int = 0
    bad_crc: int = 0
    bad_layout: int = 0
    oversize: int = 0
    restarts: int = 0
    duplicates: int = 0
    bytes_discarded: int = 0

    @property
    def corrupt(self) -> int:
        return self.bad_cobs + self.bad_crc + self.bad_layout + self.oversize

    def to_dict(self) -> dict[str, int]:
        out = asdict(self)
        out["corrupt"] = self.corrupt
        return out


class FrameReader:
    """Stream deframer: ``feed(bytes) -> [Frame | FrameFault, ...]``."""

    def __init__(self, max_packet_bytes: int = MAX_PACKET_BYTES) -> None:
        self.max_packet_bytes = max_packet_bytes
        self.stats = ReceiveStats()
        self.last_seq: int | None = None
        self._buf = bytearray()
        self._discarding = False

    def feed(self, data: bytes) -> list[Frame | FrameFault]:
        """Take received bytes; return the frames and faults completed by them."""
        return [item for item, _ in self.feed_raw(data)]

    def feed_raw(self, data: bytes) -> list[tuple[Frame | FrameFault, bytes]]:
        """As :meth:`feed`, with each item's packet bytes as received (without delimiter)."""
        self.stats.bytes_received += len(data)
        out: list[tuple[Frame | FrameFault, bytes]] = []
        start = 0
        while start < len(data):
            end = data.find(b"\x00", start)
            if end < 0:
                self._take(data[start:], out)
                break
            self._take(data[start:end], out)
            if self._discarding:
                self._discarding = False
            elif self._buf:
                packet = bytes(self._buf)
                out.append((self._packet(packet), packet))
            self._buf.clear()
            start = end + 1
        return out

    def resync(self) -> None:
        """Drop a partly received packet (after the port was lost and reopened)."""
        self._buf.clear()
        self._discarding = True

    def _take(self, chunk: bytes, out: list) -> None:
        if not chunk:
            return
        if self._discarding:
            self.stats.bytes_discarded += len(chunk)
            return
        self._buf += chunk
        if len(self._buf) > self.max_packet_bytes:
            self.stats.oversize += 1
            raw = bytes(self._buf)
            out.append((FrameFault("oversize", f"no delimiter within {self.max_packet_bytes} bytes",
                                   raw), raw))
            self._buf.clear()
            self._discarding = True

    def _packet(self, packet: bytes) -> Frame | FrameFault:
        try:
            raw = cobs_decode(packet)
        except FrameError as exc:
            self.stats.bad_cobs += 1
            return FrameFault("cobs", str(exc), packet)
        try:
            body = check_crc(raw)
        except FrameError as exc:
            self.stats.bad_crc += 1
            return FrameFault("crc", str(exc), packet)
        try:
            frame = parse_body(body)
        except FrameError as exc:
            self.stats.bad_layout += 1
            return FrameFault("layout", str(exc), packet)
        self._sequence(frame.seq)
        self.stats.frames_ok += 1
        if isinstance(frame, NoticeFrame):
            self.stats.notice_frames += 1
        else:
            self.stats.state_frames += 1
        return frame

    def _sequence(self, seq: int) -> None:
        last = self.last_seq
        self.last_seq = seq
        if last is None:
            return
        step = (seq - last) & 0xFFFF
        if step == 0:
            self.stats.duplicates += 1
        elif step < 0x8000:
            self.stats.lost += step - 1
        else:
            self.stats.restarts += 1
