"""``livecoach speed``: steady speed for a power, or power for a speed, on the configured vehicle."""

from __future__ import annotations

import argparse

from livecoach.cli.common import add_config_argument, print_json

NAME = "speed"
HELP = "steady speed for a crank power (or the power for a speed) on the ride file's vehicle and air"


def add_arguments(p: argparse.ArgumentParser) -> None:
    add_config_argument(p)
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--power-w", type=float, help="crank power, W -> steady speed")
    g.add_argument("--speed-mps", type=float, help="ground speed, m/s -> crank power")
    g.add_argument("--table", action="store_true", help="speed for a range of powers")
    p.add_argument("--grade", type=float, default=0.0, help="grade, rise over run (default 0)")
    p.add_argument("--json", action="store_true", help="print JSON")


def speed_table(ride, grade: float, powers_w) -> list[dict]:
    """Rows of power, steady speed and the share of wheel power spent on air drag."""
    from livecoach.physics.power_balance import power_terms
    from livecoach.physics.steady import steady_speed_mps

    from livecoach.errors import NoSolutionError

    model = ride.vehicle_model()
    rho = ride.air.density_kgpm3
    rows = []
    for p in powers_w:
        try:
            v = steady_speed_mps(p, grade, rho, model, ride.air.headwind_mps)
        except NoSolutionError:
            rows.append({"power_w": p, "speed_mps": None, "speed_kmh": None, "aero_share": None})
            continue
        terms = power_terms(v, 0.0, grade, rho, model, ride.air.headwind_mps)
        resist_w = terms.aero_w + terms.rolling_w + terms.bearing_w
        rows.append({
            "power_w": p,
            "speed_mps": v,
            "speed_kmh": v * 3.6,
            "aero_share": terms.aero_w / resist_w if resist_w > 0.0 else None,
        })
    return rows


def _check_options(args: argparse.Namespace) -> None:
    """Reject option values that are not finite or out of range (exit code 2)."""
    import math

    from livecoach.errors import ConfigError

    for option, value in (("--grade", args.grade), ("--power-w", args.power_w),
                          ("--speed-mps", args.speed_mps)):
        if value is not None and not math.isfinite(value):
            raise ConfigError(f"{option} {value}: expected a finite number")
    if not -0.5 <= args.grade <= 0.5:
        raise ConfigError(f"--grade {args.grade:g}: expected rise over run in [-0.5, 0.5]")
    if args.speed_mps is not None and not 0.0 <= args.speed_mps <= 150.0:
        raise ConfigError(f"--speed-mps {args.speed_mps:g}: expected a speed in [0, 150] m/s")
    if args.power_w is not None and not -5000.0 <= args.power_w <= 5000.0:
        raise ConfigError(f"--power-w {args.power_w:g}: expected a power in [-5000, 5000] W")



def run(args: argparse.Namespace) -> int:
    from livecoach.config.ridefile import load_ride_file
    from livecoach.physics.steady import steady_power_w, steady_speed_mps

    _check_options(args)
    ride = load_ride_file(args.config)
    model = ride.vehicle_model()
    rho = ride.air.density_kgpm3
    wind = ride.air.headwind_mps
    if args.table:
        rows = speed_table(ride, args.grade, range(50, int(ride.rider.pmax_w) + 1, 50))
        if args.json:
            print_json({"grade": args.grade, "air_density_kgpm3": rho, "rows": rows})
        else:
            print(f"steady speed on grade {args.grade:+.4f}, air {rho:.4f} kg/m^3, CdA {model.cda_m2} m^2, Crr {model.crr}")
            print(f"{'power W':>8} {'m/s':>7} {'km/h':>7} {'air share':>9}")
            for r in rows:
                if r["speed_mps"] is None:
                    print(f"{r['power_w']:>8.0f} {'-':>7} {'-':>7} {'-':>9}  (no steady speed)")
                    continue
                share = "-" if r["aero_share"] is None else f"{r['aero_share']:.1%}"
                print(f"{r['power_w']:>8.0f} {r['speed_mps']:>7.2f} {r['speed_kmh']:>7.1f} {share:>9}")
        return 0
    if args.power_w is not None:
        v = steady_speed_mps(args.power_w, args.grade, rho, model, wind)
        out = {"power_w": args.power_w, "speed_mps": v, "speed_kmh": v * 3.6, "grade": args.grade,
               "air_density_kgpm3": rho}
        text = f"{args.power_w:g} W -> {v:.3f} m/s ({v * 3.6:.2f} km/h) steady on grade {args.grade:+.4f}"
    else:
        p = steady_power_w(args.speed_mps, args.grade, rho, model, wind)
        out = {"power_w": p, "speed_mps": args.speed_mps, "speed_kmh": args.speed_mps * 3.6,
               "grade": args.grade, "air_density_kgpm3": rho}
        text = f"{args.speed_mps:g} m/s ({args.speed_mps * 3.6:.2f} km/h) steady needs {p:.1f} W at the crank"
    if args.json:
        print_json(out)
    else:
        print(text)
    return 0
