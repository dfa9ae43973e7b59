"""Trial: does compiling the pipeline's Python with Cython, unchanged, speed up replay?

Replay runs the very pipeline the live loop runs (that is what makes a
recording reproduce its cues), so its speed is the speed of that Python.
This trial answers one question with a measurement: how much of the replay
target (issue 8: >= 50,000 events/s) does a C compiler buy without
rewriting the code?

It copies ``livecoach/`` to a temporary folder, compiles the modules on the
replay path (codecs, decoding, estimator, pipeline, coach, plan, rider,
physics, stream records) to C extensions with Cython 3 (``cythonize``, then
``build_ext --inplace`` with the machine's C compiler; nothing in the
checkout changes), then replays the one-hour recording of
``replay_throughput.py`` in memory with the pure-Python package and with
the compiled copy, each in its own child process, alternately, ``--rounds``
times, and prints the best CPU time per event of each. Both must give the
same outputs: a digest of every state and notice of the replay is compared
(a compiled copy that changed a result would make the comparison void).

Needs Cython (``pip install -e '.[bench]'``) and a C compiler; compiling
takes several minutes on two cores. Not part of ``make bench``.

Run: .venv/bin/python benchmarks/compiled_trial.py [--rounds N] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import benchlib  # noqa: E402

#: Folders (and single modules) compiled: everything a replayed event passes through.
COMPILED = ("codecs", "pipeline", "estimate", "stream", "coach", "plan", "rider", "physics",
            "recording/reader.py", "recording/format.py")

_SETUP = """
import glob, sys
from setuptools import setup
from Cython.Build import cythonize
mods = []
for item in {compiled!r}:
    pats = [f"livecoach/{{item}}"] if item.endswith(".py") else [f"livecoach/{{item}}/*.py"]
    for pat in pats:
        mods += [m for m in sorted(glob.glob(pat)) if not m.endswith("__init__.py")]
setup(name="livecoach-compiled-trial", packages=[],
      ext_modules=cythonize(mods, language_level=3, quiet=True, compiler_directives={{"binding": True}}),
      script_args=["build_ext", "--inplace", "-j", "2"])
"""

_INNER = """
import gc, hashlib, json, sys, time
import livecoach
from livecoach.pipeline.processor import Pipeline
from livecoach.recording.reader import RecordingReader
from livecoach.recording.replay import plan_from_header
path = sys.argv[1]
reader = RecordingReader(path)
ride = reader.header.ride_config(path)
plan = plan_from_header(reader.header, ride)
events = list(reader.events())
out = {"package": livecoach.__file__, "events": len(events)}
for name, pl in (("estimation_only", None), ("coaching", plan)):
    gc.collect()
    pipe = Pipeline(ride, pl)
    feed = pipe.feed
    t0 = time.process_time()
    for e in events:
        feed(e)
    out[name + "_cpu_s"] = time.process_time() - t0
    h = hashlib.sha256()
    pipe = Pipeline(ride, pl)
    for e in events:
        h.update(repr(pipe.feed(e)).encode())
    out[name + "_digest"] = h.hexdigest()
print(json.dumps(out))
"""


def compile_copy(dest: Path, say=print) -> float:
    """Copy the package to ``dest`` and compile it there; returns the build time (s)."""
    shutil.copytree(benchlib.ROOT / "livecoach", dest / "livecoach",
                    ignore=shutil.ignore_patterns("__pycache__", "*.so", "*.c"))
    (dest / "setup_trial.py").write_text(_SETUP.format(compiled=COMPILED))
    say(f"  compiling {', '.join(COMPILED)} with Cython (several minutes) ...")
    t0 = time.monotonic()
    proc = subprocess.run([sys.executable, "setup_trial.py"], cwd=dest, capture_output=True, text=True)
    if proc.returncode != 0:
        raise RuntimeError(f"compiling failed:\n{proc.stderr[-3000:]}")
    n = len(list((dest / "livecoach").rglob("*.so")))
    if n == 0:
        raise RuntimeError("compiling produced no extension modules")
    build_s = time.monotonic() - t0
    say(f"  {n} modules compiled in {build_s:.0f} s")
    return build_s


def _replay(package_root: Path, recording: Path) -> dict:
    env = dict(os.environ, PYTHONPATH=str(package_root), PYTHONHASHSEED="0")
    proc = subprocess.run([sys.executable, "-c", _INNER, str(recording)], cwd=package_root, env=env,
                          capture_output=True, text=True, timeout=3600)
    if proc.returncode != 0:
        raise RuntimeError(f"replay under {package_root} failed:\n{proc.stderr[-3000:]}")
    r = json.loads(proc.stdout)
    if not r["package"].startswith(str(package_root)):
        raise RuntimeError(f"the replay imported {r['package']}, not the copy under {package_root}")
    return r


def run(rounds: int, say=print) -> dict:
    try:
        import Cython  # noqa: F401
    except ImportError:
        raise SystemExit("compiled_trial.py needs Cython: .venv/bin/pip install -e '.[bench]'") from None
    recording = benchlib.cached_recording(benchlib.HOUR, say=say)
    with tempfile.TemporaryDirectory(prefix="livecoach-compiled-") as tmp:
        build_s = compile_copy(Path(tmp), say=say)
        runs: dict[str, list[dict]] = {"python": [], "compiled": []}
        for i in range(rounds):
            for name, root in (("python", benchlib.ROOT), ("compiled", Path(tmp))):
                runs[name].append(_replay(root, recording))
                say(f"  round {i + 1}: {name} done")
    n = runs["python"][0]["events"]
    out: dict = {"events": n, "rounds": rounds, "build_s": build_s, "compiled": list(COMPILED)}
    for name, rs in runs.items():
        for mode in ("estimation_only", "coaching"):
            best = min(r[mode + "_cpu_s"] for r in rs)
            out[f"{name}_{mode}_us_per_event"] = best * 1e6 / n
            out[f"{name}_{mode}_events_per_s"] = n / best
    out["same_outputs"] = all(
        r[m + "_digest"] == runs["python"][0][m + "_digest"]
        for rs in runs.values() for r in rs for m in ("estimation_only", "coaching"))
    for mode in ("estimation_only", "coaching"):
        out[f"speedup_{mode}"] = (out[f"python_{mode}_us_per_event"]
                                  / out[f"compiled_{mode}_us_per_event"])
    return out


def print_report(r: dict) -> None:
    print(f"one-hour recording, {r['events']} events in memory; best CPU time of {r['rounds']} rounds")
    for mode in ("estimation_only", "coaching"):
        print(f"  {mode:16s} python {r[f'python_{mode}_us_per_event']:6.1f} us/event "
              f"({r[f'python_{mode}_events_per_s']:,.0f}/s)   compiled "
              f"{r[f'compiled_{mode}_us_per_event']:6.1f} us/event "
              f"({r[f'compiled_{mode}_events_per_s']:,.0f}/s)   x{r[f'speedup_{mode}']:.2f}")
    print(f"  same outputs (digest of every state and notice): {'yes' if r['same_outputs'] else 'NO'}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rounds", type=int, default=3, help="alternating runs of each (best is kept)")
    ap.add_argument("--json", action="store_true", help="print the results as JSON")
    args = ap.parse_args()
    say = (lambda *a, **k: print(*a, file=sys.stderr, **k)) if args.json else print
    r = run(max(args.rounds, 1), say=say)
    benchlib.write_results("compiled_trial", r)
    if args.json:
        print(json.dumps(r, indent=2, sort_keys=True))
    else:
        print_report(r)
    if not r["same_outputs"]:
        raise SystemExit(1)


if __name__ == "__main__":
    main()
