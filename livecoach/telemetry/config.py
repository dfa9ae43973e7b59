"""The ``[radio]`` ride-file section: the serial radio modem to the chase vehicle."""

from __future__ import annotations

from dataclasses import dataclass

from livecoach.config.schema import setting
from livecoach.errors import ConfigError


@dataclass(frozen=True, kw_only=True)
class RadioConfig:
    """[radio]: telemetry frames to the chase vehicle over a serial radio modem.

    The modem's band, power and duty cycle must follow local radio rules and
    licensing; livecoach only writes bytes to the serial port.
    """

    enabled: bool = setting(False, doc="send telemetry frames over the radio modem")
    port: str = setting("", doc="serial port of the radio modem, e.g. /dev/livecoach-radio")
    baud: int = setting(57600, doc="serial baud rate of the modem", lo=1200, hi=4000000)
    rate_hz: float = setting(
        1.0, doc="state frames per second (1-2 Hz suits most modems)", unit="Hz", lo=0.1, hi=5.0
    )

    def __post_init__(self) -> None:
        if self.enabled and not self.port:
            raise ConfigError("enabled = true needs port (the radio modem's serial port)")
