"""Offline batch fit of a whole ride with the live model.

The same energy windows and the same regression as the live estimator
(:mod:`livecoach.estimate.windows`, :mod:`livecoach.estimate.regression`),
but without forgetting and without change handling: one weighted
least-squares fit (with the ride file's priors) of every usable window,
with the power lag chosen by the data. Windows whose standardised residual
exceeds ``[estimator] outlier_sigma`` in a first pass are set aside and the
fit repeated (a one-step outlier rejection, common practice).
"""

from __future__ import annotations

import math
from typing import Any, Iterable

from livecoach.errors import LivecoachError
from livecoach.estimate.records import BatchFit, EnergyWindow
from livecoach.estimate.regression import DragFit
from livecoach.estimate.settings import estimator_config


class BatchFitError(LivecoachError):
    """The ride has no usable data for a batch fit."""


def collect_windows(samples: Iterable[Any], ride: Any) -> tuple[list[EnergyWindow], dict[str, int]]:
    """Energy windows of a whole ride (samples in time order) and the set-aside counts."""
    from livecoach.estimate.drag import lag_grid
    from livecoach.estimate.windows import WindowBuilder

    cfg = estimator_config(ride)
    lags, _ = lag_grid(cfg)
    builder = WindowBuilder(ride, cfg, lags, cfg.power_lag_s)
    windows: list[EnergyWindow] = []
    for s in samples:
        try:
            builder.feed(s)
        except (ArithmeticError, ValueError, TypeError, AttributeError, IndexError,
                LivecoachError) as exc:
            builder.out.clear()
            builder.count(f"estimator_error:{type(exc).__name__}")
        if builder.out:
            windows.extend(builder.out)
            builder.out.clear()
    return windows, dict(builder.rejected)


def fit_windows(windows: list[EnergyWindow], ride: Any, rejected: dict[str, int] | None = None) -> BatchFit:
    """Fit energy windows without forgetting (two passes: fit, drop outliers, refit)."""
    from livecoach.estimate.drag import lag_grid, prior_of

    cfg = estimator_config(ride)
    lags, lag_lp = lag_grid(cfg)
    theta0, cov0 = prior_of(ride, cfg)
    rejected = dict(rejected or {})
    if not windows:
        raise BatchFitError(
            "no usable energy windows (need wheel or speed data above "
            f"{cfg.min_speed_mps:g} m/s together with power)"
        )

    def run(ws: list[EnergyWindow]) -> DragFit:
        fit = DragFit(theta0, cov0, lags, lag_lp, None, power_scale_sd=cfg.power_scale_sd_pct / 100.0)
        for w in ws:
            fit.add(w)
        fit.solve()
        return fit

    fit = run(windows)
    kept = []
    for w in windows:
        e, var = fit.innovation(w)
        if var > 0.0 and abs(e) / math.sqrt(var) > cfg.outlier_sigma:
            rejected["batch_outlier"] = rejected.get("batch_outlier", 0) + 1
        else:
            kept.append(w)
    if len(kept) != len(windows) and kept:
        fit = run(kept)
    res = fit.result if fit.result is not None else fit.solve()
    cda, crr = res.theta[0], res.theta[1]
    wind = ride.air.headwind_mps
    if len(res.theta) > 2 and cda > 0.0:
        wind += res.theta[2] / cda
    return BatchFit(
        cda_m2=cda,
        crr=crr,
        cda_sd_m2=math.sqrt(max(res.cov[0][0], 0.0)),
        crr_sd=math.sqrt(max(res.cov[1][1], 0.0)),
        n=len(kept),
        power_lag_s=res.lag_s,
        headwind_mps=wind,
        noise_scale=res.sigma2,
        rejected=rejected,
    )


def batch_fit(samples: Iterable[Any], ride: Any) -> BatchFit:
    """Offline least-squares fit of a whole ride (samples in time order).

    Raises :class:`BatchFitError` when the ride has no usable windows.
    """
    windows, rejected = collect_windows(samples, ride)
    return fit_windows(windows, ride, rejected)
