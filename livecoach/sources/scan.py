"""Find nearby BLE sensors offering Cycling Power, CSC or Heart Rate (for ``livecoach scan``).

Uses :class:`bleak.BleakScanner` (``backend=`` injectable for tests). A
machine without a usable Bluetooth adapter or BlueZ/D-Bus raises
:class:`SourceError` saying so (bleak raises a plain ``FileNotFoundError``
when D-Bus is missing, a ``BleakError`` when no adapter is present).
"""

from __future__ import annotations

import asyncio
from dataclasses import dataclass
from typing import Any, Iterable

from livecoach.errors import SourceError
from livecoach.sources.ble import SENSOR_KINDS
from livecoach.sources.common import normalize_address

#: service UUID -> sensor kind
_SERVICE_KIND = {service: kind for kind, (_ch, service, _char) in SENSOR_KINDS.items()}
_KIND_TITLE = {"power": "cycling power", "csc": "speed/cadence", "heart_rate": "heart rate"}


@dataclass(frozen=True, slots=True)
class ScanResult:
    """One device seen: address, advertised name, RSSI (dBm), sensor kinds offered,
    and whether the ride file's allow-list names it."""

    address: str
    name: str | None
    rssi_dbm: int
    kinds: tuple[str, ...]
    allowed: bool

    def as_dict(self) -> dict[str, Any]:
        return {"address": self.address, "name": self.name, "rssi_dbm": self.rssi_dbm,
                "kinds": list(self.kinds), "allowed": self.allowed}


async def scan_sensors(
    timeout_s: float = 5.0, *, allow_list: Iterable[str] = (), backend: Any = None
) -> list[ScanResult]:
    """Scan for ``timeout_s`` seconds; devices offering a sensor service, strongest first."""
    from bleak import BleakScanner
    from bleak.exc import BleakError

    allowed = {normalize_address(a) for a in allow_list}
    kw = {} if backend is None else {"backend": backend}
    try:
        found = await asyncio.wait_for(
            BleakScanner.discover(timeout=timeout_s, return_adv=True, service_uuids=list(_SERVICE_KIND), **kw),
            timeout=timeout_s + 10.0,
        )
    except FileNotFoundError as exc:
        raise SourceError(f"no Bluetooth adapter: BlueZ/D-Bus is not reachable on this machine ({exc})") from None
    except (BleakError, OSError) as exc:
        raise SourceError(f"no usable Bluetooth adapter: {type(exc).__name__}: {exc}") from None
    except asyncio.TimeoutError:
        raise SourceError(f"the Bluetooth scan did not finish within {timeout_s + 10.0:g} s") from None
    out = []
    for device, adv in found.values():
        kinds = tuple(sorted({_SERVICE_KIND[u.lower()] for u in (adv.service_uuids or []) if u.lower() in _SERVICE_KIND}))
        if not kinds:
            continue
        addr = normalize_address(device.address)
        out.append(ScanResult(addr, adv.local_name or device.name, int(adv.rssi), kinds, addr in allowed))
    out.sort(key=lambda r: (-r.rssi_dbm, r.address))
    return out


def kind_titles(kinds: Iterable[str]) -> str:
    return ", ".join(_KIND_TITLE.get(k, k) for k in kinds)


__all__ = ["ScanResult", "kind_titles", "scan_sensors"]
