"""The bench simulator standing in for the sensor layer of ``livecoach check --simulate``.

The simulator (:mod:`sim.engine`) emits the very payloads the real sensors
send (GATT notifications, NMEA sentences, lsl1 lines) through the project's
encoders. Here its first ``window_s`` seconds become the sensor traffic, and
its sensors stand in for the Bluetooth adapter and the serial device nodes;
the ride file, clock, disk and plan are still probed for real. The
simulated GPS is set to the board's wall clock and its receive times to the
board's monotonic clock, so the clock check compares like with like.
"""

from __future__ import annotations

import dataclasses
import time
from typing import Any

from livecoach.setup_check.facts import (
    BluetoothAdapter,
    BluetoothFacts,
    DeviceFacts,
    SensorSpec,
    SensorTraffic,
)
from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_MCU, CH_POWER


def _enabled_channels(scenario: Any) -> set[str]:
    channels = set()
    if scenario.power_meter.enabled:
        channels.add(CH_POWER)
    if scenario.wheel_sensor.enabled:
        channels.add(CH_MCU if scenario.wheel_sensor.link == "mcu" else CH_CSC)
    if scenario.gps.enabled:
        channels.add(CH_GPS)
    if scenario.airspeed.enabled or scenario.barometer.enabled:
        channels.add(CH_MCU)
    if scenario.heart_rate.enabled:
        channels.add(CH_HEART_RATE)
    return channels


def simulated_sensor_facts(
    scenario_name: str,
    specs: tuple[SensorSpec, ...],
    device_roles: tuple[tuple[str, str], ...],
    window_s: float,
    wall_start_utc_s: float,
    mono_start_s: float,
) -> tuple[BluetoothFacts, tuple[DeviceFacts, ...], tuple[SensorTraffic, ...]]:
    """Adapter, device and traffic facts from ``window_s`` seconds of a simulated run.

    ``scenario_name``: a shipped scenario name or a scenario file path (see
    :func:`sim.scenario.load_scenario`); ``wall_start_utc_s`` and
    ``mono_start_s``: the wall (UTC, s since 1970) and monotonic (s) times the
    simulated run starts at.
    """
    from sim.engine import Simulation
    from sim.scenario import load_scenario

    scenario = load_scenario(scenario_name)
    start_utc = time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(wall_start_utc_s))
    frac_s = wall_start_utc_s - int(wall_start_utc_s)
    run = dataclasses.replace(scenario.run, start_utc=start_utc, max_time_s=max(window_s + 1.0, 1.0))
    scenario = dataclasses.replace(scenario, run=run)
    by_channel: dict[str, list] = {}
    for ev in Simulation(scenario).events():
        if ev.t_s > window_s:
            break
        by_channel.setdefault(ev.channel, []).append(
            dataclasses.replace(ev, t_s=ev.t_s + mono_start_s - frac_s)
        )
    enabled = _enabled_channels(scenario)
    traffic = []
    for spec in specs:
        if spec.channel in enabled:
            traffic.append(SensorTraffic(spec, True, tuple(by_channel.get(spec.channel, ())), window_s))
        else:
            traffic.append(SensorTraffic(spec, False, (), window_s,
                                         f"not in the simulated scenario '{scenario.name}'"))
    adapter = BluetoothFacts((BluetoothAdapter("sim-hci0", "00:00:00:00:00:00", True, False, False),))
    devices = tuple(
        DeviceFacts(role, path, True, True, True, True, target="(simulated)")
        if role == "radio" or any(s.role == role and s.channel in enabled for s in specs)
        else DeviceFacts(role, path, False, error="not in the simulated scenario")
        for role, path in device_roles
    )
    return adapter, devices, tuple(traffic)
