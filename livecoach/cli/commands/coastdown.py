"""``livecoach coastdown RECORDING``: CdA and Crr from the coasting stretches of a ride.

Finds the stretches ridden without pedalling (every power report at or
below ``[estimator] coast_power_w``, at least ``coast_min_s`` long) and fits
the coast-down road-load equation (SAE J2263 / ISO 10521-1 form) to them in
energy form, on the course's elevation profile. RECORDING is a recording
(``.lcrec``, carries its ride file) or a CSV ride (needs ``--config``).
Coast only where it is safe: a clear, closed course with the catch team in
place, within the event's rules.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from livecoach.cli.common import description_from_doc, print_json

NAME = "coastdown"
HELP = "fit CdA and Crr from the stretches of a recording ridden without pedalling"
DESCRIPTION = description_from_doc(__doc__, HELP)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("input", metavar="RECORDING", help="a recording (.lcrec) or a CSV ride (.csv, needs --config)")
    p.add_argument("--config", "-c", metavar="RIDE.toml",
                   help="ride file: required for a CSV ride; for a recording it replaces the recorded one")
    p.add_argument("--json", action="store_true", help="print the result as one JSON object")


def load_samples(path: Path, ride_path: str | None):
    """(ride, samples) from a recording (decoded) or a CSV ride."""
    from livecoach.config.ridefile import load_ride_file
    from livecoach.errors import ConfigError
    from livecoach.recording.reader import RecordingReader, is_recording

    ride = load_ride_file(ride_path) if ride_path else None
    if is_recording(path):
        from livecoach.pipeline.decode import Decoder
        from livecoach.stream.samples import Rejected

        reader = RecordingReader(path)
        if ride is None:
            if not reader.header.ride_text.strip():
                raise ConfigError(f"{path}: the recording's header holds no ride file; "
                                  "give one with --config RIDE.toml")
            ride = reader.header.ride_config(f"{path} (ride file in the header)")
        decoder = Decoder(ride)
        samples = []
        for event in reader.events():
            samples.extend(s for s in decoder.feed(event) if type(s) is not Rejected)
        return ride, samples, list(reader.warnings)
    if ride is None:
        raise ConfigError(f"{path}: not a livecoach recording; a CSV ride needs --config RIDE.toml")
    from livecoach.io.csv_ride import read_csv_ride

    csv_ride = read_csv_ride(path, ride)
    return ride, list(csv_ride.samples), list(csv_ride.notes)


def run(args: argparse.Namespace) -> int:
    from livecoach.errors import ConfigError
    from livecoach.estimate.coastdown import coastdown_fit

    path = Path(args.input)
    if not path.is_file():
        raise ConfigError(f"'{path}' not found")
    ride, samples, notes = load_samples(path, args.config)
    result = coastdown_fit(samples, ride)
    if args.json:
        out = result.to_dict()
        out["notes"] = notes
        print_json(out)
        return 0
    print(f"coast-down of {path.name}: {len(result.stretches)} stretches, {result.n_windows} windows")
    for s in result.stretches:
        print(f"  {s.t0_s:8.1f} .. {s.t1_s:8.1f} s   {s.v0_mps:5.1f} -> {s.v1_mps:5.1f} m/s  ({s.windows} windows)")
    print(f"CdA {result.cda_m2:.4f} +- {result.cda_sd_m2:.4f} m^2   "
          f"Crr {result.crr:.5f} +- {result.crr_sd:.5f}")
    print(f"road load F = {result.f0_n:.2f} N + {result.f2_nspm2:.5f} N s^2/m^2 x v_air^2 "
          f"(air {result.air_density_kgpm3:.4f} kg/m^3)")
    for n in notes:
        print(f"note: {n}")
    return 0
