"""Monte-Carlo check of the live drag estimator on the bench simulator (issue 5 targets).

For each gust level (0.1 and 0.3 m/s rms) and seed, the simulator (sim/) rides
the airspeed scenario (invented course, 6.76 km standing-start run-up, power
+-1.5 % + 2 W at 2 Hz as interval averages, wheel event times at 1/1024 s, 3 cm
survey error every 100 m, an air-speed probe with 1 % random error). Every run
is estimated twice from the same decoded samples: with the probe's readings and
without them (ground speed + configured wind). Per case it prints the absolute
rms errors of the final live CdA and Crr, the batch fit's, their ratio, the
share of runs whose +-2 sigma interval holds the truth, the mean interval width
(4 sigma), and the time from first rolling above 8 m/s until CdA stays within
+-3 % of the truth.

    .venv/bin/python benchmarks/estimation_mc.py --seeds 100 --workers 2

Runs on 2 cores in about five minutes for 100 seeds (the simulator integrates at
50 Hz here).
"""

from __future__ import annotations

import argparse
import json
import math
import statistics
import sys
import time
from multiprocessing import Pool
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

GUSTS = (0.1, 0.3)


def _scenario(gust_rms_mps: float):
    import tomllib

    from sim.scenario import parse_scenario_text, resolve_scenario_path
    from sim.tomlwrite import dumps

    path = resolve_scenario_path("airspeed")
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    data["scenario"]["step_hz"] = 50
    data["weather"]["gust_rms_mps"] = gust_rms_mps
    data["weather"]["gust_time_s"] = 6.0
    return parse_scenario_text(dumps(data), f"airspeed scenario, gusts {gust_rms_mps} m/s", path.parent)


def _estimate(ride, samples, cda_true):
    from livecoach.estimate import LiveDragEstimator
    from livecoach.estimate.batch import fit_windows

    est = LiveDragEstimator(ride)
    t8 = None
    last_bad = None
    first_ok = None
    sd60 = None
    for s in samples:
        est.feed(s)
        if type(s).__name__ in ("WheelSample", "PowerSample"):
            snap = est.snapshot()
            if t8 is None and snap.speed_mps is not None and snap.speed_mps > 8.0:
                t8 = snap.t_s
            if abs(snap.cda_m2 - cda_true) > 0.03 * cda_true:
                last_bad = snap.t_s
            elif t8 is not None and first_ok is None:
                first_ok = snap.t_s - t8
            if t8 is not None and sd60 is None and snap.t_s - t8 >= 60.0:
                sd60 = snap.cda_sd_m2 / snap.cda_m2
    snap = est.snapshot()
    batch = fit_windows(list(est.all_windows), ride)
    useful = None if t8 is None else max(0.0, (last_bad if last_bad is not None else t8) - t8)
    return {
        "cda": snap.cda_m2, "cda_sd": snap.cda_sd_m2, "crr": snap.crr, "crr_sd": snap.crr_sd,
        "batch_cda": batch.cda_m2, "batch_crr": batch.crr, "useful_s": useful,
        "first_within_s": first_ok, "rel_sd_at_60s": sd60,
        "alarms": len(est.pop_alarms()), "lag_s": snap.power_lag_s, "scale": snap.noise_scale,
    }


def one_run(job: tuple[float, int]) -> dict:
    gust, seed = job
    from livecoach.pipeline.decode import Decoder
    from livecoach.stream.samples import AirSample, Rejected
    from sim.run import simulate

    sc = _scenario(gust)
    run = simulate(sc, seed=seed)
    ride = sc.ride
    dec = Decoder(ride)
    samples = []
    for ev in run.events:
        samples.extend(s for s in dec.feed(ev) if type(s) is not Rejected)
    truth = sc.truth
    no_probe = [s for s in samples if type(s) is not AirSample or s.airspeed_mps is None]
    no_probe = [s if type(s) is not AirSample else AirSample(s.t_s, None, s.pressure_pa, s.temperature_c,
                                                             s.relative_humidity_pct) for s in no_probe]
    return {
        "gust": gust, "seed": seed, "cda_true": truth.cda_m2, "crr_true": truth.crr,
        "probe": _estimate(ride, samples, truth.cda_m2),
        "no_probe": _estimate(ride, no_probe, truth.cda_m2),
    }


def _rms(xs):
    return math.sqrt(sum(x * x for x in xs) / len(xs))


def summarise(rows: list[dict]) -> list[dict]:
    out = []
    for gust in GUSTS:
        for case in ("no_probe", "probe"):
            rs = [r for r in rows if r["gust"] == gust]
            if not rs:
                continue
            e = [r[case] for r in rs]
            dc = [x["cda"] - r["cda_true"] for x, r in zip(e, rs)]
            dr = [x["crr"] - r["crr_true"] for x, r in zip(e, rs)]
            bc = [x["batch_cda"] - r["cda_true"] for x, r in zip(e, rs)]
            br = [x["batch_crr"] - r["crr_true"] for x, r in zip(e, rs)]
            useful = [x["useful_s"] for x in e if x["useful_s"] is not None]
            out.append({
                "gust_rms_mps": gust, "probe": case == "probe", "runs": len(rs),
                "cda_rms_m2": _rms(dc), "cda_bias_m2": statistics.mean(dc),
                "batch_cda_rms_m2": _rms(bc), "cda_live_over_batch": _rms(dc) / _rms(bc),
                "crr_rms": _rms(dr), "crr_bias": statistics.mean(dr),
                "batch_crr_rms": _rms(br), "crr_live_over_batch": _rms(dr) / _rms(br),
                "cda_cover_2sd": sum(abs(d) <= 2 * x["cda_sd"] for d, x in zip(dc, e)) / len(e),
                "crr_cover_2sd": sum(abs(d) <= 2 * x["crr_sd"] for d, x in zip(dr, e)) / len(e),
                "cda_width_4sd_m2": statistics.mean(4 * x["cda_sd"] for x in e),
                "crr_width_4sd": statistics.mean(4 * x["crr_sd"] for x in e),
                "useful_median_s": statistics.median(useful) if useful else None,
                "first_within_median_s": statistics.median(
                    [x["first_within_s"] for x in e if x["first_within_s"] is not None] or [math.nan]),
                "first_within_60s": sum((x["first_within_s"] or 1e9) <= 60.0 for x in e) / len(e),
                "rel_sd_at_60s_median": statistics.median(
                    [x["rel_sd_at_60s"] for x in e if x["rel_sd_at_60s"] is not None] or [math.nan]),
                "useful_within_60s": sum(u <= 60.0 for u in useful) / len(e),
                "false_alarms": sum(x["alarms"] for x in e),
                "cda_true_m2": rs[0]["cda_true"], "crr_true": rs[0]["crr_true"],
            })
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seeds", type=int, default=100)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--json", metavar="OUT", help="also write the table and every run as JSON")
    args = ap.parse_args(argv)
    jobs = [(g, 1000 + s) for g in GUSTS for s in range(args.seeds)]
    t0 = time.perf_counter()
    with Pool(args.workers) as pool:
        rows = []
        for i, r in enumerate(pool.imap_unordered(one_run, jobs, chunksize=2), 1):
            rows.append(r)
            if i % 20 == 0:
                print(f"  {i}/{len(jobs)} runs, {time.perf_counter() - t0:.0f} s", file=sys.stderr)
    table = summarise(rows)
    print(f"{len(jobs)} simulated run-ups (airspeed scenario, 6.76 km, seeds 1000..{999 + args.seeds}) "
          f"in {time.perf_counter() - t0:.0f} s on {args.workers} workers")
    hdr = (f"{'gust':>5} {'probe':>5} | {'CdA rms':>8} {'batch':>8} {'ratio':>5} {'cover':>5} {'4sd':>8} |"
           f" {'Crr rms':>8} {'batch':>8} {'ratio':>5} {'cover':>5} {'4sd':>8} | {'stays':>5} {'<=60s':>5}"
           f" {'first':>5} {'<=60s':>5} {'sd@60':>5} | {'alarms':>6}")
    print(hdr)
    for t in table:
        print(f"{t['gust_rms_mps']:>5.1f} {'yes' if t['probe'] else 'no':>5} | "
              f"{t['cda_rms_m2']:8.5f} {t['batch_cda_rms_m2']:8.5f} {t['cda_live_over_batch']:5.2f} "
              f"{t['cda_cover_2sd']:5.2f} {t['cda_width_4sd_m2']:8.5f} | "
              f"{t['crr_rms']:8.6f} {t['batch_crr_rms']:8.6f} {t['crr_live_over_batch']:5.2f} "
              f"{t['crr_cover_2sd']:5.2f} {t['crr_width_4sd']:8.6f} | "
              f"{(t['useful_median_s'] or float('nan')):5.0f} {t['useful_within_60s']:5.2f} "
              f"{t['first_within_median_s']:5.0f} {t['first_within_60s']:5.2f} "
              f"{100 * t['rel_sd_at_60s_median']:4.1f}% | {t['false_alarms']:6d}")
    print("ratio: live rms / batch rms; cover: share of runs with |error| <= 2 sd; 4sd: mean width of the "
          "+-2 sd interval; stays/first: median s from rolling above 8 m/s until CdA stays within / first "
          "comes within +-3 % of the truth, and the share of runs where that is <= 60 s; sd@60: median "
          "reported relative sd of CdA 60 s after 8 m/s; alarms: drag-change alarms (none should occur)")
    print(f"truth CdA {table[0]['cda_true_m2']} m^2, Crr {table[0]['crr_true']}")
    if args.json:
        Path(args.json).write_text(json.dumps({"table": table, "runs": rows}, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
