"""Pure physics of a bicycle-type vehicle: air, power balance, steady speed.

All functions take and return SI units; names carry the unit.
"""

from livecoach.physics.atmosphere import (
    air_density_kgpm3,
    dry_air_density_kgpm3,
    isa_density_kgpm3,
    isa_pressure_pa,
    isa_temperature_k,
    saturation_vapour_pressure_pa,
)
from livecoach.physics.power_balance import (
    GRAVITY_MPS2,
    PowerTerms,
    VehicleModel,
    acceleration_mps2,
    crank_power_w,
    power_terms,
)
from livecoach.physics.steady import steady_power_w, steady_speed_mps

__all__ = [
    "GRAVITY_MPS2",
    "PowerTerms",
    "VehicleModel",
    "acceleration_mps2",
    "air_density_kgpm3",
    "crank_power_w",
    "dry_air_density_kgpm3",
    "isa_density_kgpm3",
    "isa_pressure_pa",
    "isa_temperature_k",
    "power_terms",
    "saturation_vapour_pressure_pa",
    "steady_power_w",
    "steady_speed_mps",
]
