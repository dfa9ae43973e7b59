"""Gather every fact ``livecoach check`` needs, then run the pure checks (imperative shell)."""

from __future__ import annotations

import asyncio
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

from livecoach.setup_check.checks import check_clock, clock_correction_s, run_checks
from livecoach.setup_check.facts import (
    BLE,
    SensorSpec,
    SensorTraffic,
    SetupFacts,
    configured_devices,
    configured_sensors,
)
from livecoach.setup_check.probes import (
    probe_bluetooth,
    probe_clock,
    probe_device,
    probe_disk,
    probe_plan,
    probe_ride,
    set_wall_clock,
)
from livecoach.setup_check.result import NO_GO, CheckResult
from livecoach.setup_check.sensor_checks import latest_gps_time
from livecoach.setup_check.settings import CheckConfig


@dataclass(frozen=True)
class CheckOutcome:
    """The facts, the table rows, and notes on actions taken (e.g. clock set)."""

    facts: SetupFacts
    results: list[CheckResult]
    notes: tuple[str, ...] = ()


def _relative(base: Path, path: str) -> Path:
    p = Path(path)
    return p if p.is_absolute() else base / p


def build_sources(ride: Any, specs: tuple[SensorSpec, ...]) -> tuple[list[tuple[SensorSpec, Any]], dict]:
    """The live loop's own sources for the configured sensors: ((spec, source) pairs,
    {spec: reason} for those that could not be built).

    Uses :func:`livecoach.sources.sources_from_ride` (BLE through bleak with the
    ride file's allow-list, serial through pyserial) and pairs each source
    with its sensor by channel.
    """
    from livecoach.errors import LivecoachError
    from livecoach.sources import sources_from_ride

    try:
        sources = sources_from_ride(ride)
    except (LivecoachError, ImportError, OSError) as exc:
        return [], {spec: f"sources cannot be set up: {exc}" for spec in specs}
    by_channel = {getattr(src, "channel", None): src for src in sources}
    pairs = [(spec, by_channel[spec.channel]) for spec in specs if spec.channel in by_channel]
    failed = {spec: "no source for this sensor" for spec in specs if spec.channel not in by_channel}
    return pairs, failed


def gather_facts(
    ride_path: Path,
    *,
    plan_path: Path | None = None,
    listen_s: float | None = None,
    listen: bool = True,
    simulate: str | None = None,
    set_clock_from_gps: bool = False,
) -> CheckOutcome:
    """Probe the board (or the simulator for the sensor layer) and run every check."""
    ride_facts = probe_ride(ride_path)
    ride = ride_facts.ride
    base = ride_path.resolve().parent
    cfg: CheckConfig = ride.section("check") if ride is not None else CheckConfig()
    window_s = cfg.listen_s if listen_s is None else listen_s
    clock = probe_clock()
    specs = configured_sensors(ride) if ride is not None else ()
    device_roles = configured_devices(ride) if ride is not None else ()
    bluetooth = None
    devices: tuple = ()
    traffic: tuple[SensorTraffic, ...] = ()
    if ride is not None:
        if simulate:
            from livecoach.setup_check.simulate import simulated_sensor_facts

            bluetooth, devices, traffic = simulated_sensor_facts(
                simulate, specs, device_roles, window_s, clock.wall_utc_s,
                clock.wall_utc_s - clock.wall_minus_monotonic_s,
            )
        else:
            if any(s.transport == BLE for s in specs):
                bluetooth = probe_bluetooth()
            devices = tuple(probe_device(role, path) for role, path in device_roles)
            if listen and specs:
                from livecoach.setup_check.listen import listen as listen_to

                pairs, failed = build_sources(ride, specs)
                traffic = asyncio.run(listen_to(pairs, window_s, failed=failed))
    disk = None
    plan = None
    if ride is not None:
        disk = probe_disk(_relative(base, ride.recording.directory))
        plan = probe_plan(plan_path if plan_path is not None else _relative(base, cfg.plan))
    facts = SetupFacts(ride=ride_facts, clock=clock, bluetooth=bluetooth, devices=devices,
                       traffic=traffic, disk=disk, plan=plan)
    results = run_checks(facts)
    notes: list[str] = []
    if set_clock_from_gps:
        gps_traffic = next((t for t in traffic if t.spec.role == "gps"), None)
        gps_time = latest_gps_time(gps_traffic)
        clock_row = next(r for r in results if r.name == "clock")
        if gps_time is None:
            notes.append("clock not set: no GPS time received")
        elif clock_row.status == NO_GO:
            correction = clock_correction_s(clock, gps_time)
            set_wall_clock(correction)
            notes.append(f"wall clock stepped by {correction:+.1f} s to GPS time")
            new_clock = replace(clock, wall_utc_s=time.time(),
                                wall_minus_monotonic_s=clock.wall_minus_monotonic_s + correction)
            facts = replace(facts, clock=new_clock)
            row = check_clock(new_clock, gps_time, cfg)
            results = [row if r.name == "clock" else r for r in results]
        else:
            notes.append("clock already agrees with GPS time: not changed")
    return CheckOutcome(facts, results, tuple(notes))
