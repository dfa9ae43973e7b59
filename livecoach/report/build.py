"""Assemble the post-ride report: one self-contained HTML page.

Everything the page needs is inside it: the CSS inline, the figures as
base64 PNG ``data:`` images, no scripts, fonts or links to anywhere else,
so the file can be mailed or opened offline at the course. The page holds no
generation time, so the same trace gives the same bytes.
"""

from __future__ import annotations

import base64
import html
import json
import math
from pathlib import Path
from typing import Any, Sequence

from livecoach.config.ridefile import RideConfig
from livecoach.errors import ReportError
from livecoach.pipeline.state import NOTICE_ALARM, NOTICE_CUE, NOTICE_PHASE, NOTICE_WARNING, LiveState, Notice
from livecoach.report import plots
from livecoach.report.series import (
    RESIDUAL_WINDOW_S,
    alarm_times,
    drag_for_residuals,
    power_residuals,
    sensor_timelines,
    series_from_states,
    trap_result,
)

REPORT_NAME = "report.html"
#: At most this many notices are listed (the rest are counted).
MAX_NOTICE_ROWS = 400

CHANNEL_NAMES = {
    "ble.cycling_power": "power meter",
    "ble.csc": "wheel sensor",
    "ble.heart_rate": "heart rate",
    "serial.gps": "GPS",
    "serial.mcu": "air data (mcu)",
    "csv": "CSV",
}

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,Helvetica,Arial,sans-serif;margin:0;
background:#f6f5f1;color:#1f2d3d;line-height:1.45}
main{max-width:1000px;margin:0 auto;padding:18px 22px 40px}
h1{font-size:1.55em;margin:.2em 0 .1em}h2{font-size:1.15em;margin:1.6em 0 .5em;border-bottom:2px solid #0b6e69;
padding-bottom:.15em}
.sub{color:#5b6770;margin:0 0 1em}
.cards{display:flex;flex-wrap:wrap;gap:10px}
.card{background:#fff;border-radius:8px;padding:10px 14px;min-width:150px;box-shadow:0 1px 2px #0002}
.card .k{font-size:.78em;color:#5b6770;text-transform:uppercase;letter-spacing:.04em}
.card .v{font-size:1.45em;font-weight:700}.card .u{font-size:.8em;color:#5b6770}
.trap .v{color:#0b6e69}
figure{margin:.6em 0 1.2em;background:#fff;border-radius:8px;padding:8px;box-shadow:0 1px 2px #0002}
figure img{width:100%;height:auto;display:block}figcaption{font-size:.85em;color:#5b6770;margin:.3em .4em}
table{border-collapse:collapse;background:#fff;font-size:.9em;margin:.4em 0}
td,th{padding:4px 10px;border-bottom:1px solid #e6e4de;text-align:left;vertical-align:top}
th{background:#eceae3}td.n{text-align:right;font-variant-numeric:tabular-nums}
tr.alarm td{color:#c0392b}tr.warning td{color:#9a5b00}
pre{background:#fff;border-radius:8px;padding:10px 12px;overflow-x:auto;font-size:.85em;box-shadow:0 1px 2px #0002}
.warn{background:#fff4e0;border-left:4px solid #d9822b;padding:6px 12px;margin:.3em 0}
.safety{font-size:.85em;color:#5b6770;border-top:1px solid #d8d5cc;margin-top:2em;padding-top:.6em}
"""


def _e(x: Any) -> str:
    return html.escape(str(x), quote=True)


def _num(x: Any, fmt: str, none: str = "—") -> str:
    if x is None or not isinstance(x, (int, float)) or not math.isfinite(x):
        return none
    return format(x, fmt)


def _img(png: bytes | None, alt: str, caption: str) -> str:
    if png is None:
        return ""
    b64 = base64.b64encode(png).decode("ascii")
    return (f'<figure><img alt="{_e(alt)}" src="data:image/png;base64,{b64}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def _card(key: str, value: str, unit: str = "", cls: str = "") -> str:
    return (f'<div class="card {cls}"><div class="k">{_e(key)}</div><div class="v">{_e(value)}'
            f' <span class="u">{_e(unit)}</span></div></div>')


def _table(headers: Sequence[str], rows: Sequence[Sequence[str]], numeric: Sequence[bool] = (),
           row_classes: Sequence[str] = ()) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in headers)
    body = []
    for i, row in enumerate(rows):
        cls = f' class="{row_classes[i]}"' if i < len(row_classes) and row_classes[i] else ""
        cells = "".join(
            f'<td class="n">{_e(c)}</td>' if (k < len(numeric) and numeric[k]) else f"<td>{_e(c)}</td>"
            for k, c in enumerate(row)
        )
        body.append(f"<tr{cls}>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _ride_text(ride: RideConfig) -> str:
    if ride.text:
        return ride.text
    return json.dumps(ride.raw, indent=2, default=str) if ride.raw else "(the ride file text is not available)"


def build_report(
    states: list[LiveState],
    notices: list[Notice],
    summary: dict,
    ride: RideConfig,
    plan: Any = None,
    out_dir: str | Path = "report",
    *,
    title: str | None = None,
    source: str = "",
    warnings: Sequence[str] = (),
) -> Path:
    """Write ``out_dir``/report.html for one run and return its path.

    ``states``: the replay's LiveState trace (time order); ``notices``: all
    notices; ``summary``: :meth:`Pipeline.summary`; ``ride``: the ride file
    used; ``plan``: the run-up plan (:class:`livecoach.plan.plan.Plan`) or
    None; ``source``: the recording or CSV the run came from (shown on the page);
    ``warnings``: extra notes (e.g. the reader's damage report).
    """
    series = series_from_states(states)
    out = Path(out_dir)
    try:  # fail before the figures are drawn, not after
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReportError(f"cannot write the report into {out}: {exc}") from None
    entry_m, exit_m = ride.course.trap_entry_m, ride.course.trap_exit_m
    unit = ride.section("display").speed_unit
    k = {"km/h": 3.6, "mph": 1.0 / 0.44704, "m/s": 1.0}[unit]
    planned_trap = getattr(plan, "trap_speed_mps", None) if plan is not None else None
    if planned_trap is None:
        planned_trap = next((s.planned_trap_speed_mps for s in reversed(states)
                             if s.planned_trap_speed_mps is not None), None)
    trap = trap_result(states, series, entry_m, exit_m, planned_trap)
    alarms = alarm_times(notices, series.t0_s)
    cda, crr, label = drag_for_residuals(summary, series, ride)
    resid = power_residuals(series, ride, cda, crr, label)
    timelines = sensor_timelines(states, series)
    t_end = float(series.t_s[-1])
    last = states[-1]

    figs = [
        _img(plots.speed_vs_distance(series, plan, entry_m, exit_m, unit), "speed against distance",
             "Measured speed (stale values grey) and the planned speed over the run-up; the trap is shaded."),
        _img(plots.power_vs_distance(series, plan, entry_m, exit_m, ride.rider.cp_w), "power and target",
             "Crank power as measured, the live target from the coach and the plan's power."),
        _img(plots.w_prime_plot(series, plan, ride.rider.w_prime_j, entry_m, exit_m), "W′ balance",
             "Work capacity above critical power left, by the differential model of Skiba et al. (2015)."),
        _img(plots.drag_convergence(series, summary, ride.vehicle.cda_m2, ride.vehicle.crr, alarms),
             "CdA and Crr convergence",
             "Live recursive estimates with ±2σ bands, the ride-file prior and the off-line batch fit; "
             "red lines mark drag-change alarms."),
        _img(plots.residual_plot(resid, alarms, t_end), "power-balance residuals",
             f"Measured minus modelled crank power over {RESIDUAL_WINDOW_S:g} s energy windows "
             "(Martin et al. 1998 power balance, integrated over each window)."),
        _img(plots.sensor_plot(timelines, t_end, CHANNEL_NAMES), "sensor health timeline",
             "When each sensor's values were current, stale (no valid value within its limit) or its link down."),
    ]
    trap_png = plots.trap_plot(series, trap, entry_m, exit_m, unit)

    # ---- headline cards
    vname = ride.vehicle.name or "vehicle"
    cname = ride.course.name or "course"
    page_title = title or f"Run report: {vname} on {cname}"
    cards = [
        _card("trap speed", _num(None if trap.mean_speed_mps is None else trap.mean_speed_mps * k, ".2f"),
              unit, "trap"),
        _card("trap time", _num(trap.time_s, ".3f"), "s", "trap"),
        _card("CdA (live)", _num(last.cda_m2, ".4f"),
              f"± {_num(None if last.cda_sd_m2 is None else 2 * last.cda_sd_m2, '.4f')} m² (2σ)"),
        _card("CdA (batch)", _num(summary.get("batch_cda_m2"), ".4f"), "m²"),
        _card("Crr (live)", _num(last.crr, ".5f"),
              f"± {_num(None if last.crr_sd is None else 2 * last.crr_sd, '.5f')} (2σ)"),
        _card("top speed", _num(None if summary.get("max_speed_mps") is None
                                else summary["max_speed_mps"] * k, ".1f"), unit),
        _card("W′ left", _num(None if last.w_prime_balance_j is None else last.w_prime_balance_j / 1000, ".1f"),
              "kJ"),
        _card("ride time", _num(t_end, ".1f"), "s"),
    ]

    # ---- trap table
    if trap.time_s is not None:
        trap_rows = [
            ("trap entry (line at {:.0f} m)".format(entry_m), f"{trap.entry_s:.3f} s ride time"),
            ("trap exit (line at {:.0f} m)".format(exit_m), f"{trap.exit_s:.3f} s ride time"),
            ("time through the trap", f"{trap.time_s:.3f} s"),
            ("mean speed through the trap",
             f"{trap.mean_speed_mps:.3f} m/s = {trap.mean_speed_mps * 3.6:.2f} km/h = "
             f"{trap.mean_speed_mps / 0.44704:.2f} mph"),
            ("peak speed in the trap", f"{_num(None if trap.peak_speed_mps is None else trap.peak_speed_mps * k, '.2f')} {unit}"),
            ("predicted at trap entry", f"{_num(None if trap.predicted_at_entry_mps is None else trap.predicted_at_entry_mps * k, '.2f')} {unit}"),
            ("planned", f"{_num(None if trap.planned_mps is None else trap.planned_mps * k, '.2f')} {unit}"),
            ("timed by", "the pipeline's trap timer" if trap.source == "pipeline"
             else "this report, from the state trace (coarser)"),
        ]
        trap_html = _table(("", "value"), trap_rows)
    elif trap.entry_s is not None:
        trap_html = (f'<p class="warn">The vehicle entered the trap at {trap.entry_s:.3f} s ride time '
                     "but the run ended before the exit line: no trap time.</p>")
    else:
        trap_html = '<p class="warn">The run did not reach the trap: no trap result.</p>'

    # ---- sensors table
    gaps = summary.get("sensor_gaps", {}) or {}
    sensor_rows = []
    for tl in timelines:
        g = gaps.get(tl.channel, {})
        sensor_rows.append((
            CHANNEL_NAMES.get(tl.channel, tl.channel), tl.channel, str(tl.accepted), str(tl.rejected),
            str(g.get("count", tl.gaps)), _num(g.get("longest_s", tl.longest_gap_s), ".1f"),
            str(len(tl.down)),
        ))
    sensors_html = _table(("sensor", "channel", "accepted", "rejected", "gaps", "longest gap, s",
                           "link-down spells"), sensor_rows, (False, False, True, True, True, True, True)) \
        if sensor_rows else "<p>No sensor was heard.</p>"

    # ---- notices
    rows, classes = [], []
    for n in notices[:MAX_NOTICE_ROWS]:
        what = {NOTICE_CUE: "cue", NOTICE_ALARM: "alarm", NOTICE_WARNING: "warning",
                NOTICE_PHASE: "phase"}.get(n.kind, n.kind)
        rows.append((f"{n.t_s - series.t0_s:.1f}", what, n.text))
        classes.append(n.kind if n.kind in (NOTICE_ALARM, NOTICE_WARNING) else "")
    notices_html = _table(("ride time, s", "kind", "text"), rows, (True, False, False), classes) \
        if rows else "<p>No cues, alarms or warnings.</p>"
    if len(notices) > MAX_NOTICE_ROWS:
        notices_html += f"<p>… and {len(notices) - MAX_NOTICE_ROWS} more notices (see the summary).</p>"

    all_warnings = list(warnings) + [str(w) for w in summary.get("warnings", [])]
    warn_html = "".join(f'<p class="warn">{_e(w)}</p>' for w in all_warnings)

    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(page_title)}</title><style>{_CSS}</style></head><body><main>",
        f"<h1>{_e(page_title)}</h1>",
        f'<p class="sub">Rider: {_e(ride.rider.name or "—")} · source: {_e(source or ride.source)} · '
        f"{len(states)} states, {summary.get('samples', '—')} samples, "
        f"{summary.get('rejected_samples', 0)} rejected</p>",
        f'<div class="cards">{"".join(cards)}</div>',
        warn_html,
        "<h2>Trap result</h2>", trap_html,
        _img(trap_png, "speed through the trap", "Speed around the trap and the mean speed between the lines."),
        "<h2>The run</h2>", figs[0], figs[1], figs[2],
        "<h2>Drag estimates</h2>", figs[3], figs[4],
        "<h2>Sensors</h2>", figs[5], sensors_html,
        "<h2>Cues, alarms and warnings</h2>", notices_html,
        "<h2>Ride file used</h2>", f"<pre>{_e(_ride_text(ride))}</pre>",
        "<h2>Summary</h2>",
        f"<details><summary>replay summary (JSON)</summary><pre>{_e(json.dumps(_clean(summary), indent=2, sort_keys=True))}</pre></details>",
        '<p class="safety">Estimates, predictions and cues are advisory and can be wrong when a sensor '
        "or a model is off. Speed runs in faired vehicles follow the event's safety rules and the "
        "organisers' decisions; official times come from the event's own timing.</p>",
        "</main></body></html>",
    ]
    try:
        path = out / REPORT_NAME
        tmp = path.with_name(path.name + ".part")
        tmp.write_text("\n".join(p for p in parts if p), encoding="utf-8")
        tmp.replace(path)
    except OSError as exc:
        raise ReportError(f"cannot write the report into {out}: {exc}") from None
    return path


def _clean(x: Any) -> Any:
    if isinstance(x, float):
        return x if math.isfinite(x) else None
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    return x
