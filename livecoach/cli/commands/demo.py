"""``livecoach demo``: the built-in demo (no hardware).

Until the simulator lands this prints a real computation: the steady
speed-versus-power table of the example vehicle on the example course.
"""

from __future__ import annotations

import argparse

NAME = "demo"
HELP = "run the built-in demo on the example vehicle (no hardware needed)"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", default="demo-output", help="folder for the demo's outputs")


def run(args: argparse.Namespace) -> int:
    import tomllib

    from livecoach.cli.commands.init import example_ride_text
    from livecoach.cli.commands.speed import speed_table
    from livecoach.config.ridefile import parse_ride_dict

    ride = parse_ride_dict(tomllib.loads(example_ride_text()), "example ride file")
    grade = ride.course.grade(0.0)
    rows = speed_table(ride, grade, range(100, 1000, 50))
    print(f"Demo vehicle: {ride.vehicle.name}; air {ride.air.density_kgpm3:.4f} kg/m^3; grade {grade:+.4f}")
    print(f"{'power W':>8} {'km/h':>7} {'air share':>9}")
    for r in rows:
        print(f"{r['power_w']:>8.0f} {r['speed_kmh']:>7.1f} {r['aero_share']:>9.1%}")
    return 0
