"""[check]: thresholds of the pre-run go/no-go check (``livecoach check``).

Registered with the ride file by name (see ``OPTIONAL_SECTIONS`` in
:mod:`livecoach.config.ridefile`), so every command accepts a ride file with
this section without importing the checks.
"""

from __future__ import annotations

from dataclasses import dataclass

from livecoach.config.schema import setting


@dataclass(frozen=True, kw_only=True)
class CheckConfig:
    """[check]: how long to listen to the sensors and what counts as go."""

    listen_s: float = setting(
        8.0, doc="how long to listen to each configured sensor", unit="s", lo=1.0, hi=120.0
    )
    min_rate_hz: float = setting(
        0.5, doc="a sensor sending fewer messages per second than this is no-go", unit="Hz",
        lo=0.05, hi=50.0,
    )
    max_rejected_pct: float = setting(
        10.0, doc="more rejected (undecodable) messages than this share is no-go", unit="%",
        lo=0.0, hi=100.0,
    )
    min_free_mb: float = setting(
        500.0, doc="free space needed where recordings go", unit="MB", lo=1.0, hi=1.0e6
    )
    require_gps_fix: bool = setting(
        True, doc="no-go without a valid GPS fix (when a GPS port is configured)"
    )
    min_satellites: int = setting(5, doc="satellites in use needed for a good fix", lo=3, hi=40)
    max_hdop: float = setting(3.0, doc="largest acceptable horizontal dilution of precision", lo=0.5, hi=50.0)
    max_clock_error_s: float = setting(
        2.0, doc="largest acceptable difference between the wall clock and GPS time", unit="s",
        lo=0.1, hi=3600.0,
    )
    plan: str = setting(
        "plan.csv", doc="the run-up plan made by `livecoach plan` (relative to the ride file)"
    )
    require_plan: bool = setting(True, doc="no-go without a plan that matches the ride file")
    max_pressure_diff_pct: float = setting(
        3.0, doc="warn when the measured air pressure differs from the ride file's by more",
        unit="%", lo=0.1, hi=50.0,
    )
    max_temperature_diff_c: float = setting(
        8.0, doc="warn when the measured air temperature differs from the ride file's by more",
        unit="deg C", lo=0.5, hi=50.0,
    )
