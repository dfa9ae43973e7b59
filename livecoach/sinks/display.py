"""The rider's screen: a full-screen terminal view drawn with ``rich``.

Made for the board's small screen (an 800x480 panel with a large font gives
about 50x16 to 100x30 character cells). Two layouts:

* compact (below 80x24 cells): big speed in a 5-row block font, then one
  line each for the cue, power against target, trap, W' left, CdA, Crr and
  sensor health;
* roomy (80x24 and more): speed in a double-size block font beside a big
  power figure, with bars and the extra readings (heart rate, cadence, air
  speed, reject counts).

A value whose sensor is stale (``LiveState.speed_stale`` / ``power_stale``,
``SensorHealth.stale``) is drawn dim with a red ``STALE`` tag and its age, so
it can never be read as current. Values that are derived from a stale input
(distance to the trap and the predicted trap speed from speed, W' balance and
cadence from power) carry the same tag.

The drawing itself is pure: :func:`render` (a rich renderable) and
:func:`render_text` (plain or ANSI text) depend only on their arguments.
:class:`DisplaySink` is the shell around it: ``on_state``/``on_notice`` only
store a reference; a background thread redraws the terminal at a fixed rate
from the latest state, so the event loop never waits for the screen.

The block font, layout and colours are this project's own design.
"""

from __future__ import annotations

import io
import math
import threading
import time
from dataclasses import dataclass
from typing import Any, Callable

from rich.console import Console, Group, RenderableType
from rich.text import Text

from livecoach.pipeline.state import (
    NOTICE_ALARM,
    NOTICE_WARNING,
    PHASE_DONE,
    PHASE_RUNUP,
    PHASE_TRAP,
    PHASE_WAITING,
    LiveState,
    Notice,
    SensorHealth,
)

# --------------------------------------------------------------------- units
#: Speed units the display can show: name -> factor from m/s (exact by definition:
#: 1 km/h = 1/3.6 m/s; 1 mph = 0.44704 m/s, international mile).
SPEED_UNITS: dict[str, float] = {"km/h": 3.6, "mph": 1.0 / 0.44704, "m/s": 1.0}

# -------------------------------------------------------------------- colours
#: This project's palette (dark screen, high contrast for sunlight through a canopy).
STYLE_SPEED = "bold bright_white"
STYLE_STALE_VALUE = "grey42"
STYLE_STALE_TAG = "bold white on red3"
STYLE_LABEL = "grey62"
STYLE_VALUE = "bold bright_white"
STYLE_ON_TARGET = "bold green3"
STYLE_ABOVE = "bold orange1"
STYLE_BELOW = "bold deep_sky_blue1"
STYLE_CUE = "bold black on gold1"
STYLE_CUE_URGENT = "bold white on red3"
STYLE_CUE_NONE = "grey50"
STYLE_ALARM = "bold white on dark_magenta"
STYLE_WARN = "bold black on orange1"
STYLE_OK = "bold green3"
STYLE_DOWN = "bold white on red3"
STYLE_HEADER = "bold black on grey70"

#: Power within this fraction of the target counts as on target (display only).
ON_TARGET_FRACTION = 0.03
#: The power bar spans the target +- this fraction.
POWER_BAR_SPAN = 0.25
#: The CdA error-bar scale spans the estimate +- this fraction.
CDA_BAR_SPAN = 0.25

#: Short labels for the sensor channels (channel names from livecoach.stream.events).
CHANNEL_LABELS: dict[str, str] = {
    "ble.cycling_power": "PWR",
    "ble.csc": "WHL",
    "ble.heart_rate": "HR",
    "serial.gps": "GPS",
    "serial.mcu": "MCU",
    "csv": "CSV",
}

_PHASE_LABELS = {
    PHASE_WAITING: "READY",
    PHASE_RUNUP: "RUN-UP",
    PHASE_TRAP: "IN TRAP",
    PHASE_DONE: "FINISHED",
}

#: Cue names drawn in the urgent style (normalised: lower case, '_' for spaces).
URGENT_CUES = frozenset({"stand_down", "stop", "abort", "done", "final", "final_effort", "all_out", "go"})

# ---------------------------------------------------------------- block font
# Our own 5-row block font, 4 cells wide per digit ('#' = filled).
_FONT: dict[str, tuple[str, ...]] = {
    "0": ("####", "#  #", "#  #", "#  #", "####"),
    "1": (" ## ", "### ", " ## ", " ## ", "####"),
    "2": ("####", "   #", "####", "#   ", "####"),
    "3": ("####", "   #", " ###", "   #", "####"),
    "4": ("#  #", "#  #", "####", "   #", "   #"),
    "5": ("####", "#   ", "####", "   #", "####"),
    "6": ("####", "#   ", "####", "#  #", "####"),
    "7": ("####", "   #", "  # ", " #  ", " #  "),
    "8": ("####", "#  #", "####", "#  #", "####"),
    "9": ("####", "#  #", "####", "   #", "####"),
    ".": ("  ", "  ", "  ", "  ", "##"),
    "-": ("    ", "    ", "####", "    ", "    "),
    " ": ("    ", "    ", "    ", "    ", "    "),
}
FONT_ROWS = 5
#: Fill of the block font for a live value and for a stale one.
LIVE_FILL = "█"
STALE_FILL = "▒"


def big_text_lines(text: str, scale_x: int = 1, scale_y: int = 1, fill: str = "█") -> list[str]:
    """``text`` (digits, '.', '-', ' ') in the block font as lines of ``fill`` and spaces.

    ``scale_x``/``scale_y`` repeat each cell horizontally/vertically. Characters
    outside the font are drawn as blanks. Stale values use a shaded ``fill``
    ('▒', :data:`STALE_FILL`) so they read as stale even without colour.
    """
    rows = []
    for r in range(FONT_ROWS):
        parts = []
        for ch in text:
            glyph = _FONT.get(ch, _FONT[" "])
            parts.append("".join(c * scale_x for c in glyph[r]) + " " * scale_x)
        row = "".join(parts).rstrip(" ") if parts else ""
        row = row.replace("#", fill)
        rows.extend([row] * scale_y)
    width = max((len(r) for r in rows), default=0)
    return [r.ljust(width) for r in rows]


# ----------------------------------------------------------------- formatting
def _fmt(value: float | None, fmt: str, none: str = "--") -> str:
    if value is None or not math.isfinite(value):
        return none
    return format(value, fmt)


def _norm_cue(name: str | None) -> str:
    return (name or "").strip().lower().replace(" ", "_").replace("-", "_")


def _stale_tag(age_s: float | None = None) -> Text:
    if age_s is not None and math.isfinite(age_s):
        return Text(f" STALE {age_s:.0f}s ", style=STYLE_STALE_TAG)
    return Text(" STALE ", style=STYLE_STALE_TAG)


def _health(state: LiveState, channel: str) -> SensorHealth | None:
    for h in state.sensors:
        if h.channel == channel:
            return h
    return None


def _speed_age_s(state: LiveState) -> float | None:
    """Age of the newest speed value among the speed channels that are stale, s."""
    ages = [h.age_s for h in state.sensors
            if h.channel in ("ble.csc", "serial.gps", "csv") and h.stale and h.age_s is not None]
    return min(ages) if ages else None


def _power_age_s(state: LiveState) -> float | None:
    h = _health(state, "ble.cycling_power") or _health(state, "csv")
    return h.age_s if (h is not None and h.stale) else None


def _bar(fraction: float, width: int, fill: str = "█", empty: str = "░") -> str:
    if width <= 0:
        return ""
    f = min(1.0, max(0.0, fraction)) if math.isfinite(fraction) else 0.0
    n = int(round(f * width))
    return fill * n + empty * (width - n)


def power_bar(power_w: float | None, target_w: float | None, width: int) -> str:
    """A bar centred on the target: cells left of the centre mark = below target.

    The full half-width stands for ``POWER_BAR_SPAN`` of the target.
    """
    width = max(3, width)
    half = (width - 1) // 2
    cells = ["·"] * half + ["┃"] + ["·"] * (width - 1 - half)
    if power_w is None or target_w is None or target_w <= 0 or not math.isfinite(power_w):
        return "".join(cells)
    dev = (power_w - target_w) / (target_w * POWER_BAR_SPAN)
    n = int(round(min(1.0, abs(dev)) * half))
    if dev < 0:
        for i in range(half - n, half):
            cells[i] = "█"
    else:
        for i in range(half + 1, min(width, half + 1 + n)):
            cells[i] = "█"
    return "".join(cells)


def error_bar(value: float | None, sd: float | None, width: int) -> str:
    """A text error bar: the +-2 sigma interval as '━' with '●' at the estimate,
    on a scale of the estimate +- ``CDA_BAR_SPAN`` (a wider bar = less certain)."""
    width = max(5, width)
    mid = width // 2
    cells = [" "] * width
    if value is None or sd is None or not (math.isfinite(value) and math.isfinite(sd)) or value <= 0:
        return "".join(cells)
    half_cells = 2.0 * sd / (value * CDA_BAR_SPAN) * mid
    n = int(round(min(float(mid), half_cells)))
    for i in range(mid - n, mid + n + 1):
        if 0 <= i < width:
            cells[i] = "━"
    if mid - n - 1 >= 0 and n < mid:
        cells[mid - n - 1] = "├" if n else " "
    if mid + n + 1 < width and n < mid:
        cells[mid + n + 1] = "┤" if n else " "
    if n >= mid:
        cells[0], cells[-1] = "◀", "▶"
    cells[mid] = "●"
    return "".join(cells)


def _power_style(power_w: float | None, target_w: float | None) -> str:
    if power_w is None or target_w is None or target_w <= 0:
        return STYLE_VALUE
    dev = (power_w - target_w) / target_w
    if abs(dev) <= ON_TARGET_FRACTION:
        return STYLE_ON_TARGET
    return STYLE_ABOVE if dev > 0 else STYLE_BELOW


def _distance_text(d_m: float | None) -> str:
    if d_m is None or not math.isfinite(d_m):
        return "--"
    if abs(d_m) >= 1000.0:
        return f"{d_m / 1000.0:.2f} km"
    return f"{d_m:.0f} m"


# ------------------------------------------------------------------ sections
@dataclass(frozen=True)
class _Ctx:
    state: LiveState
    width: int
    height: int
    unit: str
    factor: float
    roomy: bool


def _line(*parts: Text | str | tuple[str, str]) -> Text:
    t = Text(no_wrap=True, overflow="crop")
    for p in parts:
        if isinstance(p, Text):
            t.append_text(p)
        elif isinstance(p, tuple):
            t.append(p[0], style=p[1])
        else:
            t.append(p)
    return t


def _header(c: _Ctx) -> Text:
    st = c.state
    phase = _PHASE_LABELS.get(st.phase, st.phase.upper())
    t = _line((f" {phase} ", STYLE_HEADER), " ")
    if st.phase == PHASE_DONE and st.trap_speed_mps is not None:
        t.append("trap ", style=STYLE_LABEL)
        t.append(f"{st.trap_speed_mps * c.factor:.2f} {c.unit}", style=STYLE_VALUE)
        if st.trap_entry_t_s is not None and st.trap_exit_t_s is not None:
            t.append(f"  {st.trap_exit_t_s - st.trap_entry_t_s:.3f} s", style=STYLE_LABEL)
        return t
    d = st.distance_to_trap_m
    if st.phase == PHASE_TRAP and d is not None:
        t.append("in the trap ", style=STYLE_LABEL)
        t.append(f"{-d:.0f} m", style=STYLE_VALUE)
    else:
        t.append("to trap ", style=STYLE_LABEL)
        t.append(_distance_text(d), style=STYLE_STALE_VALUE if st.speed_stale else STYLE_VALUE)
    if st.speed_stale and d is not None:
        t.append(" ")
        t.append_text(_stale_tag())
    return t


def _speed_block(c: _Ctx, scale: int) -> list[Text]:
    st = c.state
    v = st.speed_mps
    digits = "--.-" if v is None or not math.isfinite(v) else f"{v * c.factor:4.1f}"
    style = STYLE_STALE_VALUE if st.speed_stale else STYLE_SPEED
    rows = big_text_lines(digits, scale_x=scale, scale_y=scale,
                          fill=STALE_FILL if st.speed_stale else LIVE_FILL)
    side: list[Text] = [_line((c.unit, STYLE_LABEL))]
    if st.speed_stale and v is not None:
        side.append(_line(_stale_tag(_speed_age_s(st))))
    if st.planned_speed_mps is not None:
        side.append(_line(("plan ", STYLE_LABEL), (f"{st.planned_speed_mps * c.factor:.1f}", STYLE_VALUE)))
        if v is not None and not st.speed_stale:
            dv = (v - st.planned_speed_mps) * c.factor
            side.append(_line((f"{dv:+.1f}", STYLE_ABOVE if dv >= 0 else STYLE_BELOW)))
    return _big_block(rows, style, side)


def _big_block(rows: list[str], style: str, side: list[Text]) -> list[Text]:
    """Big-digit ``rows`` in ``style`` with the ``side`` lines to their right."""
    block_w = max(len(r) for r in rows) + 2
    out = []
    for i, row in enumerate(rows):
        t = _line((row.ljust(block_w), style))
        if i < len(side):
            t.append_text(side[i])
        out.append(t)
    return out


def _cue_line(c: _Ctx) -> Text:
    st = c.state
    if not st.cue and not st.cue_text:
        return _line(("  no cue", STYLE_CUE_NONE))
    words = (st.cue_text or st.cue or "").upper()
    style = STYLE_CUE_URGENT if _norm_cue(st.cue) in URGENT_CUES else STYLE_CUE
    t = _line((f" ▶ {words} ".ljust(min(c.width, max(len(words) + 4, c.width // 2))), style))
    if st.speed_stale or st.power_stale:
        t.append(" ")
        t.append(" inputs stale ", style=STYLE_STALE_TAG)
    return t


def _power_line(c: _Ctx) -> Text:
    st = c.state
    p, tgt = st.power_w, st.target_power_w
    t = _line(("PWR ", STYLE_LABEL))
    if st.power_stale:
        t.append(f"{_fmt(p, '.0f')} W", style=STYLE_STALE_VALUE)
        if p is not None:
            t.append(" ")
            t.append_text(_stale_tag(_power_age_s(st)))
    else:
        t.append(f"{_fmt(p, '.0f')} W", style=_power_style(p, tgt))
    t.append("  target ", style=STYLE_LABEL)
    t.append(f"{_fmt(tgt, '.0f')} W", style=STYLE_VALUE)
    if p is not None and tgt is not None and not st.power_stale:
        t.append(f"  {p - tgt:+.0f}", style=_power_style(p, tgt))
    return t


def _power_bar_line(c: _Ctx, width: int) -> Text:
    st = c.state
    style = STYLE_STALE_VALUE if st.power_stale else _power_style(st.power_w, st.target_power_w)
    label = "-25% " if width >= 30 else ""
    right = " +25%" if width >= 30 else ""
    inner = max(3, width - len(label) - len(right))
    # A stale power is not compared with the target: the bar shows no deviation.
    shown_w = None if st.power_stale else st.power_w
    return _line((label, STYLE_LABEL), (power_bar(shown_w, st.target_power_w, inner), style),
                 (right, STYLE_LABEL))


def _trap_line(c: _Ctx) -> Text:
    st = c.state
    t = _line(("TRAP ", STYLE_LABEL), ("pred ", STYLE_LABEL))
    pred = st.predicted_trap_speed_mps
    txt = f"{_fmt(None if pred is None else pred * c.factor, '.1f')} {c.unit}"
    t.append(txt, style=STYLE_STALE_VALUE if st.speed_stale else STYLE_VALUE)
    if st.speed_stale and pred is not None:
        t.append(" ")
        t.append_text(_stale_tag())
    if st.planned_trap_speed_mps is not None:
        t.append("  plan ", style=STYLE_LABEL)
        t.append(f"{st.planned_trap_speed_mps * c.factor:.1f}", style=STYLE_VALUE)
    return t


def _wprime_line(c: _Ctx) -> Text:
    st = c.state
    bal, cap = st.w_prime_balance_j, st.w_prime_j
    t = _line(("W′  ", STYLE_LABEL))
    if bal is None:
        t.append("--", style=STYLE_VALUE)
        return t
    frac = bal / cap if cap else float("nan")
    if st.power_stale:
        style = STYLE_STALE_VALUE
    elif frac > 0.5:
        style = STYLE_OK
    elif frac > 0.25:
        style = "bold yellow1"
    else:
        style = "bold red1"
    t.append(f"{bal / 1000.0:.1f} kJ", style=style)
    if math.isfinite(frac):
        t.append(f" {frac * 100.0:3.0f}% ", style=style)
        bar_w = max(0, min(24, c.width - len(t.plain) - 10))
        if bar_w >= 4:
            t.append(_bar(frac, bar_w), style=style)
    if st.power_stale:
        t.append(" ")
        t.append_text(_stale_tag())
    return t


def _drag_line(c: _Ctx, name: str, value: float | None, sd: float | None, fmt: str) -> Text:
    t = _line((f"{name} ", STYLE_LABEL), (_fmt(value, fmt), STYLE_VALUE))
    if sd is not None and math.isfinite(sd):
        t.append(f" ±{format(2.0 * sd, fmt)}", style=STYLE_VALUE)
        t.append(" 2σ", style=STYLE_LABEL)
        if value:
            t.append(f" ({200.0 * sd / value:.0f}%)", style=STYLE_LABEL)
    bar_w = min(21, c.width - len(t.plain) - 2)
    if bar_w >= 9 and value is not None:
        t.append("  ")
        t.append(error_bar(value, sd, bar_w), style="bold cyan")
    return t


def _sensor_line(c: _Ctx) -> Text:
    st = c.state
    t = _line(("SENS ", STYLE_LABEL))
    if not st.sensors:
        t.append("no sensor heard yet", style=STYLE_WARN)
        return t
    for i, h in enumerate(st.sensors):
        if i:
            t.append(" ")
        label = CHANNEL_LABELS.get(h.channel, h.channel.split(".")[-1][:4].upper())
        if not h.link_up:
            t.append(f"{label} DOWN", style=STYLE_DOWN)
        elif h.stale:
            age = f" {h.age_s:.0f}s" if h.age_s is not None else ""
            t.append(f"{label} STALE{age}", style=STYLE_STALE_TAG)
        else:
            t.append(f"{label} ok", style=STYLE_OK)
        if c.roomy and h.rejected:
            t.append(f" rej {h.rejected}", style=STYLE_LABEL)
    return t


def _extras_line(c: _Ctx) -> Text:
    """Heart rate, cadence and air speed (roomy layout), each flagged when stale."""
    st = c.state
    t = _line()
    items: list[tuple[str, float | None, str, bool]] = []
    hr = _health(st, "ble.heart_rate")
    items.append(("HR ", st.heart_rate_bpm, " bpm", hr is None or hr.stale))
    items.append(("CAD ", st.cadence_rpm, " rpm", st.power_stale))
    mcu = _health(st, "serial.mcu")
    if st.airspeed_mps is not None:
        items.append(("AIR ", st.airspeed_mps * c.factor, f" {c.unit}", mcu is None or mcu.stale))
    for i, (label, value, unit, stale) in enumerate(items):
        if i:
            t.append("   ")
        t.append(label, style=STYLE_LABEL)
        if value is None:
            t.append("--", style=STYLE_VALUE)
            continue
        t.append(f"{value:.0f}{unit}", style=STYLE_STALE_VALUE if stale else STYLE_VALUE)
        if stale:
            t.append(" ")
            t.append_text(_stale_tag())
    return t


def _banner_line(c: _Ctx, banner: Notice | None) -> Text | None:
    st = c.state
    if banner is not None:
        style = STYLE_ALARM if banner.kind == NOTICE_ALARM else STYLE_WARN
        return _line((f" ! {banner.text} ", style))
    if st.alarms:
        return _line((f" ! {st.alarms[-1]} ", STYLE_ALARM))
    return None


def _big_power_block(c: _Ctx) -> list[Text]:
    st = c.state
    p = st.power_w
    digits = "---" if p is None or not math.isfinite(p) else f"{p:.0f}"
    style = STYLE_STALE_VALUE if st.power_stale else _power_style(p, st.target_power_w)
    rows = big_text_lines(digits, fill=STALE_FILL if st.power_stale else LIVE_FILL)
    side = [_line(("W", STYLE_LABEL))]
    if st.power_stale and p is not None:
        side.append(_line(_stale_tag(_power_age_s(st))))
    side.append(_line(("target", STYLE_LABEL)))
    side.append(_line((_fmt(st.target_power_w, ".0f"), STYLE_VALUE)))
    return _big_block(rows, style, side)


def _side_by_side(left: list[Text], right: list[Text], left_width: int) -> list[Text]:
    n = max(len(left), len(right))
    out = []
    for i in range(n):
        t = left[i].copy() if i < len(left) else _line()
        t.pad_right(max(0, left_width - t.cell_len))
        t.truncate(left_width)
        if i < len(right):
            t.append_text(right[i])
        out.append(t)
    return out


# -------------------------------------------------------------------- render
def render_lines(
    state: LiveState,
    width: int,
    height: int,
    *,
    speed_unit: str = "km/h",
    banner: Notice | None = None,
) -> list[Text]:
    """The screen as a list of at most ``height`` lines, each at most ``width`` cells.

    Lines are ordered by importance, so on a screen shorter than the layout
    the least important ones (Crr, extras) are dropped, never the speed.
    """
    if speed_unit not in SPEED_UNITS:
        from livecoach.errors import ConfigError

        raise ConfigError(f"display speed unit {speed_unit!r}: expected one of {', '.join(SPEED_UNITS)}")
    width = max(20, int(width))
    height = max(8, int(height))
    roomy = width >= 80 and height >= 24
    c = _Ctx(state, width, height, speed_unit, SPEED_UNITS[speed_unit], roomy)
    ban = _banner_line(c, banner)

    if roomy:
        speed = _speed_block(c, scale=2)
        left_w = min(width // 2 + 6, max(t.cell_len for t in speed) + 1)
        right = [_line()] * 2 + _big_power_block(c) + [_line()] + [_power_bar_line(c, width - left_w - 1)]
        top = _side_by_side(speed, right, left_w)
        # (priority, line): lower numbers survive a short screen.
        body: list[tuple[int, Text]] = [(0, _header(c)), (1, _line())]
        body += [(0, t) for t in top]
        body += [(1, _line()), (0, _cue_line(c)), (1, _line())]
        body += [(0, _power_line(c)), (0, _trap_line(c)), (0, _wprime_line(c)),
                 (1, _drag_line(c, "CdA", state.cda_m2, state.cda_sd_m2, ".4f")),
                 (2, _drag_line(c, "Crr", state.crr, state.crr_sd, ".5f")),
                 (2, _extras_line(c)), (1, _line()), (0, _sensor_line(c))]
    else:
        # Blank spacer lines (priorities 3..6) use spare rows on a taller screen;
        # the highest number goes first when rows run short.
        body = [(0, _header(c)), (3, _line())]
        body += [(0, t) for t in _speed_block(c, scale=1)]
        body += [(4, _line()), (0, _cue_line(c)), (6, _line()), (0, _power_line(c)),
                 (1, _power_bar_line(c, width)),
                 (0, _trap_line(c)), (0, _wprime_line(c)),
                 (1, _drag_line(c, "CdA", state.cda_m2, state.cda_sd_m2, ".4f")),
                 (2, _drag_line(c, "Crr", state.crr, state.crr_sd, ".5f")),
                 (5, _line()), (0, _sensor_line(c))]
    if ban is not None:
        body.insert(1, (0, ban))
    for level in (6, 5, 4, 3, 2, 1):
        if len(body) <= height:
            break
        body = [(p, t) for p, t in body if p < level]
    lines = [t for _, t in body][:height]
    for t in lines:
        t.no_wrap = True
        t.overflow = "crop"
        t.truncate(width)
    return lines


def render(
    state: LiveState,
    width: int,
    height: int,
    *,
    speed_unit: str = "km/h",
    banner: Notice | None = None,
) -> RenderableType:
    """The rider's screen for ``state`` on a ``width`` x ``height`` cell terminal (pure).

    ``speed_unit``: one of :data:`SPEED_UNITS`; ``banner``: a recent warning or
    alarm notice to show on its own line.
    """
    return Group(*render_lines(state, width, height, speed_unit=speed_unit, banner=banner))


def render_text(
    state: LiveState,
    width: int,
    height: int,
    *,
    speed_unit: str = "km/h",
    banner: Notice | None = None,
    ansi: bool = False,
) -> str:
    """The screen as text (``ansi``: with colour escape codes), for tests and logs."""
    console = Console(file=io.StringIO(), width=max(20, width), height=height, record=True,
                      force_terminal=ansi, color_system="truecolor" if ansi else None,
                      legacy_windows=False, emoji=False, highlight=False)
    console.print(render(state, width, height, speed_unit=speed_unit, banner=banner))
    return console.export_text(styles=ansi)


def render_svg(state: LiveState, width: int, height: int, *, speed_unit: str = "km/h",
               banner: Notice | None = None, title: str = "livecoach") -> str:
    """The screen as an SVG document (rich's terminal export), for documentation."""
    console = Console(file=io.StringIO(), width=width, height=height, record=True,
                      force_terminal=True, color_system="truecolor", legacy_windows=False)
    console.print(render(state, width, height, speed_unit=speed_unit, banner=banner))
    return console.export_svg(title=title)


# ---------------------------------------------------------------------- sink
class DisplaySink:
    """Draws the latest :class:`LiveState` full-screen at ``refresh_hz``.

    ``on_state``/``on_notice`` only keep a reference (no drawing, no I/O, no
    locks held for long); a daemon thread owns the terminal. Warnings and
    alarms stay on a banner line for ``banner_s`` seconds (wall-clock time of
    the shell, not of the core).

    ``console``: a rich Console (default: the process's terminal);
    ``screen``: use the terminal's alternate screen (restored at stop).
    """

    def __init__(
        self,
        console: Console | None = None,
        *,
        refresh_hz: float = 5.0,
        speed_unit: str = "km/h",
        screen: bool = True,
        banner_s: float = 4.0,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        if not (math.isfinite(refresh_hz) and 0.1 <= refresh_hz <= 60.0):
            from livecoach.errors import ConfigError

            raise ConfigError(f"display refresh_hz = {refresh_hz!r}: expected 0.1..60 Hz")
        if speed_unit not in SPEED_UNITS:
            from livecoach.errors import ConfigError

            raise ConfigError(f"display speed_unit = {speed_unit!r}: expected one of {', '.join(SPEED_UNITS)}")
        self.console = console if console is not None else Console()
        self.refresh_hz = refresh_hz
        self.speed_unit = speed_unit
        self.screen = screen
        self.banner_s = banner_s
        self._clock = clock
        self._state: LiveState | None = None
        self._banner: tuple[Notice, float] | None = None
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self.frames_drawn = 0
        self.errors = 0
        self.last_error: str | None = None

    @classmethod
    def from_ride(cls, ride: Any, console: Console | None = None, **kw: Any) -> "DisplaySink":
        """A sink set up from the ride file's ``[display]`` section."""
        cfg = ride.section("display")
        return cls(console, refresh_hz=cfg.refresh_hz, speed_unit=cfg.speed_unit, **kw)

    # -- sink interface (called from the event loop: must return at once)
    def on_state(self, state: LiveState) -> None:
        self._state = state

    def on_notice(self, notice: Notice) -> None:
        if notice.kind in (NOTICE_ALARM, NOTICE_WARNING):
            self._banner = (notice, self._clock())

    async def start(self) -> None:
        self.start_thread()

    async def stop(self) -> None:
        import asyncio

        await asyncio.to_thread(self.stop_thread)

    # -- the drawing thread
    def current_banner(self) -> Notice | None:
        b = self._banner
        if b is None or self._clock() - b[1] > self.banner_s:
            return None
        return b[0]

    def frame(self) -> RenderableType:
        """The renderable for the latest state at the console's current size."""
        state = self._state if self._state is not None else LiveState(t_s=0.0)
        size = self.console.size
        return render(state, size.width, size.height, speed_unit=self.speed_unit,
                      banner=self.current_banner())

    def start_thread(self) -> None:
        if self._thread is not None:
            return
        self._stop.clear()
        self._thread = threading.Thread(target=self._run, name="livecoach-display", daemon=True)
        self._thread.start()

    def stop_thread(self, timeout_s: float = 2.0) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout_s)
            self._thread = None

    def _run(self) -> None:
        from rich.live import Live

        period_s = 1.0 / self.refresh_hz
        with Live(console=self.console, screen=self.screen, auto_refresh=False,
                  redirect_stdout=False, redirect_stderr=False, transient=False) as live:
            while not self._stop.is_set():
                t0 = self._clock()
                try:
                    live.update(self.frame(), refresh=True)
                    self.frames_drawn += 1
                except Exception as exc:  # a drawing bug must never stop the ride: count it
                    self.errors += 1
                    self.last_error = f"{type(exc).__name__}: {exc}"
                self._stop.wait(max(0.0, period_s - (self._clock() - t0)))
