"""Load and validate the ride file (TOML, read with :mod:`tomllib`).

Required sections and keys (a stable interface: keys may be added, never renamed):
``[vehicle]`` mass_kg, wheel_circumference_m, wheel_inertia_kgm2,
drivetrain_efficiency, cda_m2, cda_sd_m2, crr, crr_sd;
``[rider]`` cp_w, w_prime_j, pmax_w;
``[course]`` runup_m, trap_m, start_speed_mps, elevation (or gpx);
``[air]`` temperature_c, pressure_pa (or altitude_m), relative_humidity_pct, headwind_mps.

Optional sections (:data:`OPTIONAL_SECTIONS`) configure sensors, recording and
the other parts of the module; each has defaults for every key.
"""

from __future__ import annotations

import bisect
import math
import tomllib
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from livecoach.config.schema import build_section, nearest_name, setting
from livecoach.errors import ConfigError, PhysicsError
from livecoach.physics.atmosphere import air_density_kgpm3, isa_pressure_pa
from livecoach.physics.power_balance import VehicleModel


@dataclass(frozen=True, kw_only=True)
class VehicleConfig:
    """[vehicle]: the vehicle + rider system and the drag priors."""

    mass_kg: float = setting(doc="vehicle + rider + kit", unit="kg", lo=1.0, hi=1000.0)
    wheel_circumference_m: float = setting(
        doc="rolling circumference of the wheel the speed sensor watches", unit="m", lo=0.3, hi=4.0
    )
    wheel_inertia_kgm2: float = setting(
        0.0, doc="moment of inertia of all wheels together", unit="kg*m^2", lo=0.0, hi=5.0
    )
    drivetrain_efficiency: float = setting(
        0.975, doc="crank power to wheel power", lo=0.0, hi=1.0, lo_open=True
    )
    cda_m2: float = setting(doc="prior drag area", unit="m^2", lo=0.0, hi=2.0, lo_open=True)
    cda_sd_m2: float = setting(
        doc="prior standard deviation of the drag area", unit="m^2", lo=0.0, hi=2.0, lo_open=True
    )
    crr: float = setting(doc="prior rolling-resistance coefficient", lo=0.0, hi=0.1, lo_open=True)
    crr_sd: float = setting(
        doc="prior standard deviation of Crr", lo=0.0, hi=0.1, lo_open=True
    )
    wheel_bearing_loss: bool = setting(
        False, doc="add the Martin et al. (1998) wheel-bearing loss term (else it is part of Crr)"
    )
    name: str = setting("", doc="free text: the vehicle's name")

    @property
    def wheel_radius_m(self) -> float:
        """Rolling radius, m, from the circumference."""
        return self.wheel_circumference_m / (2.0 * math.pi)

    def model(self, cda_m2: float | None = None, crr: float | None = None) -> VehicleModel:
        """The physics model with the prior (or given) CdA and Crr."""
        return VehicleModel(
            mass_kg=self.mass_kg,
            cda_m2=self.cda_m2 if cda_m2 is None else cda_m2,
            crr=self.crr if crr is None else crr,
            drivetrain_efficiency=self.drivetrain_efficiency,
            wheel_inertia_kgm2=self.wheel_inertia_kgm2,
            wheel_radius_m=self.wheel_radius_m,
            bearing_loss=self.wheel_bearing_loss,
        )


@dataclass(frozen=True, kw_only=True)
class RiderConfig:
    """[rider]: the 3-parameter critical-power model (Morton 1996)."""

    cp_w: float = setting(doc="critical power", unit="W", lo=0.0, hi=2500.0, lo_open=True)
    w_prime_j: float = setting(
        doc="work capacity above CP (W')", unit="J", lo=0.0, hi=200000.0, lo_open=True
    )
    pmax_w: float = setting(doc="maximal instantaneous power", unit="W", lo=0.0, hi=4000.0, lo_open=True)
    name: str = setting("", doc="free text: the rider's name")

    def __post_init__(self) -> None:
        if self.pmax_w <= self.cp_w:
            raise ConfigError(
                f"pmax_w = {self.pmax_w} W must be above cp_w = {self.cp_w} W"
            )


@dataclass(frozen=True, kw_only=True)
class CourseConfig:
    """[course]: the run-up and the timed trap, with the elevation profile."""

    runup_m: float = setting(doc="start line to trap entry", unit="m", lo=0.0, hi=50000.0, lo_open=True)
    trap_m: float = setting(doc="length of the timed section", unit="m", lo=0.0, hi=5000.0, lo_open=True)
    start_speed_mps: float = setting(0.0, doc="speed at distance 0", unit="m/s", lo=0.0, hi=40.0)
    elevation: list = setting(
        [], doc="[distance_m, elevation_m] points, linear between (or gpx)"
    )
    gpx: str = setting("", doc="GPX track file for the elevation profile (relative to the ride file)")
    name: str = setting("", doc="free text: the course's name")
    # The profile as tuples: filled from ``elevation`` here, or from the GPX
    # file by the loader. Not ride-file keys.
    distances_m: tuple = field(default=(), repr=False, metadata={"internal": True})
    elevations_m: tuple = field(default=(), repr=False, metadata={"internal": True})

    def __post_init__(self) -> None:
        if self.gpx and self.elevation:
            raise ConfigError("give either elevation or gpx, not both")
        if not self.distances_m and self.elevation:
            ds, es = _elevation_points(self.elevation)
            object.__setattr__(self, "distances_m", ds)
            object.__setattr__(self, "elevations_m", es)
        if self.distances_m:
            if len(self.distances_m) != len(self.elevations_m) or len(self.distances_m) < 2:
                raise ConfigError("the profile needs at least two points, as many elevations as distances")
            self._check_coverage()

    def _check_coverage(self) -> None:
        ds = self.distances_m
        if ds[0] > 0.0 or ds[-1] < self.runup_m + self.trap_m:
            raise ConfigError(
                f"the elevation profile covers {ds[0]:g}..{ds[-1]:g} m but must "
                f"cover 0..{self.runup_m + self.trap_m:g} m (start line to trap exit)"
            )

    @property
    def trap_entry_m(self) -> float:
        return self.runup_m

    @property
    def trap_exit_m(self) -> float:
        return self.runup_m + self.trap_m

    def elevation_m(self, distance_m: float) -> float:
        """Elevation, m, at ``distance_m`` along the course (linear between points;
        held constant beyond the ends)."""
        if not math.isfinite(distance_m):
            raise PhysicsError(f"distance_m={distance_m!r} is not a finite number")
        d, e = self.distances_m, self.elevations_m
        if distance_m <= d[0]:
            return e[0]
        if distance_m >= d[-1]:
            return e[-1]
        i = bisect.bisect_right(d, distance_m) - 1
        f = (distance_m - d[i]) / (d[i + 1] - d[i])
        return e[i] + f * (e[i + 1] - e[i])

    def grade(self, distance_m: float) -> float:
        """Grade (rise over run, -) of the segment containing ``distance_m`` (0 beyond the ends)."""
        if not math.isfinite(distance_m):
            raise PhysicsError(f"distance_m={distance_m!r} is not a finite number")
        d, e = self.distances_m, self.elevations_m
        if distance_m < d[0] or distance_m >= d[-1]:
            return 0.0
        i = bisect.bisect_right(d, distance_m) - 1
        return (e[i + 1] - e[i]) / (d[i + 1] - d[i])


@dataclass(frozen=True, kw_only=True)
class AirConfig:
    """[air]: the weather on the course."""

    temperature_c: float = setting(doc="air temperature", unit="deg C", lo=-40.0, hi=60.0)
    relative_humidity_pct: float = setting(0.0, doc="relative humidity", unit="%", lo=0.0, hi=100.0)
    pressure_pa: float | None = setting(
        None, doc="station pressure (or give altitude_m)", unit="Pa", lo=30000.0, hi=110000.0
    )
    altitude_m: float | None = setting(
        None, doc="altitude for a standard-atmosphere pressure", unit="m", lo=-500.0, hi=8000.0
    )
    headwind_mps: float = setting(
        0.0, doc="wind along the course, + against the rider", unit="m/s", lo=-30.0, hi=30.0
    )

    def __post_init__(self) -> None:
        if self.pressure_pa is not None and self.altitude_m is not None:
            raise ConfigError("give either pressure_pa or altitude_m, not both")

    @property
    def station_pressure_pa(self) -> float:
        """Pressure, Pa: as given, or from the standard atmosphere at ``altitude_m``."""
        if self.pressure_pa is not None:
            return self.pressure_pa
        return isa_pressure_pa(self.altitude_m if self.altitude_m is not None else 0.0)

    @property
    def density_kgpm3(self) -> float:
        """Moist-air density, kg/m^3 (see :mod:`livecoach.physics.atmosphere`)."""
        return air_density_kgpm3(
            self.station_pressure_pa, self.temperature_c, self.relative_humidity_pct
        )


@dataclass(frozen=True, kw_only=True)
class SensorsConfig:
    """[sensors]: where the sensors are. BLE addresses are an allow-list:
    the module never connects to a device not named here."""

    power_address: str = setting("", doc="BLE address of the crank power meter (Cycling Power service)")
    speed_address: str = setting("", doc="BLE address of the wheel-speed sensor (CSC service)")
    heart_rate_address: str = setting("", doc="BLE address of the heart-rate strap (optional)")
    gps_port: str = setting("", doc="serial port of the NMEA 0183 GPS receiver")
    gps_baud: int = setting(9600, doc="GPS baud rate", lo=300, hi=4000000)
    mcu_port: str = setting("", doc="serial port of the sensor microcontroller (line protocol)")
    mcu_baud: int = setting(115200, doc="microcontroller baud rate", lo=300, hi=4000000)
    has_airspeed_probe: bool = setting(False, doc="an air-speed probe reports over the mcu line")


@dataclass(frozen=True, kw_only=True)
class RecordingConfig:
    """[recording]: where recordings go."""

    directory: str = setting("recordings", doc="folder for recordings (relative to the ride file)")
    flush_interval_s: float = setting(
        0.5, doc="longest time a received record waits before it is written and synced",
        unit="s", lo=0.05, hi=1.0,
    )


@dataclass(frozen=True, kw_only=True)
class DisplayConfig:
    """[display]: the rider's screen (livecoach.sinks.display)."""

    speed_unit: str = setting("km/h", doc="unit of the big speed figure", choices=("km/h", "mph", "m/s"))
    refresh_hz: float = setting(5.0, doc="screen redraws per second", unit="Hz", lo=0.5, hi=20.0)


@dataclass(frozen=True, kw_only=True)
class AudioConfig:
    """[audio]: tone and spoken cues for the rider (livecoach.sinks.audio)."""

    muted: bool = setting(False, doc="no sound at all")
    voice: bool = setting(True, doc="speak the cue words with espeak-ng (when installed) after the tone")
    player: str = setting("auto", doc="sound player", choices=("auto", "aplay", "paplay", "play", "none"))
    min_interval_s: float = setting(2.0, doc="shortest time between the starts of two cues", unit="s", lo=0.0, hi=60.0)
    repeat_after_s: float = setting(8.0, doc="the same cue is not repeated sooner", unit="s", lo=0.0, hi=600.0)
    max_age_s: float = setting(3.0, doc="a cue still waiting after this is dropped as out of date", unit="s", lo=0.2, hi=60.0)
    volume_pct: float = setting(80.0, doc="tone loudness", unit="%", lo=0.0, hi=100.0)
    speech_voice: str = setting("en", doc="espeak-ng voice name")
    words_per_minute: int = setting(185, doc="speaking rate", lo=80, hi=450)


REQUIRED_SECTIONS: dict[str, type] = {
    "vehicle": VehicleConfig,
    "rider": RiderConfig,
    "course": CourseConfig,
    "air": AirConfig,
}

#: Optional sections: name -> dataclass with defaults for every key. Other
#: parts of the module register their sections here (see ``register_section``).
OPTIONAL_SECTIONS: dict[str, type | str] = {
    "sensors": SensorsConfig,
    "recording": RecordingConfig,
    "display": DisplayConfig,
    "audio": AudioConfig,
    "estimator": "livecoach.estimate.settings:EstimatorConfig",
    "decode": "livecoach.pipeline.decode:DecodeConfig",
    "web": "livecoach.web.config:WebConfig",
    "radio": "livecoach.telemetry.config:RadioConfig",
    "check": "livecoach.setup_check.settings:CheckConfig",
    "coach": "livecoach.coach.settings:CoachConfig",
    "course_rules": "livecoach.plan.checks:CourseRulesConfig",
}


def register_section(name: str, cls: type | str) -> None:
    """Register an optional ride-file section ``[name]`` validated by ``cls``.

    ``cls`` may also be ``"package.module:ClassName"``: the module is then
    imported only when a ride file has that section or the section is asked
    for, so the name is known to every command without importing the module.
    """
    OPTIONAL_SECTIONS[name] = cls


def section_class(name: str) -> type:
    """The dataclass of optional section ``[name]`` (importing it if registered by name)."""
    if name not in OPTIONAL_SECTIONS:
        raise ConfigError(
            f"no ride-file section named [{name}]; " + nearest_name(name, list(OPTIONAL_SECTIONS))
        )
    cls = OPTIONAL_SECTIONS[name]
    if isinstance(cls, str):
        import importlib

        module_name, _, attr = cls.partition(":")
        try:
            cls = getattr(importlib.import_module(module_name), attr)
        except (ImportError, AttributeError) as exc:
            raise ConfigError(
                f"ride-file section [{name}] is registered as '{OPTIONAL_SECTIONS[name]}' "
                f"but cannot be loaded: {exc}"
            ) from None
        OPTIONAL_SECTIONS[name] = cls
    return cls


@dataclass(frozen=True)
class RideConfig:
    """A whole validated ride file."""

    vehicle: VehicleConfig
    rider: RiderConfig
    course: CourseConfig
    air: AirConfig
    extra: dict[str, Any] = field(default_factory=dict)
    source: str = "<memory>"
    raw: dict[str, Any] = field(default_factory=dict, repr=False)
    text: str = field(default="", repr=False)

    def section(self, name: str) -> Any:
        """An optional section's dataclass (defaults if the file has none)."""
        if name in self.extra:
            return self.extra[name]
        return section_class(name)()

    @property
    def sensors(self) -> SensorsConfig:
        return self.section("sensors")

    @property
    def recording(self) -> RecordingConfig:
        return self.section("recording")

    def vehicle_model(self, cda_m2: float | None = None, crr: float | None = None) -> VehicleModel:
        return self.vehicle.model(cda_m2, crr)


def _elevation_points(raw: Any) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Distances and elevations, m, from ``[[distance_m, elevation_m], ...]``.

    Raises ConfigError naming the point when a point is malformed, not finite,
    out of range, or its distance does not increase.
    """
    where = "elevation"
    if not isinstance(raw, (list, tuple)) or len(raw) < 2:
        raise ConfigError(
            f"{where} = {raw!r}: expected a list of at least two [distance_m, elevation_m] points"
        )
    ds: list[float] = []
    es: list[float] = []
    for i, point in enumerate(raw):
        if (
            not isinstance(point, (list, tuple))
            or len(point) != 2
            or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in point)
        ):
            raise ConfigError(f"{where}[{i}] = {point!r}: expected [distance_m, elevation_m] (two numbers)")
        d, e = float(point[0]), float(point[1])
        if not (math.isfinite(d) and math.isfinite(e)):
            raise ConfigError(f"{where}[{i}] = {point!r}: expected finite numbers")
        if ds and d <= ds[-1]:
            raise ConfigError(
                f"{where}[{i}] = {point!r}: distance {d:g} m is not greater than the previous "
                f"point's {ds[-1]:g} m (distances must increase)"
            )
        if not -500.0 <= e <= 9000.0:
            raise ConfigError(f"{where}[{i}] = {point!r}: elevation {e:g} m is outside -500..9000 m")
        ds.append(d)
        es.append(e)
    return tuple(ds), tuple(es)


def _haversine_m(lat1: float, lon1: float, lat2: float, lon2: float) -> float:
    """Great-circle distance, m, on a sphere of the mean earth radius 6 371 008.8 m (IUGG)."""
    r = 6371008.8
    p1, p2 = math.radians(lat1), math.radians(lat2)
    dp, dl = p2 - p1, math.radians(lon2 - lon1)
    a = math.sin(dp / 2) ** 2 + math.cos(p1) * math.cos(p2) * math.sin(dl / 2) ** 2
    return 2 * r * math.asin(min(1.0, math.sqrt(a)))


def read_gpx_profile(path: Path) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Distance (m, cumulative great-circle along the track) and elevation (m)
    from the track points (or, without a track, route points) of a GPX 1.0/1.1 file.

    Repeated positions are skipped. Raises ConfigError naming the file and point.
    """
    where = f"[course] gpx = '{path}'"
    if not path.is_file():
        raise ConfigError(f"{where}: file not found")
    try:
        root = ET.parse(path).getroot()
    except ET.ParseError as exc:
        raise ConfigError(f"{where}: not valid XML ({exc})") from None
    except OSError as exc:
        raise ConfigError(f"{where}: cannot be read ({exc})") from None
    if root.tag.split("}")[-1] != "gpx":
        raise ConfigError(f"{where}: not a GPX file (root element <{root.tag.split('}')[-1]}>)")
    points = [el for el in root.iter() if el.tag.split("}")[-1] == "trkpt"]
    if not points:
        points = [el for el in root.iter() if el.tag.split("}")[-1] == "rtept"]
    ds: list[float] = []
    es: list[float] = []
    prev: tuple[float, float] | None = None
    for n, pt in enumerate(points):
        try:
            lat, lon = float(pt.attrib["lat"]), float(pt.attrib["lon"])
        except (KeyError, ValueError):
            raise ConfigError(f"{where}: point {n} has no valid lat/lon") from None
        if not (math.isfinite(lat) and math.isfinite(lon) and -90.0 <= lat <= 90.0
                and -180.0 <= lon <= 180.0):
            raise ConfigError(f"{where}: point {n} has lat={lat!r}, lon={lon!r} out of range")
        ele_el = next((c for c in pt if c.tag.split("}")[-1] == "ele"), None)
        if ele_el is None or ele_el.text is None:
            raise ConfigError(f"{where}: point {n} has no <ele> elevation")
        try:
            ele = float(ele_el.text.strip())
        except ValueError:
            raise ConfigError(f"{where}: point {n} has <ele>{ele_el.text}</ele>, not a number") from None
        if not (math.isfinite(ele) and -500.0 <= ele <= 9000.0):
            raise ConfigError(f"{where}: point {n} has elevation {ele!r} m, outside -500..9000 m")
        d = 0.0 if prev is None else ds[-1] + _haversine_m(prev[0], prev[1], lat, lon)
        prev = (lat, lon)
        if ds and d <= ds[-1]:
            continue  # repeated point
        ds.append(d)
        es.append(ele)
    if len(ds) < 2:
        raise ConfigError(f"{where}: fewer than two distinct track points")
    return tuple(ds), tuple(es)


def parse_ride_dict(data: dict[str, Any], source: str = "<ride file>", base_dir: Path | None = None,
                    text: str = "") -> RideConfig:
    """Validate a parsed ride-file table and build a :class:`RideConfig`."""
    if not isinstance(data, dict):
        raise ConfigError(f"{source}: the ride file must be a TOML table")
    valid = list(REQUIRED_SECTIONS) + list(OPTIONAL_SECTIONS)
    for key in data:
        if key not in valid:
            raise ConfigError(f"{source}: unknown section [{key}]; " + nearest_name(key, valid))
    for name in REQUIRED_SECTIONS:
        if name not in data:
            raise ConfigError(f"{source}: section [{name}] is missing")
    vehicle = build_section(VehicleConfig, data["vehicle"], "vehicle", source)
    rider = build_section(RiderConfig, data["rider"], "rider", source)
    course = build_section(CourseConfig, data["course"], "course", source)
    if course.gpx:
        gpx_path = Path(course.gpx)
        if not gpx_path.is_absolute() and base_dir is not None:
            gpx_path = base_dir / gpx_path
        try:
            ds, es = read_gpx_profile(gpx_path)
        except ConfigError as exc:
            raise ConfigError(f"{source}: {exc}") from None
        object.__setattr__(course, "distances_m", ds)
        object.__setattr__(course, "elevations_m", es)
        try:
            course._check_coverage()
        except ConfigError as exc:
            raise ConfigError(f"{source}: [course] gpx: {exc}") from None
    elif not course.elevation:
        raise ConfigError(f"{source}: [course] needs an elevation table or a gpx file")
    air = build_section(AirConfig, data["air"], "air", source)
    if air.pressure_pa is None and air.altitude_m is None:
        raise ConfigError(
            f"{source}: [air] pressure_pa is missing (station pressure, Pa; or give altitude_m)"
        )
    extra = {
        name: build_section(section_class(name), data[name], name, source)
        for name in list(OPTIONAL_SECTIONS)
        if name in data
    }
    return RideConfig(vehicle, rider, course, air, extra, source, data, text)


def load_ride_file(path: str | Path) -> RideConfig:
    """Read and validate a ride file. Raises :class:`ConfigError` naming the problem."""
    p = Path(path)
    if not p.is_file():
        raise ConfigError(f"ride file '{p}' not found")
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"ride file '{p}' cannot be read: {exc}") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{p}: not valid TOML: {exc}") from None
    return parse_ride_dict(data, str(p), p.parent, text)


def parse_ride_text(text: str, source: str = "<ride file>", base_dir: Path | None = None) -> RideConfig:
    """Validate ride-file TOML given as text (e.g. from a recording header)."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{source}: not valid TOML: {exc}") from None
    return parse_ride_dict(data, source, base_dir, text)
