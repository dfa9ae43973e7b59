"""The pre-run go/no-go checks: pure functions of :mod:`~livecoach.setup_check.facts`.

:func:`run_checks` turns one :class:`~livecoach.setup_check.facts.SetupFacts`
into the rows of the go/no-go table; :func:`~livecoach.setup_check.result.is_go`
gives the verdict. Nothing here reads the clock, the disk or a device.
"""

from __future__ import annotations

import time
from typing import Any

from livecoach.setup_check.facts import (
    BLE,
    BluetoothFacts,
    ClockFacts,
    DeviceFacts,
    DiskFacts,
    PlanFacts,
    RideFacts,
    SensorSpec,
    SensorTraffic,
    SetupFacts,
    configured_sensors,
)
from livecoach.setup_check.result import GO, NO_GO, SKIP, WARN, CheckResult
from livecoach.setup_check.sensor_checks import JUDGES, label, latest_gps_time, provides_wheel_speed
from livecoach.setup_check.settings import CheckConfig

#: Wall-clock readings before this (2024-01-01T00:00:00Z) mean the clock was
#: never set: a board without a real-time clock and network starts at 1970 or
#: at its last shutdown time.
MIN_PLAUSIBLE_WALL_UTC_S = 1704067200.0


def _utc_text(epoch_s: float) -> str:
    return time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime(epoch_s))


def check_ride(facts: RideFacts) -> CheckResult:
    """The ride file loads and validates."""
    if facts.ride is None:
        return CheckResult("ride file", NO_GO, facts.error or f"{facts.path}: not loaded",
                           "fix the ride file (the message names the key); `livecoach init` shows an example")
    ride = facts.ride
    c = ride.course
    detail = (f"{facts.path}: {ride.vehicle.name or 'vehicle'} {ride.vehicle.mass_kg:g} kg, "
              f"run-up {c.runup_m:g} m + trap {c.trap_m:g} m, air {ride.air.density_kgpm3:.4f} kg/m^3")
    return CheckResult("ride file", GO, detail)


def check_configured(specs: tuple[SensorSpec, ...]) -> CheckResult:
    """The ride file names at least a power meter and something that can give wheel speed."""
    roles = [s.role for s in specs]
    if "power" not in roles:
        return CheckResult("sensors configured", NO_GO, "no power meter in [sensors] power_address",
                           "add the power meter's BLE address (find it with `livecoach scan`)")
    if not {"speed", "mcu"} & set(roles):
        detail = "no speed_address or mcu_port: wheel speed must come from the power meter"
        return CheckResult("sensors configured", WARN, detail,
                           "a separate wheel-speed sensor is more robust")
    return CheckResult("sensors configured", GO, ", ".join(f"{label(s.role)}" for s in specs))


def check_bluetooth(facts: BluetoothFacts | None, specs: tuple[SensorSpec, ...]) -> CheckResult:
    """A powered, unblocked Bluetooth controller exists (when any BLE sensor is configured)."""
    if not any(s.transport == BLE for s in specs):
        return CheckResult("Bluetooth adapter", SKIP, "no BLE sensor configured")
    if facts is None or not facts.adapters:
        why = (facts.error if facts is not None else None) or "none found"
        return CheckResult("Bluetooth adapter", NO_GO, why,
                           "check `bluetoothctl show`; on the board, dtoverlay=disable-bt must not be set "
                           "in config.txt, and `systemctl status bluetooth` must be active")
    problems = []
    for a in facts.adapters:
        if a.hard_blocked:
            problems.append(f"{a.name} is blocked by a hardware switch")
        elif a.soft_blocked:
            problems.append(f"{a.name} is blocked (rfkill)")
        elif a.powered is False:
            problems.append(f"{a.name} is powered off")
    usable = [a for a in facts.adapters
              if not a.hard_blocked and not a.soft_blocked and a.powered is not False]
    if not usable:
        return CheckResult("Bluetooth adapter", NO_GO, "; ".join(problems),
                           "`sudo rfkill unblock bluetooth` then `bluetoothctl power on`")
    a = usable[0]
    power = "" if a.powered else " (power state unknown)"
    return CheckResult("Bluetooth adapter", GO, f"{a.name} {a.address}{power}".strip())


def check_device(facts: DeviceFacts) -> CheckResult:
    """A serial device node exists, is a tty and this user may read and write it."""
    name = f"serial {facts.role} {facts.path}"
    fail = WARN if facts.role == "radio" else NO_GO
    if not facts.exists:
        return CheckResult(name, fail, f"missing{': ' + facts.error if facts.error else ''}",
                           "plug it in; check `ls -l /dev/serial/by-id/` and the udev rules "
                           "(`livecoach install-service --help`)")
    if not facts.is_char_device:
        return CheckResult(name, fail, "exists but is not a serial (character) device",
                           "point [sensors] at the device node, not a file")
    if not (facts.readable and facts.writable):
        return CheckResult(name, fail, "no read/write permission for this user",
                           "add the user to the 'dialout' group (`sudo usermod -aG dialout $USER`, "
                           "then log in again)")
    target = f" -> {facts.target}" if facts.target and facts.target != facts.path else ""
    return CheckResult(name, GO, f"present{target}")


def check_traffic(specs: tuple[SensorSpec, ...], traffic: tuple[SensorTraffic, ...], ride: Any,
                  cfg: CheckConfig) -> list[CheckResult]:
    """Judge each configured sensor's traffic, then whether any sensor gives wheel speed."""
    by_role = {t.spec.role: t for t in traffic}
    out: list[CheckResult] = []
    for spec in specs:
        t = by_role.get(spec.role)
        if t is None:
            out.append(CheckResult(f"{label(spec.role)} {spec.where}", NO_GO if spec.required else WARN,
                                   "not probed", "run `livecoach check` without --no-listen"))
            continue
        out.extend(JUDGES[spec.role](t, ride, cfg))
    if traffic:
        if any(provides_wheel_speed(t) for t in traffic):
            out.append(CheckResult("wheel speed", GO, "wheel revolutions received"))
        else:
            out.append(CheckResult("wheel speed", NO_GO, "no sensor sent wheel revolutions",
                                   "spin the wheel; check the speed sensor or the hall sensor wiring"))
    return out


def clock_correction_s(clock: ClockFacts, gps_time: tuple[float, float]) -> float:
    """Seconds to add to the wall clock to agree with GPS time.

    ``gps_time``: (monotonic receive time t_s, GPS UTC s since 1970) of a fix.
    The sentence arrives a little after the second it describes (typically
    0.05-0.5 s, common practice), so the result is accurate to about that.
    """
    t_s, gps_utc_s = gps_time
    return gps_utc_s - (t_s + clock.wall_minus_monotonic_s)


def check_clock(clock: ClockFacts, gps_time: tuple[float, float] | None, cfg: CheckConfig) -> CheckResult:
    """Monotonic clock present; wall clock set (from the network or agreeing with GPS time)."""
    if clock.monotonic_adjustable:
        return CheckResult("clock", NO_GO, "the monotonic clock can be set: receive times may jump",
                           "run on Linux, where CLOCK_MONOTONIC never goes backwards")
    hint_set = "run `sudo livecoach check --config RIDE --set-clock-from-gps` (or connect to a network)"
    if gps_time is not None:
        error_s = -clock_correction_s(clock, gps_time)
        if abs(error_s) > cfg.max_clock_error_s:
            return CheckResult("clock", NO_GO,
                               f"wall clock {_utc_text(clock.wall_utc_s)} is {error_s:+.1f} s off GPS time",
                               hint_set)
        return CheckResult("clock", GO, f"wall clock within {abs(error_s):.1f} s of GPS time, "
                                        "monotonic clock for receive times")
    if clock.wall_utc_s < MIN_PLAUSIBLE_WALL_UTC_S:
        return CheckResult("clock", NO_GO, f"wall clock reads {_utc_text(clock.wall_utc_s)}: never set",
                           hint_set + " once the GPS has a fix")
    if clock.network_synchronized:
        return CheckResult("clock", GO, "wall clock synchronised over the network, "
                                        "monotonic clock for receive times")
    return CheckResult("clock", WARN, f"wall clock {_utc_text(clock.wall_utc_s)} not checked "
                                      "(no network time, no GPS time)",
                       "recording dates may be wrong; the run itself uses the monotonic clock")


def check_disk(disk: DiskFacts | None, cfg: CheckConfig) -> CheckResult:
    """The recording folder is writable and has the free space the [check] section asks for."""
    if disk is None:
        return CheckResult("recording space", NO_GO, "not probed")
    name = f"recording space {disk.path}"
    if disk.error:
        return CheckResult(name, NO_GO, disk.error, "mount the data partition or USB stick")
    if not disk.writable:
        return CheckResult(name, NO_GO, "not writable by this user",
                           "fix the owner of the folder (the service's user must own it)")
    free_mb = disk.free_bytes / 1e6
    if free_mb < cfg.min_free_mb:
        return CheckResult(name, NO_GO, f"{free_mb:.0f} MB free, need {cfg.min_free_mb:g} MB",
                           "copy old recordings off the board and delete them")
    return CheckResult(name, GO, f"{free_mb:.0f} MB free of {disk.total_bytes / 1e6:.0f} MB"
                                 + ("" if disk.exists else " (folder will be created)"))


def check_plan(facts: PlanFacts | None, ride: Any, cfg: CheckConfig) -> list[CheckResult]:
    """A run-up plan exists, reads, and was made for this course, rider and vehicle.

    The comparison is the planner's own :func:`livecoach.plan.check_plan`: a
    different course, rider or mass is no-go; a different drag prior, air
    density or wind is a warning (the live coach re-plans with what it measures).
    """
    from livecoach.plan import check_plan as plan_fits_ride

    fail = NO_GO if cfg.require_plan else WARN
    hint_make = "make one: `livecoach plan --config RIDE --out PLAN`"
    if facts is None:
        return [CheckResult("plan", fail, "not probed", hint_make)]
    name = f"plan {facts.path}"
    if not facts.exists:
        return [CheckResult(name, fail, "missing", hint_make)]
    if facts.plan is None:
        return [CheckResult(name, fail, facts.error or "cannot be read", hint_make)]
    plan = facts.plan
    errors, warnings = plan_fits_ride(plan, ride)
    if errors:
        return [CheckResult(name, fail, "made for another run: " + "; ".join(errors),
                            "re-plan for this ride file: " + hint_make)]
    detail = (f"{len(plan.distance_m)} points to {plan.distance_m[-1]:g} m, up to "
              f"{max(plan.power_w):.0f} W, planned trap speed {plan.trap_speed_mps:.2f} m/s")
    out = [CheckResult(name, GO, detail)]
    out.extend(CheckResult("plan vs ride file", WARN, w, "re-plan when you can") for w in warnings)
    return out


def run_checks(facts: SetupFacts) -> list[CheckResult]:
    """Every row of the go/no-go table, in a fixed order."""
    results = [check_ride(facts.ride)]
    ride = facts.ride.ride
    cfg: CheckConfig = ride.section("check") if ride is not None else CheckConfig()
    gps_traffic = next((t for t in facts.traffic if t.spec.role == "gps"), None)
    if ride is not None:
        specs = configured_sensors(ride)
        results.append(check_configured(specs))
        results.append(check_bluetooth(facts.bluetooth, specs))
        results.extend(check_device(d) for d in facts.devices)
        results.extend(check_traffic(specs, facts.traffic, ride, cfg))
    else:
        results.append(CheckResult("sensors", SKIP, "ride file invalid: sensors not checked"))
    results.append(check_clock(facts.clock, latest_gps_time(gps_traffic), cfg))
    results.append(check_disk(facts.disk, cfg))
    if ride is not None:
        results.extend(check_plan(facts.plan, ride, cfg))
    return results
