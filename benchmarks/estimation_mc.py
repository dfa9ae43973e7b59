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

A second table asks whether the 60-s target (CdA within +-3 % 60 s after first
rolling above 8 m/s) is limited by the estimator or by the data: 60 s after
8 m/s it gives the live estimate's rms CdA error, its own reported sd and the
share of runs within +-3 %, beside the same for the best least-squares fit of
the same data -- the offline batch fit (livecoach.estimate.batch: time bases
aligned, power lag chosen by the data, the same prior, no forgetting) of every
sample received up to that moment.

With ``--sources N`` it then repeats that bound over N seeds (gusts 0.1 m/s, no
probe) with the simulator's survey error, power-meter noise or gusts removed,
to show which of them sets the limit.

    .venv/bin/python benchmarks/estimation_mc.py --seeds 100 --workers 2 --sources 20
    .venv/bin/python benchmarks/estimation_mc.py --seeds 20 --workers 2   # quick check

Runs on 2 cores in about 11 minutes for 100 seeds (the simulator integrates at
50 Hz here), about 2 minutes for 20.
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
#: The "first useful estimate" target: CdA within +-3 % this long after rolling above 8 m/s, s.
EARLY_S = 60.0


def _scenario(gust_rms_mps: float, patch: dict | None = None):
    import tomllib

    from sim.scenario import parse_scenario_text, resolve_scenario_path
    from sim.tomlwrite import dumps

    path = resolve_scenario_path("airspeed")
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    data["scenario"]["step_hz"] = 50
    data["weather"]["gust_rms_mps"] = gust_rms_mps
    data["weather"]["gust_time_s"] = 6.0
    for section, values in (patch or {}).items():
        data.setdefault(section, {}).update(values)
    return parse_scenario_text(dumps(data), f"airspeed scenario, gusts {gust_rms_mps} m/s", path.parent)


def _estimate(ride, samples, cda_true):
    from livecoach.estimate import LiveDragEstimator
    from livecoach.estimate.batch import BatchFitError, batch_fit, fit_windows

    est = LiveDragEstimator(ride)
    t8 = None
    last_bad = None
    first_ok = None
    sd60 = None
    at60 = None
    for n, s in enumerate(samples):
        if t8 is not None and at60 is None and s.t_s - t8 >= EARLY_S:
            # The live estimate 60 s after rolling above 8 m/s, and the best least-squares
            # fit of the same data: the batch fit (time bases aligned, the same prior) of
            # every sample received up to that moment.
            snap = est.snapshot()
            try:
                b60 = batch_fit(samples[:n], ride)
                b60_cda, b60_sd = b60.cda_m2, b60.cda_sd_m2
            except BatchFitError:
                b60_cda = b60_sd = None
            at60 = {"cda": snap.cda_m2, "cda_sd": snap.cda_sd_m2, "batch_cda": b60_cda,
                    "batch_cda_sd": b60_sd, "windows": snap.windows_used}
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
        "first_within_s": first_ok, "rel_sd_at_60s": sd60, "at60": at60,
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


#: --sources: the 60-s bound again with one noise source of the simulator removed.
SOURCES = {
    "as simulated": {},
    "no survey error": {"truth": {"elevation_error_m": 0.0}},
    "no power noise": {"power_meter": {"noise_pct": 0.0, "noise_w": 0.0}},
    "no gusts": {"weather": {"gust_rms_mps": 0.0}},
    "none of the three": {"truth": {"elevation_error_m": 0.0},
                          "power_meter": {"noise_pct": 0.0, "noise_w": 0.0},
                          "weather": {"gust_rms_mps": 0.0}},
}


def source_run(job: tuple[str, int]) -> dict:
    """The batch fit 60 s after rolling above 8 m/s (gusts 0.1 m/s, no probe) for one seed
    with the noise sources of SOURCES[name] removed: where the information limit comes from."""
    name, seed = job
    from livecoach.estimate import LiveDragEstimator
    from livecoach.estimate.batch import batch_fit
    from livecoach.pipeline.decode import Decoder
    from livecoach.stream.samples import AirSample, Rejected
    from sim.run import simulate

    sc = _scenario(0.1, SOURCES[name])
    run = simulate(sc, seed=seed)
    dec = Decoder(sc.ride)
    samples = [s for ev in run.events for s in dec.feed(ev) if type(s) is not Rejected]
    samples = [s if type(s) is not AirSample else AirSample(s.t_s, None, s.pressure_pa, s.temperature_c,
                                                            s.relative_humidity_pct) for s in samples]
    est = LiveDragEstimator(sc.ride)
    t8 = None
    n = len(samples)
    for i, s in enumerate(samples):
        if t8 is not None and s.t_s - t8 >= EARLY_S:
            n = i
            break
        est.feed(s)
        snap = est.snapshot()
        if t8 is None and snap.speed_mps is not None and snap.speed_mps > 8.0:
            t8 = snap.t_s
    b = batch_fit(samples[:n], sc.ride)
    c = sc.truth.cda_m2
    return {"source": name, "seed": seed, "err_rel": (b.cda_m2 - c) / c, "sd_rel": b.cda_sd_m2 / c}


def _print_sources(seeds: int, workers: int) -> None:
    jobs = [(name, 1000 + s) for name in SOURCES for s in range(seeds)]
    t0 = time.perf_counter()
    with Pool(workers) as pool:
        rows = pool.map(source_run, jobs, chunksize=2)
    print(f"\nWhere the 60-s limit comes from: batch CdA {EARLY_S:.0f} s after 8 m/s, gusts 0.1 m/s, "
          f"no probe, seeds 1000..{999 + seeds} ({time.perf_counter() - t0:.0f} s)")
    print(f"{'simulated noise':>20} | {'rms':>6} {'bias':>6} {'mean sd':>7} {'<=3%':>5}")
    for name in SOURCES:
        r = [x for x in rows if x["source"] == name]
        e = [x["err_rel"] for x in r]
        print(f"{name:>20} | {100 * _rms(e):5.2f}% {100 * statistics.mean(e):+5.2f}% "
              f"{100 * statistics.mean(x['sd_rel'] for x in r):6.2f}% "
              f"{sum(abs(d) <= 0.03 for d in e) / len(e):5.2f}")


def _rms(xs):
    return math.sqrt(sum(x * x for x in xs) / len(xs))


def _at60(e: list[dict], rs: list[dict]) -> dict:
    """Live and batch CdA 60 s after rolling above 8 m/s: rms relative error, mean reported
    relative sd, +-2 sd coverage, and the share of runs within +-3 %."""
    pairs = [(x["at60"], r["cda_true"]) for x, r in zip(e, rs)
             if x.get("at60") and x["at60"]["batch_cda"] is not None]
    if not pairs:
        return {}
    live = [(a["cda"] - c) / c for a, c in pairs]
    bat = [(a["batch_cda"] - c) / c for a, c in pairs]
    return {
        "at60_runs": len(pairs),
        "at60_live_cda_rms_rel": _rms(live),
        "at60_live_cda_sd_rel": statistics.mean(a["cda_sd"] / c for a, c in pairs),
        "at60_live_cover_2sd": sum(abs(a["cda"] - c) <= 2 * a["cda_sd"] for a, c in pairs) / len(pairs),
        "at60_live_within_3pct": sum(abs(d) <= 0.03 for d in live) / len(pairs),
        "at60_batch_cda_rms_rel": _rms(bat),
        "at60_batch_cda_sd_rel": statistics.mean(a["batch_cda_sd"] / c for a, c in pairs),
        "at60_batch_within_3pct": sum(abs(d) <= 0.03 for d in bat) / len(pairs),
        "at60_live_over_batch": _rms(live) / _rms(bat),
    }


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
                **_at60(e, rs),
                "false_alarms": sum(x["alarms"] for x in e),
                "cda_true_m2": rs[0]["cda_true"], "crr_true": rs[0]["crr_true"],
            })
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seeds", type=int, default=100)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--json", metavar="OUT", help="also write the table and every run as JSON")
    ap.add_argument("--sources", type=int, metavar="SEEDS", default=0,
                    help="also the 60-s batch bound with each noise source removed, over SEEDS seeds")
    args = ap.parse_args(argv)
    if args.seeds <= 0:  # --seeds 0 --sources N: the noise-source table only
        if args.sources:
            _print_sources(args.sources, args.workers)
        return 0
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
    print(f"\nCdA {EARLY_S:.0f} s after first rolling above 8 m/s (live estimate, and the batch "
          "least-squares fit of the same data up to then: time bases aligned, the same prior)")
    print(f"{'gust':>5} {'probe':>5} | {'live rms':>8} {'live sd':>7} {'cover':>5} {'<=3%':>5} |"
          f" {'batch rms':>9} {'batch sd':>8} {'<=3%':>5} | {'live/batch':>10}")
    for t in table:
        if "at60_runs" not in t:
            continue
        print(f"{t['gust_rms_mps']:>5.1f} {'yes' if t['probe'] else 'no':>5} | "
              f"{100 * t['at60_live_cda_rms_rel']:7.2f}% {100 * t['at60_live_cda_sd_rel']:6.2f}% "
              f"{t['at60_live_cover_2sd']:5.2f} {t['at60_live_within_3pct']:5.2f} | "
              f"{100 * t['at60_batch_cda_rms_rel']:8.2f}% {100 * t['at60_batch_cda_sd_rel']:7.2f}% "
              f"{t['at60_batch_within_3pct']:5.2f} | {t['at60_live_over_batch']:10.2f}")
    print("rms: rms relative error of CdA across runs; sd: mean reported relative sd; cover: share of "
          "runs with |error| <= 2 sd; <=3%: share of runs within +-3 % of the truth")
    print(f"truth CdA {table[0]['cda_true_m2']} m^2, Crr {table[0]['crr_true']}")
    if args.json:
        Path(args.json).write_text(json.dumps({"table": table, "runs": rows}, indent=1))
    if args.sources:
        _print_sources(args.sources, args.workers)
    return 0


if __name__ == "__main__":
    sys.exit(main())
