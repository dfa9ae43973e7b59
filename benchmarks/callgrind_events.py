"""Benchmark: machine-independent cost -- instructions per event under valgrind's callgrind.

Wall-clock figures depend on the machine and on whoever else uses it;
instruction counts do not (they repeat to about 0.01 % with
``PYTHONHASHSEED=0 OPENBLAS_NUM_THREADS=1``). The events are the closed-loop
default run-up recorded by ``pipeline_cost.py`` (cached). Each configuration
runs twice under ``valgrind --tool=callgrind``, feeding the first ``N1`` and
the first ``N2`` events to a fresh pipeline; start-up, imports and file
reading are the same in both runs, so

    instructions per event = (I(N2) - I(N1)) / (N2 - N1)

counts events N1..N2 only (mid run-up, rolling). Configurations: estimation
only (no plan), coaching (the plan; re-plans once per second of ride as on
the day, averaged over the events), one re-plan alone
(:class:`livecoach.coach.predict.Replanner`, from states along the plan),
and -- from those -- coaching between re-plans (the coaching figure less the
window's re-plans, counted natively, at the mean re-plan cost).

Estimated time on a Raspberry Pi 4 (ASSUMPTIONS, not measurements):
Cortex-A72 at 1.5 GHz; about 1.0 instruction per cycle for CPython's
interpreter loop on that core (from memory; the A72 is a 3-wide out-of-order
core, and interpreter code with its many branches and loads runs well below
its peak); AArch64 needs about 1.1 times the x86-64 instruction count for the
same work (from memory). A range for IPC 0.7-1.3 is printed too.

Run: .venv/bin/python benchmarks/callgrind_events.py [--json]
(inner use: ``--inner events|replan --count N``)
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import benchlib  # noqa: E402

#: Assumptions for the Raspberry Pi 4 estimate (see the module docstring).
PI4_CLOCK_HZ = 1.5e9
PI4_IPC = 1.0
PI4_IPC_RANGE = (0.7, 1.3)
AARCH64_INSTRUCTION_RATIO = 1.1

WINDOW = (1000, 2000)        # events N1, N2
REPLAN_WINDOW = (2, 12)      # re-plans K1, K2


def inner(kind: str, count: int, recording: str, coaching: bool) -> None:
    """What runs under valgrind: the same set-up, then ``count`` events or re-plans."""
    from livecoach.pipeline.processor import Pipeline

    ride, events, plan = benchlib.read_events(Path(recording))
    if kind == "events":
        pipe = Pipeline(ride, plan if coaching else None, keep_for_batch=False)
        for ev in events[:count]:
            pipe.feed(ev)
        return
    from livecoach.coach.live import _coach_config
    from livecoach.coach.predict import Replanner

    rp = Replanner(ride, _coach_config(ride).replan_max_evaluations)
    previous = None
    for k in range(count):
        d = 200.0 + 90.0 * k
        pt = plan.at(d)
        previous = rp.replan(d, pt.planned_speed_mps, pt.planned_w_prime_balance_j,
                             ride.vehicle.cda_m2 * 1.05, ride.vehicle.crr, previous)


_COLLECTED = re.compile(r"Collected\s*:\s*(\d+)")


def instructions(kind: str, count: int, recording: Path, coaching: bool) -> int:
    env = dict(os.environ, PYTHONHASHSEED="0", OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1")
    argv = ["valgrind", "--tool=callgrind", "--callgrind-out-file=/dev/null",
            sys.executable, str(Path(__file__).resolve()), "--inner", kind, "--count", str(count),
            "--recording", str(recording)]
    if coaching:
        argv.append("--coaching")
    proc = subprocess.run(argv, env=env, capture_output=True, text=True, timeout=3600)
    m = _COLLECTED.search(proc.stderr)
    if proc.returncode != 0 or not m:
        raise RuntimeError(f"valgrind failed ({proc.returncode}): {proc.stderr[-1500:]}")
    return int(m.group(1))


def pi4_us(instr: float) -> dict:
    """Estimated time on a Raspberry Pi 4 for ``instr`` x86-64 instructions (assumptions above)."""
    arm = instr * AARCH64_INSTRUCTION_RATIO
    return {
        "estimate_us": arm / (PI4_IPC * PI4_CLOCK_HZ) * 1e6,
        "range_us": [arm / (PI4_IPC_RANGE[1] * PI4_CLOCK_HZ) * 1e6, arm / (PI4_IPC_RANGE[0] * PI4_CLOCK_HZ) * 1e6],
    }


def run(say=print) -> dict:
    if shutil.which("valgrind") is None:
        return {"skipped": "valgrind is not installed"}
    path = benchlib.cached_recording(benchlib.RUNUP, say=say)
    out: dict = {"window_events": list(WINDOW), "assumptions": {
        "pi4_clock_hz": PI4_CLOCK_HZ, "pi4_instructions_per_cycle": PI4_IPC,
        "pi4_ipc_range": list(PI4_IPC_RANGE), "aarch64_per_x86_64_instructions": AARCH64_INSTRUCTION_RATIO,
        "note": "assumptions (from memory), not measurements on a Raspberry Pi 4"}}
    for name, coaching in (("estimation_only", False), ("coaching", True)):
        i1 = instructions("events", WINDOW[0], path, coaching)
        i2 = instructions("events", WINDOW[1], path, coaching)
        per = (i2 - i1) / (WINDOW[1] - WINDOW[0])
        out[name] = {"instructions_per_event": per, "pi4": pi4_us(per)}
    k1 = instructions("replan", REPLAN_WINDOW[0], path, True)
    k2 = instructions("replan", REPLAN_WINDOW[1], path, True)
    per = (k2 - k1) / (REPLAN_WINDOW[1] - REPLAN_WINDOW[0])
    out["replan"] = {"instructions_per_replan": per, "pi4": pi4_us(per)}
    # The coaching figure averages the re-plans in the window over its events; the
    # re-plans counted here (natively, same events) give the cost of the other events.
    n_replans = replans_in_window(path)
    other = out["coaching"]["instructions_per_event"] - n_replans * per / (WINDOW[1] - WINDOW[0])
    out["coaching"]["replans_in_window"] = n_replans
    out["coaching_between_replans"] = {"instructions_per_event": other, "pi4": pi4_us(other),
                                       "note": "estimated: coaching minus the window's re-plans at the "
                                               "mean re-plan cost"}
    return out


def replans_in_window(path: Path) -> int:
    """Re-plans the coach runs while the events N1..N2 are fed (counted without valgrind)."""
    from livecoach.pipeline.processor import Pipeline

    ride, events, plan = benchlib.read_events(path)
    pipe = Pipeline(ride, plan, keep_for_batch=False)
    for ev in events[:WINDOW[0]]:
        pipe.feed(ev)
    before = pipe.coach.replans
    for ev in events[WINDOW[0]:WINDOW[1]]:
        pipe.feed(ev)
    return pipe.coach.replans - before


def print_report(r: dict) -> None:
    if "skipped" in r:
        print(f"callgrind: skipped ({r['skipped']})")
        return
    for name in ("estimation_only", "coaching", "coaching_between_replans"):
        x = r[name]
        p = x["pi4"]
        print(f"{name:24s} {x['instructions_per_event'] / 1e3:8.1f} k instructions/event -> Raspberry Pi 4 "
              f"~{p['estimate_us']:.0f} us/event (range {p['range_us'][0]:.0f}-{p['range_us'][1]:.0f}; assumptions)")
    x = r["replan"]
    p = x["pi4"]
    print(f"{'one re-plan':24s} {x['instructions_per_replan'] / 1e6:8.1f} M instructions -> Raspberry Pi 4 "
          f"~{p['estimate_us'] / 1e3:.0f} ms (range {p['range_us'][0] / 1e3:.0f}-{p['range_us'][1] / 1e3:.0f})")
    a = r["assumptions"]
    print(f"  assumed: Cortex-A72 {a['pi4_clock_hz'] / 1e9:.1f} GHz, IPC {a['pi4_instructions_per_cycle']}, "
          f"AArch64/x86-64 instruction ratio {a['aarch64_per_x86_64_instructions']} ({a['note']})")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--inner", choices=("events", "replan"), help=argparse.SUPPRESS)
    ap.add_argument("--count", type=int, help=argparse.SUPPRESS)
    ap.add_argument("--recording", help=argparse.SUPPRESS)
    ap.add_argument("--coaching", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    if args.inner:
        inner(args.inner, args.count, args.recording, args.coaching)
        return
    r = run()
    benchlib.write_results("callgrind", r)
    if args.json:
        print(json.dumps(r, indent=2, sort_keys=True))
    else:
        print_report(r)


if __name__ == "__main__":
    main()
