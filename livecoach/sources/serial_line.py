"""Serial line sources (pyserial): the NMEA GPS and the sensor microcontroller.

A reader thread opens the port, reads bytes, cuts them into lines at LF
(dropping the LF and a CR before it) and hands each line, exactly as
received (non-UTF-8 bytes included), to the asyncio queue as a
:class:`RawEvent` stamped with the injectable monotonic clock at the moment
the line was complete. When the device disappears (a USB-serial adapter
unplugged, a read error) the source reports the link ``down``, keeps trying
to reopen the port every ``reconnect_s`` seconds (``reconnecting``) and
reports ``up`` when it is back; a line cut short by the unplug is dropped
and counted.

Safety: route serial and power cables inside the shell away from the chain,
wheels and the rider's controls, and fuse the supply (see hardware_notes/).
"""

from __future__ import annotations

import asyncio
import threading
import time
from typing import Any, Callable

from livecoach.sources.common import LINK_DOWN, LINK_RECONNECTING, LINK_UP, Clock, QueueFeeder, link_event
from livecoach.stream.events import CH_GPS, CH_MCU, RawEvent


class SerialLineSource:
    """Lines from a serial port onto ``channel``.

    ``port``: device path (e.g. ``/dev/ttyUSB0`` or a udev symlink);
    ``baud``: baud rate; ``clock``: monotonic clock, s; ``reconnect_s``: wait
    between reopen attempts, s; ``read_timeout_s``: read poll interval, s;
    ``max_line_bytes``: a longer run without LF is emitted as one (garbage)
    line so the decoder can reject it; ``serial_factory``: callable
    ``(port, baud, timeout) -> serial-like`` (default ``serial.Serial``).
    """

    def __init__(
        self,
        port: str,
        baud: int,
        channel: str,
        *,
        clock: Clock = time.monotonic,
        reconnect_s: float = 1.0,
        read_timeout_s: float = 0.05,
        max_line_bytes: int = 4096,
        serial_factory: Callable[..., Any] | None = None,
    ) -> None:
        self.port = port
        self.baud = baud
        self.channel = channel
        self.clock = clock
        self.reconnect_s = reconnect_s
        self.read_timeout_s = read_timeout_s
        self.max_line_bytes = max_line_bytes
        self._factory = serial_factory
        self._stop = threading.Event()
        self.lines = 0
        self.partial_lines_dropped = 0
        self.overlong_lines = 0
        self.reconnects = 0
        self.last_error: str | None = None
        self.feeder: QueueFeeder | None = None

    def __repr__(self) -> str:
        return f"SerialLineSource({self.port!r}, {self.baud}, {self.channel!r})"

    # ---------------------------------------------------------------- asyncio
    async def run(self, queue: "asyncio.Queue[RawEvent]") -> None:
        """Read until :meth:`stop` is called or the task is cancelled."""
        loop = asyncio.get_running_loop()
        self.feeder = QueueFeeder(queue, loop)
        self._stop.clear()
        finished = asyncio.Event()

        def reader() -> None:
            try:
                self._read_loop()
            finally:
                try:
                    loop.call_soon_threadsafe(finished.set)
                except RuntimeError:
                    pass

        thread = threading.Thread(target=reader, name=f"serial {self.port}", daemon=True)
        thread.start()
        try:
            await finished.wait()
        finally:
            self._stop.set()
            await asyncio.get_running_loop().run_in_executor(None, thread.join, 5.0)

    async def stop(self) -> None:
        """Ask the reader to finish (it closes the port within ``read_timeout_s``)."""
        self._stop.set()

    # ---------------------------------------------------------------- thread
    def _open(self) -> Any:
        if self._factory is not None:
            return self._factory(self.port, self.baud, self.read_timeout_s)
        import serial

        return serial.Serial(self.port, self.baud, timeout=self.read_timeout_s)

    def _emit(self, event: RawEvent) -> None:
        if self.feeder is not None and not self.feeder.put_threadsafe(event):
            self._stop.set()

    def _read_loop(self) -> None:
        import serial

        errors = (serial.SerialException, OSError, ValueError)
        announced = False  # "reconnecting" already said for this outage
        while not self._stop.is_set():
            try:
                port = self._open()
            except errors as exc:
                self.last_error = f"cannot open {self.port}: {exc}"
                if not announced:
                    self._emit(link_event(self.clock(), self.channel, LINK_RECONNECTING))
                    announced = True
                self._stop.wait(self.reconnect_s)
                continue
            if announced:
                self.reconnects += 1
            announced = False
            self._emit(link_event(self.clock(), self.channel, LINK_UP))
            try:
                self._read_lines(port, errors)
            finally:
                try:
                    port.close()
                except errors:
                    pass
            if not self._stop.is_set():
                self._emit(link_event(self.clock(), self.channel, LINK_DOWN))

    def _read_lines(self, port: Any, errors: tuple[type[BaseException], ...]) -> None:
        buf = bytearray()
        while not self._stop.is_set():
            try:
                waiting = port.in_waiting
                chunk = port.read(waiting if waiting > 0 else 1)
            except errors as exc:
                self.last_error = f"{self.port}: {exc}"
                if buf:
                    self.partial_lines_dropped += 1
                return
            if not chunk:
                continue
            t_s = self.clock()
            buf += chunk
            start = 0
            while True:
                nl = buf.find(b"\n", start)
                if nl < 0:
                    break
                end = nl - 1 if nl > start and buf[nl - 1] == 0x0D else nl
                if end > start:
                    self.lines += 1
                    self._emit(RawEvent(t_s, self.channel, bytes(buf[start:end])))
                start = nl + 1
            if start:
                del buf[:start]
            if len(buf) > self.max_line_bytes:
                self.overlong_lines += 1
                self._emit(RawEvent(t_s, self.channel, bytes(buf[: self.max_line_bytes])))
                del buf[:]


def gps_source(port: str, baud: int = 9600, **kwargs: Any) -> SerialLineSource:
    """The NMEA 0183 GPS receiver on ``port`` (lines on :data:`CH_GPS`)."""
    return SerialLineSource(port, baud, CH_GPS, **kwargs)


def mcu_source(port: str, baud: int = 115200, **kwargs: Any) -> SerialLineSource:
    """The sensor microcontroller speaking lsl1 on ``port`` (lines on :data:`CH_MCU`)."""
    return SerialLineSource(port, baud, CH_MCU, **kwargs)


__all__ = ["SerialLineSource", "gps_source", "mcu_source"]
