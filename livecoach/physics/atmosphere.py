"""Air: standard-atmosphere pressure from altitude, and moist-air density.

Sources
-------
* U.S. Standard Atmosphere, 1976 (NOAA/NASA/USAF), identical to ISO 2533:1975
  below 32 km: troposphere lapse rate 6.5 K/km from 288.15 K and 101 325 Pa;
  isothermal layer 216.65 K from 11 km to 20 km.
* Buck, A. L. (1981), "New equations for computing vapor pressure and
  enhancement factor", J. Appl. Meteor. 20, 1527-1532 (with the 1996 revision
  of the coefficients for water, as published in the Buck Research CR-1A manual).
* Moist air as an ideal-gas mixture of dry air and water vapour (Dalton's law),
  e.g. Picard et al. (2008), Metrologia 45, 149 (CIPM-2007), without the
  compressibility correction (Z differs from 1 by < 0.05 % near the ground).
"""

from __future__ import annotations

import math

from livecoach.errors import PhysicsError
from livecoach.physics._checks import finite

#: Specific gas constant of dry air, J/(kg*K) (US Standard Atmosphere 1976: R*/M0).
R_DRY_AIR_JPKGK = 287.05287
#: Specific gas constant of water vapour, J/(kg*K) (R* / 0.018015268 kg/mol).
R_WATER_VAPOUR_JPKGK = 461.52
#: Standard gravity, m/s^2 (CGPM 1901, used by US Standard Atmosphere 1976).
G0_MPS2 = 9.80665
#: Sea-level standard pressure, Pa, and temperature, K (US Standard Atmosphere 1976).
P0_PA = 101325.0
T0_K = 288.15
#: Tropospheric lapse rate, K/m (US Standard Atmosphere 1976).
LAPSE_KPM = -0.0065
#: Tropopause geopotential altitude, m.
H_TROPOPAUSE_M = 11000.0
#: Mean radius of the earth used for geopotential altitude, m (USSA 1976).
EARTH_RADIUS_M = 6356766.0

_KELVIN = 273.15


def _geopotential_m(altitude_m: float) -> float:
    """Geopotential altitude, m, from geometric altitude, m (USSA 1976 eq. 18)."""
    return EARTH_RADIUS_M * altitude_m / (EARTH_RADIUS_M + altitude_m)


def _check_altitude(altitude_m: float) -> float:
    altitude_m = finite("altitude_m", altitude_m)
    if altitude_m < -1000.0 or altitude_m > 20000.0:
        raise PhysicsError(
            f"altitude_m={altitude_m!r} is outside the supported range -1000..20000 m"
        )
    return altitude_m


def isa_temperature_k(altitude_m: float) -> float:
    """Standard-atmosphere temperature, K, at geometric altitude ``altitude_m`` (m).

    Source: U.S. Standard Atmosphere 1976 / ISO 2533 (layers 0 and 1).
    """
    h = _geopotential_m(_check_altitude(altitude_m))
    if h <= H_TROPOPAUSE_M:
        return T0_K + LAPSE_KPM * h
    return T0_K + LAPSE_KPM * H_TROPOPAUSE_M


def isa_pressure_pa(altitude_m: float) -> float:
    """Standard-atmosphere static pressure, Pa, at geometric altitude ``altitude_m`` (m).

    Source: U.S. Standard Atmosphere 1976 eqs. 33a/33b (barometric formula with
    a linear lapse rate in the troposphere, exponential in the isothermal layer).
    """
    h = _geopotential_m(_check_altitude(altitude_m))
    # p = p0 * (T / T0) ** (g0 / (R * |L|)): pressure falls as temperature falls.
    exponent = G0_MPS2 / (R_DRY_AIR_JPKGK * -LAPSE_KPM)
    if h <= H_TROPOPAUSE_M:
        return P0_PA * ((T0_K + LAPSE_KPM * h) / T0_K) ** exponent
    t11 = T0_K + LAPSE_KPM * H_TROPOPAUSE_M
    p11 = P0_PA * (t11 / T0_K) ** exponent
    return p11 * math.exp(-G0_MPS2 * (h - H_TROPOPAUSE_M) / (R_DRY_AIR_JPKGK * t11))


def isa_density_kgpm3(altitude_m: float) -> float:
    """Standard-atmosphere dry-air density, kg/m^3, at ``altitude_m`` (m) (USSA 1976)."""
    return isa_pressure_pa(altitude_m) / (R_DRY_AIR_JPKGK * isa_temperature_k(altitude_m))


def saturation_vapour_pressure_pa(temperature_c: float) -> float:
    """Saturation vapour pressure over liquid water, Pa, at ``temperature_c`` (deg C).

    Source: Buck (1981), revised 1996 coefficients:
    e_s = 611.21 * exp((18.678 - T/234.5) * T / (257.14 + T)), T in deg C.
    Valid about -40..+50 deg C (error < 0.05 % over 0..50 deg C per Buck).
    """
    t = finite("temperature_c", temperature_c)
    if t < -60.0 or t > 70.0:
        raise PhysicsError(f"temperature_c={temperature_c!r} is outside -60..70 deg C")
    return 611.21 * math.exp((18.678 - t / 234.5) * (t / (257.14 + t)))


def dry_air_density_kgpm3(pressure_pa: float, temperature_c: float) -> float:
    """Density of dry air, kg/m^3, from pressure (Pa) and temperature (deg C), ideal gas."""
    return air_density_kgpm3(pressure_pa, temperature_c, 0.0)


def air_density_kgpm3(
    pressure_pa: float, temperature_c: float, relative_humidity_pct: float
) -> float:
    """Moist-air density, kg/m^3.

    ``pressure_pa``: total static pressure, Pa; ``temperature_c``: dry-bulb
    temperature, deg C; ``relative_humidity_pct``: relative humidity over
    water, 0..100 %.

    rho = p_d / (R_d T) + p_v / (R_v T), with p_v = RH * e_s(T) (Buck 1981) and
    p_d = p - p_v (Dalton's law; ideal-gas mixture as in CIPM-2007 with Z = 1).
    """
    pressure_pa = finite("pressure_pa", pressure_pa)
    temperature_c = finite("temperature_c", temperature_c)
    relative_humidity_pct = finite("relative_humidity_pct", relative_humidity_pct)
    if not 10_000.0 <= pressure_pa <= 120_000.0:
        raise PhysicsError(f"pressure_pa={pressure_pa!r} is outside 10000..120000 Pa")
    if not 0.0 <= relative_humidity_pct <= 100.0:
        raise PhysicsError(
            f"relative_humidity_pct={relative_humidity_pct!r} is outside 0..100 %"
        )
    t_k = temperature_c + _KELVIN
    p_v = relative_humidity_pct / 100.0 * saturation_vapour_pressure_pa(temperature_c)
    p_v = min(p_v, pressure_pa)
    p_d = pressure_pa - p_v
    return p_d / (R_DRY_AIR_JPKGK * t_k) + p_v / (R_WATER_VAPOUR_JPKGK * t_k)
