"""The ride file: one TOML file that says which vehicle, rider, course and air."""

from livecoach.config.ridefile import (
    AirConfig,
    CourseConfig,
    RideConfig,
    RiderConfig,
    VehicleConfig,
    load_ride_file,
    parse_ride_dict,
)

__all__ = [
    "AirConfig",
    "CourseConfig",
    "RideConfig",
    "RiderConfig",
    "VehicleConfig",
    "load_ride_file",
    "parse_ride_dict",
]
