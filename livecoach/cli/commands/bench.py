"""``livecoach bench SCENARIO``: Monte Carlo bench runs of the whole module on the simulator."""

from __future__ import annotations

import argparse

NAME = "bench"
HELP = "Monte Carlo bench: simulate a scenario over many seeds through the whole module and summarise"
DESCRIPTION = (
    "Run SCENARIO (a name from sim/scenarios/ or a path to a scenario file) for --runs "
    "seeds in --workers processes, each a closed-loop run of the simulator through the "
    "module's pipeline, and report trap speeds (achieved, planned, optimum), CdA/Crr "
    "errors against the truth and whether the +-2 sigma intervals hold it, cue and alarm "
    "counts, and faults survived."
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("scenario", metavar="SCENARIO", help="scenario name (sim/scenarios/NAME.toml) or path")
    p.add_argument("--runs", type=int, default=10, help="number of seeds (default 10)")
    p.add_argument("--workers", type=int, default=None,
                   help="parallel processes (default: the number of CPUs, at most --runs)")
    p.add_argument("--seed", type=int, default=None,
                   help="first seed (default: the scenario's); runs use seed, seed+1, ...")
    p.add_argument("--rider", choices=("scenario", "coach", "scripted", "constant"), default="scenario",
                   help="rider behaviour: as the scenario says (default), follow the coach, the "
                        "scenario's scripted profile, or constant power at the highest level the "
                        "true budget allows")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--coach", dest="coach", action="store_true", default=None,
                   help="coach even when the rider does not follow (cue counts for a scripted rider)")
    g.add_argument("--no-coach", dest="coach", action="store_false",
                   help="estimation only: no plan, no cues (much faster)")
    p.add_argument("--records", metavar="FILE.jsonl", help="also write one JSON record per run to FILE")
    p.add_argument("--json", action="store_true", help="print the records and the summary as JSON")


def _progress_callback(total: int):
    """A rich progress bar on a terminal, a plain line every 10 % otherwise."""
    import sys

    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TimeElapsedColumn, TimeRemainingColumn

    console = Console(stderr=True)
    if console.is_terminal:
        bar = Progress("[progress.description]{task.description}", BarColumn(), MofNCompleteColumn(),
                       TimeElapsedColumn(), TimeRemainingColumn(), console=console, transient=True)
        task = bar.add_task("bench runs", total=total)
        bar.start()

        def update(done: int, _total: int) -> None:
            bar.update(task, completed=done)
            if done >= _total:
                bar.stop()

        return update, bar.stop
    step = max(1, total // 10)

    def plain(done: int, _total: int) -> None:
        if done % step == 0 or done == _total:
            print(f"bench: {done}/{_total} runs done", file=sys.stderr, flush=True)

    return plain, lambda: None


def _fmt(x, spec: str = ".4f", scale: float = 1.0) -> str:
    return "-" if x is None else format(x * scale, spec)


def print_summary(scenario: str, summary: dict) -> None:
    """The summary as a few lines of text."""
    print(f"bench {scenario}: {summary['runs']} runs, {summary['failed']} failed")
    if summary["runs"] == summary["failed"]:
        return
    ts = summary["trap_speed_mps"]
    print("trap speed, m/s          mean      sd       min      max")
    for key in ("achieved", "module_measured", "planned", "optimum"):
        s = ts[key]
        print(f"  {key:<20} {_fmt(s['mean'], '8.3f')} {_fmt(s['sd'], '7.3f')} "
              f"{_fmt(s['min'], '8.3f')} {_fmt(s['max'], '8.3f')}")
    r = ts["achieved_over_optimum"]
    bound = " (the optimum ignores the scenario's drag steps: an upper bound)" if summary.get(
        "optimum_upper_bound") else ""
    print(f"  achieved / optimum   {_fmt(r['mean'], '8.2%')} (worst {_fmt(r['min'], '.2%')}){bound}")
    for name, label in (("cda", "CdA"), ("crr", "Crr")):
        e = summary[name]
        ep, bp = e["error_pct"], e["batch_error_pct"]
        width = e["mean_2sd_interval_width"]
        print(f"{label} error: bias {_fmt(ep['mean'], '+.2f')} %, sd {_fmt(ep['sd'], '.2f')} %, "
              f"rms {_fmt(ep['rms'], '.2f')} %; batch rms {_fmt(bp['rms'], '.2f')} % "
              f"(live/batch {_fmt(e['live_over_batch_rms'], '.2f')}); +-2 sd holds the truth in "
              f"{_fmt(e['within_2sd_share'], '.0%')} of runs (mean width {_fmt(width, '.3g')})")
    cues = ", ".join(f"{k} {v:.1f}" for k, v in summary["cues_per_run"].items()) or "none"
    print(f"cues per run: {cues}")
    a = summary["alarms"]
    print(f"drag-change alarms: {a['runs_with_alarm']} run(s) with an alarm, mean {_fmt(a['mean'], '.2f')} per run")
    u = summary["first_useful_cda_s"]
    print(f"first CdA within 3 % of the truth: mean {_fmt(u['mean'], '.0f')} s (worst {_fmt(u['max'], '.0f')} s) "
          f"after passing 8 m/s; within 60 s in {_fmt(u['share_within_60_s'], '.0%')} of runs")
    f = summary["faults"]
    if f["injected"]:
        print(f"faults: {f['survived']} of {f['injected']} injected survived")
    else:
        print("faults: none injected")


def run(args: argparse.Namespace) -> int:
    import json
    import os

    from livecoach.cli.common import print_json
    from livecoach.errors import ConfigError
    from sim.bench import run_bench, summarise
    from sim.scenario import load_scenario, resolve_scenario_path

    if args.runs < 1:
        raise ConfigError(f"--runs {args.runs}: give at least 1 run")
    path = resolve_scenario_path(args.scenario)
    scenario = load_scenario(path)          # validate once here: errors exit 2 before any work
    first = scenario.seed if args.seed is None else args.seed
    seeds = [first + i for i in range(args.runs)]
    workers = args.workers if args.workers is not None else (os.cpu_count() or 1)
    if workers < 1:
        raise ConfigError(f"--workers {workers}: give at least 1")
    workers = min(workers, args.runs)
    update, stop = _progress_callback(len(seeds))
    try:
        records = run_bench(str(path), seeds, workers, args.rider, args.coach, update)
    finally:
        stop()
    summary = summarise(records)
    if args.records:
        with open(args.records, "w", encoding="utf-8") as fh:
            for rec in records:
                fh.write(json.dumps(rec, sort_keys=True, default=str) + "\n")
    if args.json:
        print_json({"scenario": scenario.name, "source": str(path), "seeds": seeds,
                    "workers": workers, "rider": args.rider, "records": records, "summary": summary})
    else:
        print_summary(scenario.name, summary)
        for rec in records:
            if "error" in rec:
                print(f"  seed {rec['seed']}: {rec['error']}")
    return 1 if summary["failed"] else 0
