"""A bench rig for fault-injection tests through the live loop (shared by tests/test_live_faults*.py).

The simulator makes the sensors' payloads (the same bytes the hardware
sends: Bluetooth SIG GATT notifications, NMEA sentences, lsl1 lines, checked
against the standards in tests/test_codec_* and tests/test_sim_sensors.py);
the rig delivers them through the *real* transports the module reads:

* BLE: bleak's own ``BleakClient`` front end with a test backend (a subclass
  of bleak's ``BaseBleakClient``: the pattern of tests/test_sources_ble.py),
  read by :class:`livecoach.sources.ble.BleSensorSource`;
* serial: pseudo-terminals (``os.openpty``) behind a symlink, read with
  pyserial by :class:`livecoach.sources.serial_line.SerialLineSource`;
  unplugging closes the master and removes the link, plugging makes a new
  pty (as a USB-serial adapter does);

at an accelerated pace: every clock in the module (sources and loop) is
``origin + speed * (monotonic - t0)``, so receive times follow simulated
time. Faults are scheduled at simulated times.
"""

from __future__ import annotations

import asyncio
import os
import threading
import time
import tomllib
import tty
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from bleak.backends.characteristic import BleakGATTCharacteristic
from bleak.backends.client import BaseBleakClient
from bleak.backends.service import BleakGATTService, BleakGATTServiceCollection
from bleak.exc import BleakDeviceNotFoundError

from livecoach.cli.commands.init import example_ride_text
from livecoach.config.ridefile import parse_ride_dict
from livecoach.sources.ble import SENSOR_KINDS
from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_LINK, CH_MCU, CH_POWER, CH_TICK

POWER_ADDRESS = "C4:7A:11:00:01:01"
CSC_ADDRESS = "C4:7A:11:00:01:02"


def example_ride(extra_toml: str = "", **sensors: str):
    """The example ride file with ``[sensors]`` keys replaced and TOML appended."""
    text = example_ride_text()
    for key, value in sensors.items():
        text = text.replace(f'{key} = ""', f'{key} = "{value}"')
    return parse_ride_dict(tomllib.loads(text + extra_toml), "rig ride file")


# ----------------------------------------------------------------------- BLE
class Peripheral:
    """One BLE sensor in range (or not) of the module."""

    def __init__(self, address: str, kind: str) -> None:
        self.address = address
        self.kind = kind
        self.in_range = True
        self.client: "RigClient | None" = None
        self.callbacks: list[Any] = []

    def notify(self, payload: bytes) -> bool:
        """Send a notification; False when nobody is subscribed (lost, as on air)."""
        for cb in list(self.callbacks):
            cb(bytearray(payload))
        return bool(self.callbacks)

    def drop(self) -> None:
        """The link is lost: the stack calls the client's disconnect callback."""
        self.in_range = False
        client, self.client = self.client, None
        self.callbacks.clear()
        if client is not None:
            client.connected = False
            if client._disconnected_callback is not None:
                client._disconnected_callback()


RADIO: dict[str, Peripheral] = {}


class RigClient(BaseBleakClient):
    """Test backend for bleak's front end: the part of a client backend the source uses.

    The peripherals in range come from :meth:`devices` (the rig's ``RADIO``);
    tests/test_sources_ble.py subclasses it with a radio of its own.
    """

    def __init__(self, address_or_ble_device: Any, **kwargs: Any) -> None:
        super().__init__(address_or_ble_device, **kwargs)
        self.connected = False

    def devices(self) -> dict[str, Any]:
        """Address -> peripheral of the radio this client talks through."""
        return RADIO

    @property
    def mtu_size(self) -> int:
        return 23

    @property
    def name(self) -> str:
        return self.devices()[self.address].kind

    @property
    def is_connected(self) -> bool:
        return self.connected

    async def connect(self, pair: bool, **kwargs: Any) -> None:
        await asyncio.sleep(0)
        dev = self.devices().get(self.address)
        if dev is None or not dev.in_range:
            raise BleakDeviceNotFoundError(self.address, f"Device with address {self.address} was not found.")
        _ch, service_uuid, char_uuid = SENSOR_KINDS[dev.kind]
        services = BleakGATTServiceCollection()
        svc = BleakGATTService(None, 10, service_uuid)
        services.add_service(svc)
        services.add_characteristic(BleakGATTCharacteristic(None, 11, char_uuid, ["notify"], lambda: 20, svc))
        self.services = services
        self.connected = True
        dev.client = self

    async def disconnect(self) -> None:
        dev = self.devices().get(self.address)
        if dev is not None and dev.client is self:
            dev.client = None
            dev.callbacks.clear()
        self.connected = False

    async def start_notify(self, characteristic: BleakGATTCharacteristic, callback: Any, **kwargs: Any) -> None:
        self.devices()[self.address].callbacks.append(callback)

    async def stop_notify(self, characteristic: BleakGATTCharacteristic) -> None:
        self.devices()[self.address].callbacks.clear()

    async def pair(self, *args: Any, **kwargs: Any) -> None:
        raise NotImplementedError

    async def unpair(self) -> None:
        raise NotImplementedError

    async def read_gatt_char(self, characteristic: Any, **kwargs: Any) -> bytearray:
        raise NotImplementedError

    async def read_gatt_descriptor(self, descriptor: Any, **kwargs: Any) -> bytearray:
        raise NotImplementedError

    async def write_gatt_char(self, characteristic: Any, data: Any, response: bool) -> None:
        raise NotImplementedError

    async def write_gatt_descriptor(self, descriptor: Any, data: Any) -> None:
        raise NotImplementedError


# ----------------------------------------------------------------------- serial
class PtyDevice:
    """A serial device behind a symlink (like a udev name): plug, write, unplug."""

    def __init__(self, link: Path) -> None:
        self.link = str(link)
        self.master: int | None = None

    def plug(self) -> None:
        master, slave = os.openpty()
        tty.setraw(slave)
        name = os.ttyname(slave)
        os.close(slave)
        os.set_blocking(master, False)
        if os.path.lexists(self.link):
            os.unlink(self.link)
        os.symlink(name, self.link)
        self.master = master

    @property
    def plugged(self) -> bool:
        return self.master is not None

    def write(self, data: bytes) -> bool:
        """Write bytes; False when unplugged or nobody reads (lost, as on a real line)."""
        if self.master is None:
            return False
        try:
            return os.write(self.master, data) == len(data)
        except (BlockingIOError, OSError):
            return False

    def unplug(self) -> None:
        if self.master is not None:
            os.close(self.master)
            self.master = None
        if os.path.lexists(self.link):
            os.unlink(self.link)


# ----------------------------------------------------------------------- sinks
@dataclass
class Collector:
    """A sink keeping every state and notice (plus the wall time of each state)."""

    states: list[Any] = field(default_factory=list)
    notices: list[Any] = field(default_factory=list)

    def on_state(self, st: Any) -> None:
        self.states.append(st)

    def on_notice(self, n: Any) -> None:
        self.notices.append(n)

    def texts(self, kind: str | None = None) -> list[str]:
        return [n.text for n in self.notices if kind is None or n.kind == kind]

    def between(self, t0: float, t1: float) -> list[Any]:
        return [s for s in self.states if t0 <= s.t_s < t1]


class RigClock:
    """The module's clock on the bench: the simulated time of the latest payload the
    rig delivered (it starts at ``origin_s``). Sources stamp receive times with it
    and the loop's ticks carry it, so receive times follow simulated time; a pause
    of the whole machine pauses it too, so a busy test machine cannot fake a gap."""

    def __init__(self, speed: float, origin_s: float = 0.0) -> None:
        self.speed = speed
        self.now = origin_s
        self.origin_s = origin_s
        self._wall = time.monotonic()

    def __call__(self) -> float:
        return self.now

    def pace(self, t_s: float) -> None:
        """Sleep until simulated time ``t_s`` is due at ``speed`` x real time, then read ``t_s``.

        A rig that wakes late does not catch up in a burst (which would crowd
        seconds of payloads into one instant): it goes on from where it is."""
        due = self._wall + (t_s - self.now) / self.speed
        wait = due - time.monotonic()
        if wait > 0:
            time.sleep(wait)
            self._wall = due
        else:
            self._wall = time.monotonic()
        self.now = t_s


# ----------------------------------------------------------------------- driver
@dataclass
class Delivery:
    """Counts of what the rig delivered and lost per channel."""

    sent: dict[str, int] = field(default_factory=dict)
    lost: dict[str, int] = field(default_factory=dict)

    def count(self, channel: str, ok: bool) -> None:
        d = self.sent if ok else self.lost
        d[channel] = d.get(channel, 0) + 1


class Rig:
    """Plays simulated sensor payloads through BLE and pty transports into a live loop.

    Runs in its own thread, so its pacing does not depend on how busy the
    loop is: serial bytes are written from that thread (as a device would);
    BLE notifications and link changes are handed to the asyncio loop's
    thread (as bleak calls its callbacks there). ``events``: the simulator's
    events (receive order); ``gps``/``mcu``: PtyDevices (None: that channel
    is not delivered); ``actions``: (sim time s, callable(rig)) run once when
    the simulation reaches that time (faults); an action named ``*_ble`` in
    ``ble_actions`` runs in the loop's thread.
    """

    def __init__(self, events: Any, clock: RigClock, *, gps: PtyDevice | None = None,
                 mcu: PtyDevice | None = None, actions: list[tuple[float, Callable[[], Any]]] | None = None,
                 until_s: float = 60.0) -> None:
        self.events = events
        self.clock = clock
        self.gps = gps
        self.mcu = mcu
        self.actions = sorted(actions or [], key=lambda a: a[0])
        self.until_s = until_s
        self.delivery = Delivery()
        self.loop: asyncio.AbstractEventLoop | None = None
        self.error: BaseException | None = None
        self._done = threading.Event()

    def in_loop(self, fn: Callable[[], Any]) -> None:
        """Run ``fn`` in the asyncio loop's thread (BLE stack callbacks live there)."""
        self.loop.call_soon_threadsafe(fn)

    def _notify(self, address: str, payload: bytes, channel: str) -> None:
        dev = RADIO.get(address)
        self.delivery.count(channel, dev is not None and dev.notify(payload))

    def _deliver(self, ev: Any) -> None:
        ch = ev.channel
        if ch == CH_POWER:
            self.in_loop(lambda p=ev.payload: self._notify(POWER_ADDRESS, p, CH_POWER))
        elif ch == CH_CSC:
            self.in_loop(lambda p=ev.payload: self._notify(CSC_ADDRESS, p, CH_CSC))
        elif ch == CH_GPS and self.gps is not None:
            self.delivery.count(ch, self.gps.write(ev.payload + b"\r\n"))
        elif ch == CH_MCU and self.mcu is not None:
            self.delivery.count(ch, self.mcu.write(ev.payload + b"\n"))
        # ticks and simulated link events: the loop and the sources make their own

    def _run(self) -> None:
        k = 0
        try:
            for ev in self.events:
                if ev.t_s > self.until_s:
                    break
                while k < len(self.actions) and self.actions[k][0] <= ev.t_s:
                    self.actions[k][1]()
                    k += 1
                if ev.channel in (CH_TICK, CH_LINK, CH_HEART_RATE):
                    continue
                if ev.t_s > self.clock.now:
                    self.clock.pace(ev.t_s)
                self._deliver(ev)
            self.clock.pace(self.until_s)
        except BaseException as exc:      # reported by the test
            self.error = exc
        finally:
            self._done.set()

    async def run(self) -> None:
        """Start the rig thread and wait for it to finish."""
        self.loop = asyncio.get_running_loop()
        thread = threading.Thread(target=self._run, name="rig", daemon=True)
        thread.start()
        while not self._done.is_set():
            await asyncio.sleep(0.02)
        thread.join(5.0)
        if self.error is not None:
            raise self.error


async def wait_until(cond: Callable[[], bool], timeout_s: float = 10.0, step_s: float = 0.01) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if cond():
            return True
        await asyncio.sleep(step_s)
    return cond()
