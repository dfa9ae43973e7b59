"""The report's figures, drawn with matplotlib's Agg backend into PNG bytes.

Imported only by the report (never by the live loop): matplotlib takes about
0.6 s to import on a desktop and several times that on a small board.
Colours and layout are this project's own.
"""

from __future__ import annotations

import io
import math
from typing import Any, Sequence

import numpy as np

from livecoach.report.series import ChannelTimeline, Residuals, Series, TrapResult

#: Palette (our own): measured, plan, target, stale, band, alarms, trap zone.
C_MEASURED = "#0b6e69"
C_PLAN = "#d9822b"
C_TARGET = "#7a4fb5"
C_STALE = "#a8a8a8"
C_BAND = "#8fd1cb"
C_ALARM = "#c0392b"
C_TRAP = "#f4e3b5"
C_FIT = "#1f2d3d"

FIG_W_IN = 9.0
DPI = 100


def _mpl():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    plt.rcParams.update({
        "font.size": 9.5,
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.grid": True,
        "grid.color": "#e3e3e3",
        "grid.linewidth": 0.7,
        "axes.titleweight": "bold",
        "axes.titlesize": 10.5,
        "legend.frameon": False,
        "legend.fontsize": 8.5,
        "svg.hashsalt": "livecoach",
    })
    return plt


def _png(fig) -> bytes:
    buf = io.BytesIO()
    # No software tag (it carries a web address) and no timestamp: reproducible bytes.
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    import matplotlib.pyplot as plt

    plt.close(fig)
    return buf.getvalue()


def _legend(ax, ncols: int = 5) -> None:
    """The legend under the axes, so it never hides data."""
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncols=min(ncols, len(handles)))


def _speed_factor(unit: str) -> float:
    return {"km/h": 3.6, "mph": 1.0 / 0.44704, "m/s": 1.0}[unit]


def _trap_zone(ax, entry_m: float, exit_m: float) -> None:
    ax.axvspan(entry_m, exit_m, color=C_TRAP, zorder=0, label="trap")


def _plan_arrays(plan: Any, name: str) -> tuple[np.ndarray, np.ndarray] | None:
    if plan is None:
        return None
    d = getattr(plan, "distance_m", None)
    y = getattr(plan, name, None)
    if d is None or y is None or len(d) != len(y) or len(d) < 2:
        return None
    return np.asarray(d, dtype=float), np.asarray(y, dtype=float)


def speed_vs_distance(s: Series, plan: Any, entry_m: float, exit_m: float, unit: str) -> bytes:
    """Measured speed against distance, with the plan's speed."""
    plt = _mpl()
    k = _speed_factor(unit)
    fig, ax = plt.subplots(figsize=(FIG_W_IN, 3.4), layout="constrained")
    _trap_zone(ax, entry_m, exit_m)
    planned = _plan_arrays(plan, "speed_mps")
    if planned is not None:
        ax.plot(planned[0], planned[1] * k, color=C_PLAN, lw=1.6, ls="--", label="plan")
    elif np.isfinite(s.planned_speed_mps).any():
        ax.plot(s.distance_m, s.planned_speed_mps * k, color=C_PLAN, lw=1.6, ls="--", label="plan (live)")
    live = ~s.speed_stale
    ax.plot(np.where(live, s.distance_m, np.nan), np.where(live, s.speed_mps * k, np.nan),
            color=C_MEASURED, lw=1.8, label="measured")
    if s.speed_stale.any() and np.isfinite(s.speed_mps[s.speed_stale]).any():
        ax.plot(s.distance_m[s.speed_stale], s.speed_mps[s.speed_stale] * k, ls="none", marker=".",
                ms=3, color=C_STALE, label="stale (not current)")
    ax.set_xlabel("distance from the start line, m")
    ax.set_ylabel(f"speed, {unit}")
    ax.set_title("Speed against distance")
    ax.set_xlim(0, exit_m * 1.02)
    _legend(ax, 4)
    return _png(fig)


def power_vs_distance(s: Series, plan: Any, entry_m: float, exit_m: float, cp_w: float) -> bytes:
    """Measured crank power and the target power against distance."""
    plt = _mpl()
    fig, ax = plt.subplots(figsize=(FIG_W_IN, 3.2), layout="constrained")
    _trap_zone(ax, entry_m, exit_m)
    planned = _plan_arrays(plan, "power_w")
    if planned is not None:
        ax.step(planned[0], planned[1], where="post", color=C_PLAN, lw=1.2, ls="--", label="plan")
    if np.isfinite(s.target_power_w).any():
        ax.plot(s.distance_m, s.target_power_w, color=C_TARGET, lw=1.4, label="target (live)")
    live = ~s.power_stale
    ax.plot(np.where(live, s.distance_m, np.nan), np.where(live, s.power_w, np.nan),
            color=C_MEASURED, lw=1.0, label="measured")
    if s.power_stale.any() and np.isfinite(s.power_w[s.power_stale]).any():
        ax.plot(s.distance_m[s.power_stale], s.power_w[s.power_stale], ls="none", marker=".", ms=3,
                color=C_STALE, label="stale (not current)")
    ax.axhline(cp_w, color=C_FIT, lw=0.8, ls=":", label=f"CP {cp_w:.0f} W")
    ax.set_xlabel("distance from the start line, m")
    ax.set_ylabel("crank power, W")
    ax.set_title("Power and target power")
    ax.set_xlim(0, exit_m * 1.02)
    shown = s.power_w[np.isfinite(s.power_w)]
    if shown.size:
        lo = min(cp_w, float(np.percentile(shown, 2)))
        hi = max(cp_w, float(np.percentile(shown, 99.5)))
        pad = 0.12 * max(hi - lo, 20.0)
        ax.set_ylim(max(0.0, lo - pad), hi + pad)
    _legend(ax, 5)
    return _png(fig)


def drag_convergence(s: Series, summary: dict, prior_cda: float, prior_crr: float,
                     alarms: Sequence[tuple[float, str]]) -> bytes:
    """CdA and Crr estimates over time with +-2 sigma bands, the batch fit and the prior."""
    plt = _mpl()
    fig, (a1, a2) = plt.subplots(2, 1, figsize=(FIG_W_IN, 5.0), sharex=True, layout="constrained")
    for ax, val, sd, batch, prior, name, unit in (
        (a1, s.cda_m2, s.cda_sd_m2, summary.get("batch_cda_m2"), prior_cda, "CdA", "m²"),
        (a2, s.crr, s.crr_sd, summary.get("batch_crr"), prior_crr, "Crr", "-"),
    ):
        ok = np.isfinite(val)
        if ok.any():
            sd_ok = np.where(np.isfinite(sd), sd, 0.0)
            ax.fill_between(s.t_s, np.where(ok, val - 2 * sd_ok, np.nan), np.where(ok, val + 2 * sd_ok, np.nan),
                            color=C_BAND, alpha=0.55, lw=0, label="±2σ")
            ax.plot(s.t_s, val, color=C_MEASURED, lw=1.5, label="live estimate")
            final = val[ok][-1]
            lo, hi = np.nanmin(val[ok]), np.nanmax(val[ok])
            span = max(hi - lo, abs(final) * 0.25, 1e-9)
            ax.set_ylim(min(lo, prior) - 0.3 * span, max(hi, prior) + 0.3 * span)
        ax.axhline(prior, color=C_PLAN, lw=1.0, ls="--", label=f"prior {prior:.4g}")
        if batch is not None and math.isfinite(batch):
            ax.axhline(batch, color=C_FIT, lw=1.3, label=f"batch fit {batch:.4g}")
        for t, _ in alarms:
            ax.axvline(t, color=C_ALARM, lw=1.0)
        ax.set_ylabel(f"{name}, {unit}" if unit != "-" else name)
        ax.set_xlim(0, max(float(s.t_s[-1]), 1.0))
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), ncols=1)
    a1.set_title("Drag area and rolling resistance: convergence")
    a2.set_xlabel("ride time, s")
    return _png(fig)


def residual_plot(r: Residuals, alarms: Sequence[tuple[float, str]], t_end_s: float) -> bytes:
    """Power-balance residuals per window and the drag-change alarms."""
    plt = _mpl()
    fig, ax = plt.subplots(figsize=(FIG_W_IN, 3.0), layout="constrained")
    ax.axhline(0.0, color=C_FIT, lw=0.8)
    if r.t_s.size:
        ax.bar(r.t_s, r.residual_w, width=max(0.5, 0.8 * float(np.median(np.diff(r.t_s))) if r.t_s.size > 1 else 1.0),
               color=np.where(r.residual_w >= 0, C_MEASURED, C_PLAN), alpha=0.85,
               label=f"measured − model ({r.label}: CdA {r.cda_m2:.4f}, Crr {r.crr:.5f})")
        lim = max(10.0, float(np.nanpercentile(np.abs(r.residual_w), 98)) * 1.3)
        ax.set_ylim(-lim, lim)
    for k, (t, text) in enumerate(alarms):
        ax.axvline(t, color=C_ALARM, lw=1.4, label="drag-change alarm" if k == 0 else None)
        ax.annotate(text[:40], (t, 0.92), xycoords=("data", "axes fraction"), fontsize=7.5,
                    color=C_ALARM, rotation=0, ha="left", va="top", xytext=(3, 0), textcoords="offset points")
    ax.set_xlim(0, max(t_end_s, 1.0))
    ax.set_xlabel("ride time, s")
    ax.set_ylabel("residual, W")
    ax.set_title("Power-balance residuals and change alarms")
    _legend(ax)
    return _png(fig)


def w_prime_plot(s: Series, plan: Any, w_prime_j: float, entry_m: float, exit_m: float) -> bytes:
    """W' balance against distance, with the plan's."""
    plt = _mpl()
    fig, ax = plt.subplots(figsize=(FIG_W_IN, 3.0), layout="constrained")
    _trap_zone(ax, entry_m, exit_m)
    planned = _plan_arrays(plan, "w_prime_balance_j")
    if planned is not None:
        ax.plot(planned[0], planned[1] / 1000.0, color=C_PLAN, lw=1.5, ls="--", label="plan")
    ax.plot(s.distance_m, s.w_prime_balance_j / 1000.0, color=C_MEASURED, lw=1.8, label="W′ balance")
    if s.power_stale.any():
        ax.plot(s.distance_m[s.power_stale], s.w_prime_balance_j[s.power_stale] / 1000.0, ls="none",
                marker=".", ms=3, color=C_STALE, label="power stale")
    ax.axhline(w_prime_j / 1000.0, color=C_FIT, lw=0.8, ls=":", label=f"W′ {w_prime_j / 1000:.1f} kJ")
    ax.axhline(0.0, color=C_ALARM, lw=0.8)
    ax.set_xlim(0, exit_m * 1.02)
    ax.set_xlabel("distance from the start line, m")
    ax.set_ylabel("kJ")
    ax.set_title("W′ balance (Skiba et al. 2015)")
    _legend(ax, 4)
    return _png(fig)


def sensor_plot(timelines: Sequence[ChannelTimeline], t_end_s: float, labels: dict[str, str]) -> bytes:
    """Per sensor channel: when it was current, stale or down."""
    plt = _mpl()
    n = max(1, len(timelines))
    fig, ax = plt.subplots(figsize=(FIG_W_IN, 0.9 + 0.42 * n), layout="constrained")
    for k, tl in enumerate(timelines):
        y = n - 1 - k
        ax.broken_barh([(0.0, t_end_s)], (y - 0.3, 0.6), color="#d6efe9")
        if tl.stale:
            ax.broken_barh([(a, max(b - a, 0.2)) for a, b in tl.stale], (y - 0.3, 0.6), color="#e8a33d")
        if tl.down:
            ax.broken_barh([(a, max(b - a, 0.2)) for a, b in tl.down], (y - 0.3, 0.6), color=C_ALARM)
    ax.set_yticks(range(n))
    ax.set_yticklabels([labels.get(t.channel, t.channel) for t in reversed(timelines)] or ["(none)"])
    ax.set_xlim(0, max(t_end_s, 1.0))
    ax.set_xlabel("ride time, s")
    ax.set_title("Sensor health: current (green), stale (amber), link down (red)")
    ax.grid(axis="y", visible=False)
    return _png(fig)


def trap_plot(s: Series, trap: TrapResult, entry_m: float, exit_m: float, unit: str) -> bytes | None:
    """Speed through the trap against ride time, with the crossing times."""
    if trap.entry_s is None:
        return None
    plt = _mpl()
    k = _speed_factor(unit)
    lo = trap.entry_s - 10.0
    hi = (trap.exit_s if trap.exit_s is not None else float(s.t_s[-1])) + 5.0
    m = (s.t_s >= lo) & (s.t_s <= hi)
    fig, ax = plt.subplots(figsize=(FIG_W_IN, 2.8), layout="constrained")
    ax.axvspan(trap.entry_s, trap.exit_s if trap.exit_s is not None else hi, color=C_TRAP, zorder=0)
    ax.plot(s.t_s[m], np.where(s.speed_stale[m], np.nan, s.speed_mps[m] * k), color=C_MEASURED, lw=1.8,
            label="measured speed")
    if trap.mean_speed_mps is not None:
        ax.hlines(trap.mean_speed_mps * k, trap.entry_s, trap.exit_s, color=C_FIT, lw=2.0,
                  label=f"mean through the trap {trap.mean_speed_mps * k:.2f} {unit}")
    if trap.predicted_at_entry_mps is not None:
        ax.axhline(trap.predicted_at_entry_mps * k, color=C_TARGET, lw=1.0, ls="--",
                   label=f"predicted at entry {trap.predicted_at_entry_mps * k:.2f}")
    ax.set_xlim(lo, hi)
    ax.set_xlabel("ride time, s")
    ax.set_ylabel(f"speed, {unit}")
    ax.set_title(f"The trap: {exit_m - entry_m:.0f} m from {entry_m:.0f} m")
    _legend(ax)
    return _png(fig)
