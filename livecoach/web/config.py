"""The ``[web]`` ride-file section: the crew web page."""

from __future__ import annotations

from dataclasses import dataclass

from livecoach.config.schema import setting


@dataclass(frozen=True, kw_only=True)
class WebConfig:
    """[web]: the read-only crew web page served by the module.

    It binds to 127.0.0.1 (this board only) unless ``host`` says otherwise;
    give ``host = "0.0.0.0"`` to let the crew's phones on the board's own
    network see it. The page has no controls: nothing on it can change the ride.
    """

    enabled: bool = setting(True, doc="serve the crew web page")
    host: str = setting("127.0.0.1", doc="address to listen on (127.0.0.1: this board only)")
    port: int = setting(8470, doc="TCP port (0: any free port)", lo=0, hi=65535)
    rate_hz: float = setting(
        4.0, doc="live updates per second sent to each page", unit="Hz", lo=0.5, hi=20.0
    )
