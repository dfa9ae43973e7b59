"""Regenerate the README pictures of the rider's display and the post-ride report.

    .venv/bin/python docs/images/make_screenshots.py

Needs headless Chromium (Debian: ``apt-get install chromium``) to turn the
display's SVG export and the report page into PNG. The display shows an
invented demo state; the report comes from the bench simulator's default
scenario (invented team, vehicle and course) replayed as a CSV ride with the
optimised run-up plan, through the real ``livecoach report`` code.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
sys.path.insert(0, str(ROOT))

from livecoach.pipeline.state import LiveState, SensorHealth  # noqa: E402
from livecoach.sinks.display import render_svg  # noqa: E402


def chromium() -> str:
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    raise SystemExit("headless Chromium is needed: apt-get install chromium")


def screenshot(url: str, out: Path, width: int, height: int, profile: Path) -> None:
    subprocess.run(
        [chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         f"--user-data-dir={profile}", "--hide-scrollbars", f"--window-size={width},{height}",
         f"--screenshot={out}", url],
        check=True, capture_output=True, timeout=120,
    )


def demo_state(stale: bool) -> LiveState:
    """An invented moment late in the run-up (demo data)."""
    wheel = SensorHealth("ble.csc", True, stale, 5.6 if stale else 0.2, 1180, 0, 1 if stale else 0,
                         5.6 if stale else 0.0)
    sensors = (
        wheel,
        SensorHealth("ble.cycling_power", True, False, 0.3, 1164, 2, 0, 0.0),
        SensorHealth("ble.heart_rate", True, False, 0.6, 590, 0, 0, 0.0),
        SensorHealth("serial.gps", True, stale, 4.1 if stale else 0.1, 5900, 0, 1 if stale else 0,
                     4.1 if stale else 0.0),
    )
    return LiveState(
        t_s=281.4, phase="runup", distance_m=5870.0, distance_to_trap_m=630.0, speed_mps=29.42,
        speed_stale=stale, power_w=548.0, power_stale=False, cadence_rpm=101.0, heart_rate_bpm=176.0,
        target_power_w=560.0, planned_speed_mps=29.6, cue="final", cue_text="final effort now",
        predicted_trap_speed_mps=30.55, planned_trap_speed_mps=30.74, w_prime_balance_j=12600.0,
        w_prime_j=18000.0, cda_m2=0.0287, cda_sd_m2=0.0004, crr=0.00316, crr_sd=0.00011, sensors=sensors,
    )


def display_images(tmp: Path) -> list[Path]:
    out = []
    for name, state, (w, h) in (
        ("display-50x16.png", demo_state(False), (50, 16)),
        ("display-100x30.png", demo_state(False), (100, 30)),
        ("display-stale-50x16.png", demo_state(True), (50, 16)),
    ):
        svg = tmp / (name + ".svg")
        svg.write_text(render_svg(state, w, h, title="livecoach — rider display"), encoding="utf-8")
        # rich's SVG is sized for its own viewBox; read it to size the window.
        import re

        box = re.search(r'viewBox="0 0 ([\d.]+) ([\d.]+)"', svg.read_text()).groups()
        bw, bh = int(float(box[0])) + 2, int(float(box[1])) + 2
        target = HERE / name
        screenshot(svg.as_uri(), target, bw, bh, tmp / "profile")
        out.append(target)
    return out


def report_image(tmp: Path) -> Path:
    from livecoach.plan import make_plan
    from livecoach.report.replay import report_from_csv
    from sim.run import simulate

    run = simulate("default")
    ride = run.scenario.ride
    t, p, v, d = (run.truth[k] for k in ("t_s", "power_w", "speed_mps", "distance_m"))
    step = max(1, int(round(0.5 / (t[1] - t[0]))))
    lines = ["time_s,power_w,speed_mps,distance_m"]
    lines += [f"{t[i]:.3f},{p[i]:.1f},{v[i]:.4f},{d[i]:.3f}" for i in range(0, len(t), step)]
    csv_path = Path("default-run.csv")        # relative: the page shows the name, not a temp folder
    csv_path.write_text("\n".join(lines) + "\n")
    outcome = report_from_csv(csv_path, ride, tmp / "report", plan=make_plan(ride))
    full = tmp / "report-full.png"
    screenshot(outcome.path.as_uri(), full, 1100, 2300, tmp / "profile")
    from PIL import Image

    target = HERE / "report.png"
    with Image.open(full) as im:
        im.convert("RGB").resize((880, int(im.height * 880 / im.width)), Image.LANCZOS).save(
            target, optimize=True)
    return target


def main() -> int:
    with tempfile.TemporaryDirectory(prefix="livecoach-shots-") as folder:
        tmp = Path(folder)
        os.chdir(tmp)
        for path in display_images(tmp) + [report_image(tmp)]:
            print(f"wrote {path.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
