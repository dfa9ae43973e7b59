"""Facts about the board and the sensors, gathered before a run.

The probes (:mod:`livecoach.setup_check.probes`) fill these plain records
from the real system; tests fill them from the simulator or by hand. The
checks (:mod:`livecoach.setup_check.checks`) are pure functions of them, so
every go and no-go decision can be tested without hardware.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from livecoach.errors import LivecoachError
from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_MCU, CH_POWER, RawEvent

#: Transports.
BLE = "ble"
SERIAL = "serial"


@dataclass(frozen=True, slots=True)
class SensorSpec:
    """One sensor the ride file configures.

    ``role``: "power", "speed", "heart_rate", "gps" or "mcu"; ``channel``: the
    RawEvent channel it sends on; ``where``: BLE address or serial port path;
    ``transport``: "ble" or "serial"; ``baud``: serial baud rate (0 for BLE);
    ``required``: a failure is no-go (else a warning).
    """

    role: str
    channel: str
    where: str
    transport: str
    baud: int = 0
    required: bool = True


@dataclass(frozen=True, slots=True)
class BluetoothAdapter:
    """A Bluetooth controller as the kernel and BlueZ see it.

    ``powered``/``soft_blocked``/``hard_blocked``: ``None`` when unknown.
    """

    name: str
    address: str = ""
    powered: bool | None = None
    soft_blocked: bool | None = None
    hard_blocked: bool | None = None


@dataclass(frozen=True, slots=True)
class BluetoothFacts:
    """All Bluetooth controllers found (``error``: why none could be listed)."""

    adapters: tuple[BluetoothAdapter, ...] = ()
    error: str | None = None


@dataclass(frozen=True, slots=True)
class DeviceFacts:
    """A serial device node named in the ride file.

    ``exists``: the path exists; ``is_char_device``: it is a character device
    (a tty); ``readable``/``writable``: this user may open it so;
    ``target``: the node a stable-name symlink points at.
    """

    role: str
    path: str
    exists: bool
    is_char_device: bool = False
    readable: bool = False
    writable: bool = False
    target: str = ""
    error: str | None = None


@dataclass(frozen=True, slots=True)
class SensorTraffic:
    """What one configured sensor sent while the check listened.

    ``connected``: the link came up (BLE connection made, serial port
    opened); ``error``: why not; ``events``: every payload received, with
    monotonic receive times; ``window_s``: how long the check listened.
    """

    spec: SensorSpec
    connected: bool
    events: tuple[RawEvent, ...] = ()
    window_s: float = 0.0
    error: str | None = None


@dataclass(frozen=True, slots=True)
class DiskFacts:
    """The folder where recordings go and the free space there (bytes)."""

    path: str
    exists: bool
    writable: bool = False
    free_bytes: int = 0
    total_bytes: int = 0
    error: str | None = None


@dataclass(frozen=True, slots=True)
class ClockFacts:
    """The clocks of the board.

    ``wall_utc_s``: the wall clock (UTC, s since 1970) when the facts were
    gathered; ``wall_minus_monotonic_s``: wall-clock UTC (s since 1970) minus the
    monotonic clock (s), read together, so a receive time t_s of an event
    corresponds to wall time t_s + this. ``monotonic_adjustable``: whether the
    monotonic clock can be set (it must not be). ``network_synchronized``:
    the system says its wall clock is synchronised over the network
    (``None``: unknown).
    """

    wall_utc_s: float
    wall_minus_monotonic_s: float
    monotonic_adjustable: bool = False
    monotonic_resolution_s: float = 1e-9
    network_synchronized: bool | None = None


@dataclass(frozen=True, slots=True)
class RideFacts:
    """The ride file: the validated config, or the error that stopped it."""

    path: str
    ride: Any = None  # livecoach.config.ridefile.RideConfig
    error: str | None = None


@dataclass(frozen=True, slots=True)
class PlanFacts:
    """The run-up plan file as read from disk.

    ``plan``: the :class:`livecoach.plan.Plan` read by
    :func:`livecoach.plan.load_plan` (``None`` when missing or unreadable);
    ``error``: why it could not be read.
    """

    path: str
    exists: bool
    plan: Any = None
    error: str | None = None


@dataclass(frozen=True, slots=True)
class SetupFacts:
    """Everything the checks look at."""

    ride: RideFacts
    clock: ClockFacts
    bluetooth: BluetoothFacts | None = None
    devices: tuple[DeviceFacts, ...] = ()
    traffic: tuple[SensorTraffic, ...] = ()
    disk: DiskFacts | None = None
    plan: PlanFacts | None = None
    extra: dict[str, Any] = field(default_factory=dict)


def configured_sensors(ride: Any) -> tuple[SensorSpec, ...]:
    """The sensors the ride file's ``[sensors]`` section names, in a fixed order."""
    s = ride.sensors
    specs: list[SensorSpec] = []
    if s.power_address:
        specs.append(SensorSpec("power", CH_POWER, s.power_address, BLE))
    if s.speed_address:
        specs.append(SensorSpec("speed", CH_CSC, s.speed_address, BLE))
    if s.heart_rate_address:
        specs.append(SensorSpec("heart_rate", CH_HEART_RATE, s.heart_rate_address, BLE, required=False))
    if s.gps_port:
        specs.append(SensorSpec("gps", CH_GPS, s.gps_port, SERIAL, baud=s.gps_baud))
    if s.mcu_port:
        specs.append(SensorSpec("mcu", CH_MCU, s.mcu_port, SERIAL, baud=s.mcu_baud))
    return tuple(specs)


def configured_devices(ride: Any) -> tuple[tuple[str, str], ...]:
    """(role, path) of every serial device the ride file names (sensors and radio)."""
    out = [(spec.role, spec.where) for spec in configured_sensors(ride) if spec.transport == SERIAL]
    try:
        radio = ride.section("radio")
    except LivecoachError:  # the radio section's module is not installed: nothing to check
        radio = None
    if radio is not None and getattr(radio, "enabled", False) and getattr(radio, "port", ""):
        out.append(("radio", radio.port))
    return tuple(out)
