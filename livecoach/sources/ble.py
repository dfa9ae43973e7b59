"""Bluetooth LE sensor source (bleak): power meter, wheel-speed sensor, heart-rate strap.

One :class:`BleSensorSource` per device. It connects **only** to its
configured address, and only if that address is on the allow-list built
from the ride file's ``[sensors]`` section: a device that merely advertises
the same name is never touched (the source never looks devices up by name,
and checks the address of the device it got before subscribing). After
connecting it subscribes to the measurement characteristic's notifications
and puts each notification value, exactly as received, on the queue as a
:class:`RawEvent` stamped with the injectable monotonic clock.

Link state goes on the ``link`` channel: ``up`` after subscribing, ``down``
when the device disconnects, ``reconnecting`` once per outage while it
retries. Retries back off (``backoff_s``: 0.5, 1, 2, 4, 8, then every 15 s)
and go on until the source is stopped, so a sensor that comes back in range
mid-run is picked up again. Every wait has a timeout.

The BLE stack is injectable: ``client_factory(address, disconnected_callback,
timeout)`` returns an object with ``address``, ``async connect()``,
``async start_notify(uuid, callback)`` and ``async disconnect()`` (default:
:class:`bleak.BleakClient`, optionally with a ``backend=``).

Safety: the rider must never need to touch the module to pair or reconnect
a sensor during a run; set the allow-list before the run.
"""

from __future__ import annotations

import asyncio
import time
from typing import Any, Callable, Iterable

from livecoach.errors import SourceError
from livecoach.sources.common import (
    LINK_DOWN,
    LINK_RECONNECTING,
    LINK_UP,
    Clock,
    QueueFeeder,
    link_event,
    normalize_address,
)
from livecoach.stream.events import CH_CSC, CH_HEART_RATE, CH_POWER, RawEvent


def _uuid16(n: int) -> str:
    """The 128-bit form of a Bluetooth SIG 16-bit UUID (Bluetooth Base UUID)."""
    return f"0000{n:04x}-0000-1000-8000-00805f9b34fb"


#: kind -> (channel, service UUID, measurement characteristic UUID); Bluetooth SIG Assigned Numbers.
SENSOR_KINDS: dict[str, tuple[str, str, str]] = {
    "power": (CH_POWER, _uuid16(0x1818), _uuid16(0x2A63)),
    "csc": (CH_CSC, _uuid16(0x1816), _uuid16(0x2A5B)),
    "heart_rate": (CH_HEART_RATE, _uuid16(0x180D), _uuid16(0x2A37)),
}

#: Waits between reconnect attempts, s; the last one repeats.
DEFAULT_BACKOFF_S = (0.5, 1.0, 2.0, 4.0, 8.0, 15.0)


def allow_list_from_sensors(sensors: Any) -> frozenset[str]:
    """The BLE addresses configured in a ``[sensors]`` section (normalised)."""
    addrs = (
        getattr(sensors, "power_address", ""),
        getattr(sensors, "speed_address", ""),
        getattr(sensors, "heart_rate_address", ""),
    )
    return frozenset(normalize_address(a) for a in addrs if a and a.strip())


def _default_client_factory(backend: Any = None) -> Callable[..., Any]:
    def make(address: str, disconnected_callback: Callable[[Any], None], timeout: float) -> Any:
        from bleak import BleakClient

        kw = {} if backend is None else {"backend": backend}
        return BleakClient(address, disconnected_callback=disconnected_callback, timeout=timeout, **kw)

    return make


class BleSensorSource:
    """Notifications of one allow-listed BLE sensor onto its channel (see module docstring).

    ``address``: the device's address; ``kind``: ``power``, ``csc`` or
    ``heart_rate``; ``allow_list``: addresses the module may connect to
    (the ride file's ``[sensors]``); ``clock``: monotonic clock, s.
    Raises :class:`SourceError` when ``address`` is not on the allow-list
    or ``kind`` is unknown.
    """

    def __init__(
        self,
        address: str,
        kind: str,
        *,
        allow_list: Iterable[str],
        clock: Clock = time.monotonic,
        client_factory: Callable[..., Any] | None = None,
        backend: Any = None,
        connect_timeout_s: float = 20.0,
        backoff_s: tuple[float, ...] = DEFAULT_BACKOFF_S,
    ) -> None:
        if kind not in SENSOR_KINDS:
            raise SourceError(f"BLE sensor kind '{kind}' is unknown (known: {', '.join(SENSOR_KINDS)})")
        allowed = frozenset(normalize_address(a) for a in allow_list)
        self.address = normalize_address(address)
        if not self.address or self.address not in allowed:
            raise SourceError(
                f"BLE address '{address}' is not in the ride file's [sensors] allow-list "
                f"({', '.join(sorted(allowed)) or 'empty'}); livecoach connects only to configured sensors"
            )
        self.kind = kind
        self.channel, self.service_uuid, self.char_uuid = SENSOR_KINDS[kind]
        self.clock = clock
        self._factory = client_factory or _default_client_factory(backend)
        self.connect_timeout_s = connect_timeout_s
        self.backoff_s = tuple(backoff_s) or DEFAULT_BACKOFF_S
        self._stop = asyncio.Event()
        self._lost: asyncio.Event | None = None
        self._client: Any = None
        self.feeder: QueueFeeder | None = None
        self.notifications = 0
        self.connects = 0
        self.failed_attempts = 0
        self.last_error: str | None = None

    def __repr__(self) -> str:
        return f"BleSensorSource({self.address!r}, {self.kind!r})"

    # --------------------------------------------------------------- callbacks
    def _on_notify(self, _characteristic: Any, data: bytearray) -> None:
        self.notifications += 1
        if self.feeder is not None:
            self.feeder.put(RawEvent(self.clock(), self.channel, bytes(data)))

    def _disconnect_callback(self, lost: asyncio.Event, loop: asyncio.AbstractEventLoop) -> Callable[[Any], None]:
        """A callback bound to one connection attempt, so a late callback of an
        old client cannot end a newer connection."""

        def on_disconnect(_client: Any) -> None:
            try:
                loop.call_soon_threadsafe(lost.set)
            except RuntimeError:  # loop closed
                pass

        return on_disconnect

    # ------------------------------------------------------------------- run
    async def run(self, queue: "asyncio.Queue[RawEvent]") -> None:
        """Connect, subscribe, and keep reconnecting until :meth:`stop`."""
        loop = asyncio.get_running_loop()
        self.feeder = QueueFeeder(queue, loop)
        attempt = 0
        announced = False
        try:
            while not self._stop.is_set():
                self._lost = asyncio.Event()
                ok = await self._connect_once()
                if not ok:
                    if not announced:
                        self.feeder.put(link_event(self.clock(), self.channel, LINK_RECONNECTING))
                        announced = True
                    wait_s = self.backoff_s[min(attempt, len(self.backoff_s) - 1)]
                    attempt += 1
                    await self._sleep_unless_stopped(wait_s)
                    continue
                attempt = 0
                announced = False
                self.connects += 1
                self.feeder.put(link_event(self.clock(), self.channel, LINK_UP))
                await self._wait_lost_or_stop()
                if self._stop.is_set():
                    break
                self.feeder.put(link_event(self.clock(), self.channel, LINK_DOWN))
                await self._close_client()
        finally:
            await self._close_client()

    async def stop(self) -> None:
        """Stop retrying and disconnect."""
        self._stop.set()

    # ---------------------------------------------------------------- helpers
    async def _connect_once(self) -> bool:
        from bleak.exc import BleakError

        try:
            lost = self._lost if self._lost is not None else asyncio.Event()
            callback = self._disconnect_callback(lost, asyncio.get_running_loop())
            client = self._factory(self.address, callback, self.connect_timeout_s)
        except (BleakError, OSError, ValueError) as exc:
            self._failed(f"cannot create a BLE client: {exc}")
            return False
        self._client = client
        try:
            await asyncio.wait_for(client.connect(), timeout=self.connect_timeout_s)
            got = normalize_address(str(getattr(client, "address", "")))
            if got != self.address:
                raise SourceError(f"connected to '{got}', not the configured '{self.address}'")
            await asyncio.wait_for(client.start_notify(self.char_uuid, self._on_notify),
                                   timeout=self.connect_timeout_s)
        except (BleakError, OSError, EOFError, asyncio.TimeoutError, SourceError) as exc:
            self._failed(f"{type(exc).__name__}: {exc}")
            await self._close_client()
            return False
        return True

    def _failed(self, reason: str) -> None:
        self.failed_attempts += 1
        self.last_error = f"{self.kind} sensor {self.address}: {reason}"

    async def _close_client(self) -> None:
        client, self._client = self._client, None
        if client is None:
            return
        from bleak.exc import BleakError

        try:
            await asyncio.wait_for(client.disconnect(), timeout=5.0)
        except (BleakError, OSError, EOFError, asyncio.TimeoutError):
            pass

    async def _sleep_unless_stopped(self, wait_s: float) -> None:
        try:
            await asyncio.wait_for(self._stop.wait(), timeout=wait_s)
        except asyncio.TimeoutError:
            pass

    async def _wait_lost_or_stop(self) -> None:
        lost = self._lost
        waits = [asyncio.ensure_future(self._stop.wait())]
        if lost is not None:
            waits.append(asyncio.ensure_future(lost.wait()))
        try:
            await asyncio.wait(waits, return_when=asyncio.FIRST_COMPLETED)
        finally:
            for w in waits:
                w.cancel()


def ble_sources_from_sensors(sensors: Any, **kwargs: Any) -> list[BleSensorSource]:
    """One source per BLE address configured in ``[sensors]`` (power, speed, heart rate)."""
    allow = allow_list_from_sensors(sensors)
    out = []
    for attr, kind in (("power_address", "power"), ("speed_address", "csc"), ("heart_rate_address", "heart_rate")):
        addr = getattr(sensors, attr, "")
        if addr and addr.strip():
            out.append(BleSensorSource(addr, kind, allow_list=allow, **kwargs))
    return out


__all__ = [
    "BleSensorSource",
    "DEFAULT_BACKOFF_S",
    "SENSOR_KINDS",
    "allow_list_from_sensors",
    "ble_sources_from_sensors",
]
