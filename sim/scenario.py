"""Simulator scenarios: TOML files that say what the bench should simulate.

A scenario names (or embeds) the ride file the module under test uses, and
adds what only the simulator knows: the true drag area and rolling
resistance (which may differ from the ride file's priors), the true course
(the surveyed profile plus survey error), the weather with gusts, the rider's
behaviour and limits, each sensor's rate, noise and latency, the faults to
inject, and a seed. Scenario names resolve to ``sim/scenarios/NAME.toml``;
anything else is taken as a path.

Every section and key is documented in ``sim/scenarios/default.toml`` and in
the ``setting(doc=...)`` of the classes below; every error names the file,
the section and the key.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from livecoach.config.ridefile import RideConfig, parse_ride_dict
from livecoach.config.schema import build_section, nearest_name, setting
from livecoach.errors import ConfigError
from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_MCU, CH_POWER
from sim.tomlwrite import deep_merge, dumps

SCENARIO_DIR = Path(__file__).resolve().parent / "scenarios"

#: Short names accepted for channels in ``[[fault]]`` tables.
CHANNEL_ALIASES = {
    "power": CH_POWER,
    "wheel": CH_CSC,
    "csc": CH_CSC,
    "gps": CH_GPS,
    "mcu": CH_MCU,
    "heart_rate": CH_HEART_RATE,
}
DATA_CHANNELS = (CH_POWER, CH_CSC, CH_GPS, CH_MCU, CH_HEART_RATE)

FAULT_KINDS = (
    "dropout", "disconnect", "stuck", "garbage", "offset_drift", "duplicate", "out_of_order",
)


@dataclass(frozen=True, kw_only=True)
class RunSettings:
    """[scenario]: name, seed, the ride file and how long and how finely to simulate."""

    name: str = setting("", doc="short name of the scenario")
    description: str = setting("", doc="one line: what the scenario is for")
    seed: int = setting(1, doc="seed of every random stream (same seed, same run)", lo=0, hi=2**63 - 1)
    ride: str = setting(
        "example",
        doc="ride file the module uses: 'example' (livecoach's example ride) or a path "
            "relative to the scenario file",
    )
    step_hz: float = setting(100.0, doc="integration rate of the RK4 solver", unit="Hz", lo=20.0, hi=1000.0)
    runout_m: float = setting(
        60.0, doc="distance simulated past the trap exit (rider stands down)", unit="m", lo=0.0, hi=5000.0
    )
    max_time_s: float = setting(
        3600.0, doc="stop the run after this simulated time", unit="s", lo=1.0, hi=86400.0
    )
    start_utc: str = setting(
        "2031-05-17T05:48:00", doc="UTC date and time of the start, for the GPS sentences"
    )
    until: str = setting(
        "runout", doc="end the run after the run-out ('runout') or only at max_time_s ('time_limit', "
        "for soak runs: the rider rides on past the course, which continues flat)",
        choices=("runout", "time_limit"),
    )
    tick_hz: float = setting(
        4.0, doc="rate of empty 'tick' events, as the live loop sends them (every 0.25 s); 0: none",
        unit="Hz", lo=0.0, hi=100.0,
    )


@dataclass(frozen=True, kw_only=True)
class TruthSettings:
    """[truth]: the true vehicle and course (unset keys take the ride file's values)."""

    cda_m2: float | None = setting(None, doc="true drag area", unit="m^2", lo=0.0, hi=2.0, lo_open=True)
    crr: float | None = setting(None, doc="true rolling-resistance coefficient", lo=0.0, hi=0.1)
    mass_kg: float | None = setting(None, doc="true total mass", unit="kg", lo=1.0, hi=1000.0)
    wheel_circumference_m: float | None = setting(
        None, doc="true rolling circumference of the sensed wheel", unit="m", lo=0.3, hi=4.0
    )
    wheel_inertia_kgm2: float | None = setting(
        None, doc="true moment of inertia of all wheels", unit="kg*m^2", lo=0.0, hi=5.0
    )
    drivetrain_efficiency: float | None = setting(
        None, doc="true crank-to-wheel efficiency", lo=0.0, hi=1.0, lo_open=True
    )
    cda_steps: list = setting(
        [], doc="[[distance_m, cda_m2], ...]: the drag area changes to cda_m2 at distance_m"
    )
    crr_steps: list = setting(
        [], doc="[[distance_m, crr], ...]: Crr changes to crr at distance_m"
    )
    elevation_error_m: float = setting(
        0.0, doc="standard deviation of the survey error of the course elevation", unit="m",
        lo=0.0, hi=5.0,
    )
    elevation_error_spacing_m: float = setting(
        100.0, doc="distance between independent survey errors", unit="m", lo=1.0, hi=10000.0
    )


@dataclass(frozen=True, kw_only=True)
class WeatherSettings:
    """[weather]: the true air (unset keys take the ride file's [air] values)."""

    temperature_c: float | None = setting(None, doc="air temperature", unit="deg C", lo=-40.0, hi=60.0)
    pressure_pa: float | None = setting(
        None, doc="station pressure at the start line", unit="Pa", lo=30000.0, hi=110000.0
    )
    relative_humidity_pct: float | None = setting(None, doc="relative humidity", unit="%", lo=0.0, hi=100.0)
    headwind_mps: float | None = setting(
        None, doc="steady wind along the course, + against the rider", unit="m/s", lo=-30.0, hi=30.0
    )
    gust_rms_mps: float = setting(
        0.0, doc="rms of the gusts along the course (Ornstein-Uhlenbeck)", unit="m/s", lo=0.0, hi=10.0
    )
    gust_time_s: float = setting(
        6.0, doc="time scale of the gusts as the vehicle meets them", unit="s", lo=0.05, hi=3600.0
    )
    density_follows_elevation: bool = setting(
        False, doc="let the air density change with elevation (hydrostatic); else one density"
    )


@dataclass(frozen=True, kw_only=True)
class RiderSettings:
    """[rider]: what the rider does and what the rider can do (true limits)."""

    mode: str = setting(
        "scripted", doc="'scripted': follow the profile; 'coach': follow the coach's target power "
        "(the profile is the fallback while the coach has none)", choices=("scripted", "coach"),
    )
    cp_w: float | None = setting(None, doc="true critical power", unit="W", lo=0.0, hi=2500.0, lo_open=True)
    w_prime_j: float | None = setting(None, doc="true W'", unit="J", lo=0.0, hi=200000.0, lo_open=True)
    pmax_w: float | None = setting(None, doc="true maximal power", unit="W", lo=0.0, hi=4000.0, lo_open=True)
    profile: list = setting(
        [], doc="[[at, power_w], ...]: target power from each point on (distance m or time s); "
        "empty: hold the critical power"
    )
    profile_basis: str = setting(
        "distance", doc="what the profile's first column is", choices=("distance", "time")
    )
    lag_s: float = setting(
        1.0, doc="time constant of the rider's first-order response to a new target", unit="s",
        lo=0.0, hi=60.0,
    )
    noise_pct: float = setting(
        3.0, doc="rms of the rider's power wobble around the target", unit="%", lo=0.0, hi=50.0
    )
    noise_time_s: float = setting(
        2.0, doc="time scale of the power wobble (Ornstein-Uhlenbeck)", unit="s", lo=0.05, hi=600.0
    )
    cadence_rpm: float = setting(90.0, doc="pedalling cadence while pedalling", unit="rpm", lo=20.0, hi=200.0)
    stand_down_after_trap: bool = setting(True, doc="stop pedalling at the trap exit")


@dataclass(frozen=True, kw_only=True)
class PowerMeterSettings:
    """[power_meter]: the crank power meter (Bluetooth Cycling Power Measurement)."""

    enabled: bool = setting(True, doc="emit power notifications")
    rate_hz: float = setting(2.0, doc="notifications per second", unit="Hz", lo=0.25, hi=8.0)
    noise_pct: float = setting(1.5, doc="sd of the proportional noise of each report", unit="%", lo=0.0, hi=50.0)
    noise_w: float = setting(2.0, doc="sd of the additive noise of each report", unit="W", lo=0.0, hi=200.0)
    bias_pct: float = setting(0.0, doc="calibration error (scale)", unit="%", lo=-50.0, hi=50.0)
    offset_w: float = setting(0.0, doc="zero offset", unit="W", lo=-200.0, hi=200.0)
    latency_s: float = setting(0.03, doc="mean radio latency", unit="s", lo=0.0, hi=2.0)
    latency_jitter_s: float = setting(0.01, doc="sd of the latency", unit="s", lo=0.0, hi=1.0)
    crank_data: bool = setting(True, doc="send crank revolutions and crank event time")
    torque_data: bool = setting(
        True, doc="send accumulated torque (crank work) when the codec supports it"
    )
    clock_ppm: float = setting(0.0, doc="error of the meter's clock", unit="ppm", lo=-1000.0, hi=1000.0)


@dataclass(frozen=True, kw_only=True)
class WheelSensorSettings:
    """[wheel_sensor]: the wheel-speed sensor (Bluetooth CSC Measurement)."""

    enabled: bool = setting(True, doc="emit wheel notifications")
    link: str = setting(
        "ble", doc="'ble': a CSC sensor; 'mcu': the microcontroller's hall sensor (whl lines)",
        choices=("ble", "mcu"),
    )
    rate_hz: float = setting(2.0, doc="notifications per second", unit="Hz", lo=0.25, hi=20.0)
    latency_s: float = setting(0.03, doc="mean radio latency", unit="s", lo=0.0, hi=2.0)
    latency_jitter_s: float = setting(0.01, doc="sd of the latency", unit="s", lo=0.0, hi=1.0)
    clock_ppm: float = setting(0.0, doc="error of the sensor's clock", unit="ppm", lo=-1000.0, hi=1000.0)


@dataclass(frozen=True, kw_only=True)
class GpsSettings:
    """[gps]: the GPS receiver (NMEA 0183 over serial)."""

    enabled: bool = setting(True, doc="emit NMEA sentences")
    rate_hz: float = setting(10.0, doc="fixes per second", unit="Hz", lo=0.1, hi=20.0)
    sentences: str = setting("RMC,GGA", doc="sentence types per fix, comma separated (RMC, GGA, VTG)")
    talker: str = setting("GP", doc="NMEA talker id", choices=("GP", "GN", "GL", "GA"))
    origin_lat_deg: float = setting(
        31.2087, doc="latitude of the start line (an arbitrary point for the invented course)",
        unit="deg", lo=-89.0, hi=89.0,
    )
    origin_lon_deg: float = setting(-113.5521, doc="longitude of the start line", unit="deg", lo=-180.0, hi=180.0)
    heading_deg: float = setting(12.0, doc="direction of travel (true)", unit="deg", lo=0.0, hi=360.0)
    position_sd_m: float = setting(1.2, doc="sd of the slowly wandering position error", unit="m", lo=0.0, hi=100.0)
    position_time_s: float = setting(40.0, doc="time scale of that wander", unit="s", lo=0.1, hi=3600.0)
    position_white_m: float = setting(0.15, doc="sd of the fix-to-fix position noise", unit="m", lo=0.0, hi=50.0)
    speed_sd_mps: float = setting(0.05, doc="sd of the speed over ground", unit="m/s", lo=0.0, hi=5.0)
    altitude_sd_m: float = setting(2.0, doc="sd of the altitude error", unit="m", lo=0.0, hi=100.0)
    latency_s: float = setting(0.06, doc="delay from fix time to the first sentence", unit="s", lo=0.0, hi=1.0)
    baud: int = setting(
        115200, doc="serial rate: each sentence takes (length + 2) * 10 / baud s on the wire",
        lo=1200, hi=4000000,
    )
    satellites: int = setting(11, doc="satellites in use", lo=0, hi=99)
    hdop: float = setting(0.8, doc="horizontal dilution of precision", lo=0.0, hi=99.0)
    geoid_separation_m: float = setting(-28.0, doc="geoid height above the ellipsoid", unit="m", lo=-200.0, hi=200.0)


@dataclass(frozen=True, kw_only=True)
class AirspeedSettings:
    """[airspeed]: the optional air-speed probe (pitot) on the mcu line."""

    enabled: bool = setting(False, doc="emit air-speed lines")
    rate_hz: float = setting(10.0, doc="readings per second", unit="Hz", lo=0.1, hi=100.0)
    noise_pct: float = setting(1.0, doc="sd of the random error of each reading", unit="%", lo=0.0, hi=50.0)
    noise_mps: float = setting(0.0, doc="sd of an additive error", unit="m/s", lo=0.0, hi=10.0)
    gain_error_pct: float = setting(0.0, doc="calibration error (scale)", unit="%", lo=-50.0, hi=50.0)
    latency_s: float = setting(0.005, doc="delay from reading to line", unit="s", lo=0.0, hi=1.0)


@dataclass(frozen=True, kw_only=True)
class BarometerSettings:
    """[barometer]: the optional barometer and thermometer on the mcu line."""

    enabled: bool = setting(False, doc="emit pressure lines")
    rate_hz: float = setting(2.0, doc="readings per second", unit="Hz", lo=0.1, hi=100.0)
    noise_pa: float = setting(3.0, doc="sd of the pressure noise", unit="Pa", lo=0.0, hi=1000.0)
    temperature_noise_c: float = setting(0.05, doc="sd of the temperature noise", unit="deg C", lo=0.0, hi=10.0)
    latency_s: float = setting(0.005, doc="delay from reading to line", unit="s", lo=0.0, hi=1.0)


@dataclass(frozen=True, kw_only=True)
class HeartRateSettings:
    """[heart_rate]: the optional heart-rate strap (Bluetooth Heart Rate Measurement)."""

    enabled: bool = setting(True, doc="emit heart-rate notifications")
    rate_hz: float = setting(1.0, doc="notifications per second", unit="Hz", lo=0.1, hi=4.0)
    rest_bpm: float = setting(70.0, doc="heart rate before the start", unit="1/min", lo=30.0, hi=200.0)
    max_bpm: float = setting(188.0, doc="maximal heart rate", unit="1/min", lo=100.0, hi=230.0)
    latency_s: float = setting(0.03, doc="mean radio latency", unit="s", lo=0.0, hi=2.0)


@dataclass(frozen=True, kw_only=True)
class FaultSpec:
    """[[fault]]: one fault to inject."""

    kind: str = setting(doc="what goes wrong", choices=FAULT_KINDS)
    channel: str = setting(
        doc="which sensor: power, wheel, gps, mcu, heart_rate (or a channel name)"
    )
    start_s: float = setting(doc="when it starts (simulated time)", unit="s", lo=0.0, hi=86400.0)
    duration_s: float = setting(
        0.0, doc="how long it lasts (offset_drift: 0 = to the end)", unit="s", lo=0.0, hi=86400.0
    )
    count: int = setting(3, doc="garbage: how many bad payloads", lo=1, hi=100000)
    probability: float = setting(
        0.3, doc="duplicate / out_of_order: share of the payloads affected", lo=0.0, hi=1.0
    )
    rate_w_per_min: float = setting(
        2.0, doc="offset_drift: how fast the power meter's zero wanders", unit="W/min",
        lo=-1000.0, hi=1000.0,
    )


@dataclass(frozen=True)
class Scenario:
    """A validated scenario: the ride file the module uses plus the simulator's truth."""

    run: RunSettings
    ride: RideConfig
    truth: TruthSettings
    weather: WeatherSettings
    rider: RiderSettings
    power_meter: PowerMeterSettings
    wheel_sensor: WheelSensorSettings
    gps: GpsSettings
    airspeed: AirspeedSettings
    barometer: BarometerSettings
    heart_rate: HeartRateSettings
    faults: tuple[FaultSpec, ...] = ()
    source: str = "<memory>"
    ride_text: str = field(default="", repr=False)

    @property
    def name(self) -> str:
        return self.run.name or Path(self.source).stem

    @property
    def seed(self) -> int:
        return self.run.seed

    # The true values, falling back to the ride file.
    @property
    def true_mass_kg(self) -> float:
        return _pick(self.truth.mass_kg, self.ride.vehicle.mass_kg)

    @property
    def true_cda_m2(self) -> float:
        """True drag area at the start, m^2."""
        return _pick(self.truth.cda_m2, self.ride.vehicle.cda_m2)

    @property
    def true_crr(self) -> float:
        return _pick(self.truth.crr, self.ride.vehicle.crr)

    @property
    def true_circumference_m(self) -> float:
        return _pick(self.truth.wheel_circumference_m, self.ride.vehicle.wheel_circumference_m)

    @property
    def true_wheel_inertia_kgm2(self) -> float:
        return _pick(self.truth.wheel_inertia_kgm2, self.ride.vehicle.wheel_inertia_kgm2)

    @property
    def true_efficiency(self) -> float:
        return _pick(self.truth.drivetrain_efficiency, self.ride.vehicle.drivetrain_efficiency)

    @property
    def true_cp_w(self) -> float:
        return _pick(self.rider.cp_w, self.ride.rider.cp_w)

    @property
    def true_w_prime_j(self) -> float:
        return _pick(self.rider.w_prime_j, self.ride.rider.w_prime_j)

    @property
    def true_pmax_w(self) -> float:
        return _pick(self.rider.pmax_w, self.ride.rider.pmax_w)

    @property
    def fault_channels(self) -> tuple[str, ...]:
        return tuple(sorted({f.channel for f in self.faults}))


def _pick(value: Any, default: Any) -> Any:
    return default if value is None else value


_SECTIONS: dict[str, type] = {
    "scenario": RunSettings,
    "truth": TruthSettings,
    "weather": WeatherSettings,
    "rider": RiderSettings,
    "power_meter": PowerMeterSettings,
    "wheel_sensor": WheelSensorSettings,
    "gps": GpsSettings,
    "airspeed": AirspeedSettings,
    "barometer": BarometerSettings,
    "heart_rate": HeartRateSettings,
}
_OTHER_KEYS = ("fault", "ride_patch", "ride_inline")


def example_ride_path() -> Path:
    """Path of livecoach's example ride file (the default scenario's ride)."""
    return Path(str(resources.files("livecoach.data").joinpath("example_ride.toml")))


def available_scenarios() -> list[str]:
    """Names of the scenarios shipped in ``sim/scenarios/``."""
    return sorted(p.stem for p in SCENARIO_DIR.glob("*.toml"))


def resolve_scenario_path(name_or_path: str | Path) -> Path:
    """``sim/scenarios/NAME.toml`` for a shipped name, else the path as given."""
    text = str(name_or_path)
    p = Path(text)
    if p.is_file():
        return p
    shipped = SCENARIO_DIR / f"{text}.toml"
    if "/" not in text and shipped.is_file():
        return shipped
    import difflib

    names = available_scenarios()
    close = difflib.get_close_matches(text, names, n=1, cutoff=0.5)
    hint = f"did you mean '{close[0]}'?" if close else "shipped scenarios: " + ", ".join(names)
    raise ConfigError(f"scenario '{text}' is neither a shipped scenario nor a file; {hint}")


def load_scenario(name_or_path: str | Path) -> Scenario:
    """Read and validate a scenario by shipped name or path."""
    path = resolve_scenario_path(name_or_path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"scenario '{path}' cannot be read: {exc}") from None
    return parse_scenario_text(text, str(path), path.parent)


def parse_scenario_text(text: str, source: str = "<scenario>", base_dir: Path | None = None) -> Scenario:
    """Validate scenario TOML given as text."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{source}: not valid TOML: {exc}") from None
    return parse_scenario_dict(data, source, base_dir)


def _load_ride_table(ref: str, source: str, base_dir: Path | None) -> dict[str, Any]:
    if ref == "example":
        path = example_ride_path()
    else:
        path = Path(ref)
        if not path.is_absolute() and base_dir is not None:
            path = base_dir / path
    if not path.is_file():
        raise ConfigError(f"{source}: [scenario] ride = '{ref}': file not found ({path})")
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{source}: [scenario] ride = '{ref}': cannot be read: {exc}") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{source}: [scenario] ride = '{ref}': not valid TOML: {exc}") from None


def _check_points(raw: Any, where: str, lo: float, hi: float, what: str) -> list[list[float]]:
    if not isinstance(raw, list):
        raise ConfigError(f"{where}: expected a list of [at, {what}] pairs")
    out: list[list[float]] = []
    for i, point in enumerate(raw):
        if (
            not isinstance(point, list) or len(point) != 2
            or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in point)
            or not all(math.isfinite(float(x)) for x in point)
        ):
            raise ConfigError(f"{where}[{i}] = {point!r}: expected [at, {what}] (two numbers)")
        at, value = float(point[0]), float(point[1])
        if at < 0.0:
            raise ConfigError(f"{where}[{i}]: position {at} must be >= 0")
        if out and at <= out[-1][0]:
            raise ConfigError(f"{where}[{i}]: {at} is not after the previous point's {out[-1][0]}")
        if not lo <= value <= hi:
            raise ConfigError(f"{where}[{i}]: {what} {value} is outside {lo}..{hi}")
        out.append([at, value])
    return out


def parse_scenario_dict(data: dict[str, Any], source: str = "<scenario>",
                        base_dir: Path | None = None) -> Scenario:
    """Validate a parsed scenario table and build a :class:`Scenario`."""
    valid = list(_SECTIONS) + list(_OTHER_KEYS)
    for key in data:
        if key not in valid:
            raise ConfigError(f"{source}: unknown section [{key}]; " + nearest_name(key, valid))
    sections = {
        name: build_section(cls, data.get(name, {}), name, source) for name, cls in _SECTIONS.items()
    }
    run: RunSettings = sections["scenario"]
    # The ride file the module under test uses.
    if "ride_inline" in data:
        ride_table = data["ride_inline"]
        if not isinstance(ride_table, dict):
            raise ConfigError(f"{source}: [ride_inline] must be a table holding a whole ride file")
    else:
        ride_table = _load_ride_table(run.ride, source, base_dir)
    patch = data.get("ride_patch", {})
    if not isinstance(patch, dict):
        raise ConfigError(f"{source}: [ride_patch] must be a table of ride-file sections")
    ride_table = deep_merge(ride_table, patch)
    ride_text = dumps(ride_table)
    ride = parse_ride_dict(ride_table, f"{source} (ride file)", base_dir, ride_text)
    truth: TruthSettings = sections["truth"]
    object.__setattr__(truth, "cda_steps", _check_points(
        truth.cda_steps, f"{source}: [truth] cda_steps", 1e-4, 2.0, "cda_m2"))
    object.__setattr__(truth, "crr_steps", _check_points(
        truth.crr_steps, f"{source}: [truth] crr_steps", 0.0, 0.1, "crr"))
    rider: RiderSettings = sections["rider"]
    pmax = _pick(rider.pmax_w, ride.rider.pmax_w)
    cp = _pick(rider.cp_w, ride.rider.cp_w)
    if pmax <= cp:
        raise ConfigError(f"{source}: [rider] pmax_w = {pmax} W must be above cp_w = {cp} W")
    object.__setattr__(rider, "profile", _check_points(
        rider.profile, f"{source}: [rider] profile", 0.0, 4000.0, "power_w"))
    gps: GpsSettings = sections["gps"]
    for s in gps.sentences.split(","):
        if s.strip().upper() not in ("RMC", "GGA", "VTG"):
            raise ConfigError(
                f"{source}: [gps] sentences = {gps.sentences!r}: '{s.strip()}' is not one of RMC, GGA, VTG"
            )
    _check_start_utc(run.start_utc, source)
    raw_faults = data.get("fault", [])
    if not isinstance(raw_faults, list):
        raise ConfigError(f"{source}: faults are given as [[fault]] tables")
    faults = []
    for i, raw in enumerate(raw_faults):
        spec = build_section(FaultSpec, raw, f"fault {i + 1}", source)
        channel = CHANNEL_ALIASES.get(spec.channel, spec.channel)
        if channel not in DATA_CHANNELS:
            raise ConfigError(
                f"{source}: [fault {i + 1}] channel = {spec.channel!r}: expected one of "
                + ", ".join(list(CHANNEL_ALIASES) + list(DATA_CHANNELS))
            )
        if spec.kind == "offset_drift" and channel != CH_POWER:
            raise ConfigError(f"{source}: [fault {i + 1}] offset_drift applies to the power meter only")
        if spec.kind not in ("offset_drift", "garbage") and spec.duration_s <= 0.0:
            raise ConfigError(f"{source}: [fault {i + 1}] {spec.kind} needs duration_s > 0")
        object.__setattr__(spec, "channel", channel)
        faults.append(spec)
    return Scenario(
        run=run, ride=ride, truth=truth, weather=sections["weather"], rider=rider,
        power_meter=sections["power_meter"], wheel_sensor=sections["wheel_sensor"], gps=gps,
        airspeed=sections["airspeed"], barometer=sections["barometer"],
        heart_rate=sections["heart_rate"], faults=tuple(faults), source=source, ride_text=ride_text,
    )


def _check_start_utc(text: str, source: str) -> None:
    from datetime import datetime

    try:
        datetime.fromisoformat(text)
    except ValueError:
        raise ConfigError(
            f"{source}: [scenario] start_utc = {text!r}: expected YYYY-MM-DDTHH:MM:SS"
        ) from None


def truth_ride(scenario: Scenario) -> RideConfig:
    """The ride file as it would be if the team knew the truth: the true
    vehicle, rider, air and steady wind (the survey error and the gusts aside),
    with the starting drag area and rolling resistance. For the optimum
    against which a run is judged."""
    from dataclasses import replace

    ride = scenario.ride
    w = scenario.weather
    vehicle = replace(
        ride.vehicle, cda_m2=scenario.true_cda_m2, crr=scenario.true_crr, mass_kg=scenario.true_mass_kg,
        wheel_circumference_m=scenario.true_circumference_m,
        wheel_inertia_kgm2=scenario.true_wheel_inertia_kgm2,
        drivetrain_efficiency=scenario.true_efficiency,
    )
    rider = replace(ride.rider, cp_w=scenario.true_cp_w, w_prime_j=scenario.true_w_prime_j,
                    pmax_w=scenario.true_pmax_w)
    air = ride.air
    changes: dict[str, Any] = {}
    if w.temperature_c is not None:
        changes["temperature_c"] = w.temperature_c
    if w.relative_humidity_pct is not None:
        changes["relative_humidity_pct"] = w.relative_humidity_pct
    if w.pressure_pa is not None:
        changes["pressure_pa"] = w.pressure_pa
        changes["altitude_m"] = None
    if w.headwind_mps is not None:
        changes["headwind_mps"] = w.headwind_mps
    if changes:
        air = replace(air, **changes)
    return replace(ride, vehicle=vehicle, rider=rider, air=air)
