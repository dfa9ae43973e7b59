"""``livecoach air``: air density for the current weather."""

from __future__ import annotations

import argparse

from livecoach.cli.common import print_json
from livecoach.errors import ConfigError

NAME = "air"
HELP = "air density for the given weather (moist air; standard atmosphere from altitude)"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--temperature-c", type=float, required=True, help="air temperature, deg C")
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--pressure-pa", type=float, help="station pressure, Pa")
    g.add_argument("--altitude-m", type=float, help="altitude, m (standard-atmosphere pressure)")
    p.add_argument("--humidity-pct", type=float, default=0.0, help="relative humidity, %% (default 0)")
    p.add_argument("--json", action="store_true", help="print JSON")


def run(args: argparse.Namespace) -> int:
    from livecoach.errors import PhysicsError
    from livecoach.physics.atmosphere import air_density_kgpm3, isa_pressure_pa

    try:
        pressure = args.pressure_pa if args.pressure_pa is not None else isa_pressure_pa(args.altitude_m)
        rho = air_density_kgpm3(pressure, args.temperature_c, args.humidity_pct)
    except PhysicsError as exc:
        raise ConfigError(str(exc)) from None
    out = {
        "air_density_kgpm3": rho,
        "pressure_pa": pressure,
        "temperature_c": args.temperature_c,
        "relative_humidity_pct": args.humidity_pct,
    }
    if args.json:
        print_json(out)
    else:
        print(
            f"air density {rho:.4f} kg/m^3  (p = {pressure:.0f} Pa, T = {args.temperature_c:g} deg C, "
            f"RH = {args.humidity_pct:g} %)"
        )
    return 0
