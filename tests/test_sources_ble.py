"""The BLE source through bleak's real front end (``BleakClient``/``BleakScanner``)
with a test backend standing in for the radio: a subclass of bleak's own
``BaseBleakClient``/``BaseBleakScanner`` implementing connect, start_notify,
disconnect and the disconnect callback, fed with payloads from the project's
encoders (checked against Bluetooth SIG byte layouts in tests/test_codec_*).
Service and characteristic UUIDs: Bluetooth SIG Assigned Numbers.
"""

from __future__ import annotations

import asyncio
import tomllib
from typing import Any

import pytest
from bleak.backends.scanner import AdvertisementData, BaseBleakScanner

from livecoach.cli.commands.init import example_ride_text
from livecoach.cli.main import main
from livecoach.codecs.csc import CscMeasurement, encode_csc
from livecoach.codecs.cycling_power import CyclingPowerMeasurement, encode_cycling_power
from livecoach.config.ridefile import parse_ride_dict
from livecoach.errors import SourceError
from livecoach.pipeline.decode import Decoder
from livecoach.sources import sources_from_ride
from livecoach.sources.ble import SENSOR_KINDS, BleSensorSource, allow_list_from_sensors
from livecoach.sources.scan import scan_sensors
from livecoach.sources.serial_line import SerialLineSource
from livecoach.stream.events import CH_CSC, CH_LINK, CH_POWER, RawEvent
from livecoach.stream.samples import LinkSample, PowerSample, WheelSample
from tests.live_rig import RigClient

POWER = "C4:7A:11:00:00:01"
CSC = "C4:7A:11:00:00:02"
ROGUE = "C4:7A:11:00:00:99"   # advertises the same name as the power meter, not configured


class Peripheral:
    def __init__(self, address: str, name: str, kind: str, rssi: int = -60) -> None:
        self.address = address
        self.name = name
        self.kind = kind
        self.rssi = rssi
        self.in_range = True
        self.client: "RadioClient | None" = None
        self.callbacks: list[Any] = []

    def notify(self, payload: bytes) -> None:
        for cb in list(self.callbacks):
            cb(bytearray(payload))

    def drop(self) -> None:
        """The link is lost (out of range, battery): the stack calls the disconnect callback."""
        client = self.client
        self.client = None
        self.callbacks.clear()
        if client is not None:
            client.connected = False
            if client._disconnected_callback is not None:
                client._disconnected_callback()


class Radio:
    def __init__(self, *peripherals: Peripheral) -> None:
        self.devices = {p.address: p for p in peripherals}
        self.connect_log: list[str] = []


RADIO = Radio()


class RadioClient(RigClient):
    """The rig's test backend (tests/live_rig.py) on this file's radio, logging connects."""

    def devices(self) -> dict[str, Any]:
        return RADIO.devices

    @property
    def name(self) -> str:
        return RADIO.devices[self.address].name

    async def connect(self, pair: bool, **kwargs: Any) -> None:
        RADIO.connect_log.append(self.address)
        await super().connect(pair, **kwargs)


async def _next(queue: asyncio.Queue, pred, timeout_s: float = 5.0) -> RawEvent:
    async def go():
        while True:
            ev = await queue.get()
            if pred(ev):
                return ev
    return await asyncio.wait_for(go(), timeout_s)


def _link(channel: str, state: str):
    want = f"{channel} {state}".encode()
    return lambda e: e.channel == CH_LINK and e.payload == want


@pytest.fixture
def radio():
    global RADIO
    RADIO = Radio(Peripheral(POWER, "QB-PWR", "power"), Peripheral(ROGUE, "QB-PWR", "power", rssi=-40),
                  Peripheral(CSC, "QB-SPD", "csc"))
    return RADIO


def test_notifications_disconnect_backoff_and_reconnect(radio):
    clock_t = [500.0]

    def clock():
        clock_t[0] += 0.25
        return clock_t[0]

    payloads = [encode_cycling_power(CyclingPowerMeasurement.make(240 + i, wheel=(i * 3, i * 1400), crank=(i, i * 700)))
                for i in range(6)]

    async def scenario():
        src = BleSensorSource(POWER.lower(), "power", allow_list=[POWER, CSC], clock=clock, backend=RadioClient,
                              backoff_s=(0.01, 0.02, 0.04))
        queue: asyncio.Queue = asyncio.Queue()
        task = asyncio.create_task(src.run(queue))
        await _next(queue, _link(CH_POWER, "up"))
        pm, rogue = radio.devices[POWER], radio.devices[ROGUE]
        rogue.notify(encode_cycling_power(CyclingPowerMeasurement.make(999)))   # not connected: never heard
        for p in payloads[:3]:
            pm.notify(p)
        first = [await _next(queue, lambda e: e.channel == CH_POWER) for _ in range(3)]
        pm.in_range = False
        pm.drop()
        await _next(queue, _link(CH_POWER, "down"))
        await _next(queue, _link(CH_POWER, "reconnecting"))
        await asyncio.sleep(0.15)           # back-off: 0.01, 0.02, 0.04, 0.04, ... s
        failed = src.failed_attempts
        pm.in_range = True
        await _next(queue, _link(CH_POWER, "up"))
        for p in payloads[3:]:
            pm.notify(p)
        second = [await _next(queue, lambda e: e.channel == CH_POWER) for _ in range(3)]
        await src.stop()
        await asyncio.wait_for(task, 5.0)
        return src, first + second, failed

    src, events, failed = asyncio.run(scenario())
    assert [e.payload for e in events] == payloads          # exactly the bytes notified
    assert [e.t_s for e in events] == sorted(e.t_s for e in events)
    assert set(radio.connect_log) == {POWER}                # never the rogue with the same name
    assert 2 <= failed <= 8                                  # backed off, did not spin
    assert src.connects == 2 and src.last_error and "not found" in src.last_error
    assert radio.devices[POWER].client is None               # disconnected at stop
    d = Decoder()
    samples = [s for e in events for s in d.feed(e)]
    assert [s.power_w for s in samples if isinstance(s, PowerSample)] == [240.0 + i for i in range(6)]
    assert sum(isinstance(s, WheelSample) for s in samples) == 6


def test_address_not_on_allow_list_is_refused(radio):
    with pytest.raises(SourceError, match="allow-list"):
        BleSensorSource(ROGUE, "power", allow_list=[POWER], backend=RadioClient)
    with pytest.raises(SourceError, match="allow-list"):
        BleSensorSource("", "csc", allow_list=[POWER], backend=RadioClient)
    with pytest.raises(SourceError, match="kind"):
        BleSensorSource(POWER, "radar", allow_list=[POWER], backend=RadioClient)
    assert radio.connect_log == []


def test_a_stack_that_hands_back_another_device_is_not_subscribed(radio):
    class WrongDevice:
        def __init__(self, address, disconnected_callback, timeout):
            self.address = ROGUE
            self.subscribed = False

        async def connect(self):
            return None

        async def start_notify(self, uuid, cb):
            self.subscribed = True

        async def disconnect(self):
            return None

    made: list[WrongDevice] = []

    def factory(*args):
        made.append(WrongDevice(*args))
        return made[-1]

    async def scenario():
        src = BleSensorSource(POWER, "power", allow_list=[POWER], client_factory=factory, backoff_s=(0.01,))
        queue: asyncio.Queue = asyncio.Queue()
        task = asyncio.create_task(src.run(queue))
        await _next(queue, _link(CH_POWER, "reconnecting"))
        await asyncio.sleep(0.05)
        await src.stop()
        await asyncio.wait_for(task, 5.0)
        return src

    src = asyncio.run(scenario())
    assert made and not any(m.subscribed for m in made)
    assert "not the configured" in src.last_error


def test_two_sensors_share_one_queue(radio):
    async def scenario():
        allow = [POWER, CSC]
        srcs = [BleSensorSource(POWER, "power", allow_list=allow, backend=RadioClient),
                BleSensorSource(CSC, "csc", allow_list=allow, backend=RadioClient)]
        queue: asyncio.Queue = asyncio.Queue()
        tasks = [asyncio.create_task(s.run(queue)) for s in srcs]
        ups = {(await _next(queue, lambda e: e.channel == CH_LINK)).payload for _ in range(2)}
        assert ups == {b"ble.cycling_power up", b"ble.csc up"}
        radio.devices[CSC].notify(encode_csc(CscMeasurement.make(wheel=(10, 1024))))
        radio.devices[POWER].notify(encode_cycling_power(CyclingPowerMeasurement.make(310)))
        got = {(await _next(queue, lambda e: e.channel in (CH_CSC, CH_POWER))).channel for _ in range(2)}
        for s in srcs:
            await s.stop()
        await asyncio.wait_for(asyncio.gather(*tasks), 5.0)
        return got

    assert asyncio.run(scenario()) == {CH_CSC, CH_POWER}


def test_sources_from_ride_file():
    text = example_ride_text().replace('power_address = ""', f'power_address = "{POWER.lower()}"').replace(
        'speed_address = ""', f'speed_address = "{CSC}"').replace('gps_port = ""', 'gps_port = "/dev/livecoach-gps"')
    ride = parse_ride_dict(tomllib.loads(text), "test ride")
    assert allow_list_from_sensors(ride.sensors) == {POWER, CSC}
    srcs = sources_from_ride(ride)
    kinds = [(type(s).__name__, getattr(s, "kind", getattr(s, "channel", None))) for s in srcs]
    assert kinds == [("BleSensorSource", "power"), ("BleSensorSource", "csc"), ("SerialLineSource", "serial.gps")]
    assert isinstance(srcs[2], SerialLineSource) and srcs[2].baud == 9600


# ------------------------------------------------------------------------ scan
ADS: list[tuple[str, str | None, int, list[str]]] = []


class RadioScanner(BaseBleakScanner):
    def __init__(self, detection_callback, service_uuids, scanning_mode, **kwargs):
        super().__init__(detection_callback, service_uuids)

    async def start(self) -> None:
        self.seen_devices = {}
        for address, name, rssi, uuids in ADS:
            adv = AdvertisementData(local_name=name, manufacturer_data={}, service_data={}, service_uuids=uuids,
                                    tx_power=None, rssi=rssi, platform_data=())
            if self.is_allowed_uuid(adv.service_uuids):
                dev = self.create_or_update_device(address, address, name, None, adv)
                self.call_detection_callbacks(dev, adv)

    async def stop(self) -> None:
        return None


class NoAdapterScanner(RadioScanner):
    async def start(self) -> None:
        raise FileNotFoundError(2, "No such file or directory")  # what bleak raises without D-Bus


def test_scan_lists_sensor_services_with_rssi():
    ADS[:] = [
        (POWER, "QB-PWR", -71, [SENSOR_KINDS["power"][1], "0000180a-0000-1000-8000-00805f9b34fb"]),
        (ROGUE, "QB-PWR", -48, [SENSOR_KINDS["power"][1]]),
        (CSC, "QB-SPD", -60, [SENSOR_KINDS["csc"][1]]),
        ("C4:7A:11:00:00:07", "lamp", -30, ["0000180f-0000-1000-8000-00805f9b34fb"]),  # battery service only
    ]
    found = asyncio.run(scan_sensors(0.05, allow_list=[POWER.lower(), CSC], backend=RadioScanner))
    assert [(r.address, r.rssi_dbm, r.kinds, r.allowed) for r in found] == [
        (ROGUE, -48, ("power",), False),
        (CSC, -60, ("csc",), True),
        (POWER, -71, ("power",), True),
    ]


def test_scan_without_adapter_fails_clearly():
    with pytest.raises(SourceError, match="no Bluetooth adapter"):
        asyncio.run(scan_sensors(0.05, backend=NoAdapterScanner))


def test_scan_command_on_this_machine(capsys):
    code = main(["scan", "--timeout-s", "0.5"])
    out, err = capsys.readouterr()
    # This machine kind has no Bluetooth adapter: the command must say so and exit 1.
    if code == 1:
        assert "Bluetooth adapter" in err and "Traceback" not in err
    else:
        assert code == 0 and ("livecoach connects only" in out or "no power" in out)


def test_decoded_link_states():
    d = Decoder()
    assert d.feed(RawEvent(1.0, CH_LINK, b"ble.csc down")) == [LinkSample(1.0, CH_CSC, "down")]
