"""Coast-down analysis: CdA and Crr from stretches ridden without pedalling.

The road-load equation of the vehicle coast-down method (SAE J2263,
"Road Load Measurement Using Onboard Anemometry and Coastdown Techniques";
ISO 10521-1, "Road vehicles - Road load - Part 1: Determination under
reference atmospheric conditions") is

    -m_eff dv/dt = f0 + f2 v_air^2 + m g sin(theta),   f0 = Crr m g cos(theta),
                                                      f2 = 1/2 rho CdA.

Those standards difference the speed over speed bands; here the same
equation is fitted in its integrated (energy) form over short windows
inside each coasting stretch - minus the change of kinetic and potential
energy equals the drag and rolling work - so no speed is differentiated and
a gently sloping course is handled exactly (the grade is not required to be
zero, nor the vehicle to slow down). A stretch counts as coasting when every
power report covering it is at or below ``[estimator] coast_power_w``; with
interval-average reports (see :mod:`livecoach.estimate.power`) that is
exact from the report before the first zero report onward. Stretches
shorter than ``coast_min_s`` or slower than ``min_speed_mps`` are not used.

Candau et al. (1999), Med. Sci. Sports Exerc. 31:1441, report a
repeatability of about 0.7 % for CdA and Crr by coast-down on bicycles.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any, Iterable

from livecoach.errors import LivecoachError
from livecoach.estimate.records import EnergyWindow
from livecoach.estimate.regression import DragFit
from livecoach.estimate.settings import estimator_config
from livecoach.stream import samples as S

#: Window length inside coasting stretches, s.
COAST_WINDOW_S = 2.0


class CoastdownError(LivecoachError):
    """No usable coasting stretch was found."""


@dataclass(frozen=True, slots=True)
class CoastStretch:
    """One coasting stretch: start and end (s), speeds there (m/s), windows used."""

    t0_s: float
    t1_s: float
    v0_mps: float
    v1_mps: float
    windows: int


@dataclass(frozen=True)
class CoastdownResult:
    """CdA (m^2) and Crr with sd; road-load coefficients f0 (N) and f2 (N s^2/m^2)
    at the ride's air density; the stretches used."""

    cda_m2: float
    cda_sd_m2: float
    crr: float
    crr_sd: float
    f0_n: float
    f2_nspm2: float
    air_density_kgpm3: float
    n_windows: int
    stretches: list[CoastStretch] = field(default_factory=list)
    rejected: dict[str, int] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {
            "cda_m2": self.cda_m2, "cda_sd_m2": self.cda_sd_m2, "crr": self.crr,
            "crr_sd": self.crr_sd, "f0_n": self.f0_n, "f2_nspm2": self.f2_nspm2,
            "air_density_kgpm3": self.air_density_kgpm3, "n_windows": self.n_windows,
            "stretches": [
                {"t0_s": s.t0_s, "t1_s": s.t1_s, "v0_mps": s.v0_mps, "v1_mps": s.v1_mps,
                 "windows": s.windows} for s in self.stretches
            ],
            "rejected": dict(sorted(self.rejected.items())),
        }


def coast_intervals(power: list[tuple[float, float]], coast_power_w: float,
                    min_s: float) -> list[tuple[float, float]]:
    """Time spans (s) fully covered by power reports at or below ``coast_power_w``.

    ``power``: (receive time s, power W) in time order. A report at t_k is the
    mean over (t_{k-1}, t_k], so a run of low reports k..j covers
    (t_{k-1}, t_j].
    """
    spans = []
    start = None
    prev_t = None
    for t, p in power:
        if p <= coast_power_w and math.isfinite(p):
            if start is None and prev_t is not None:
                start = prev_t
            end = t
        else:
            if start is not None and end - start >= min_s:
                spans.append((start, end))
            start = None
        prev_t = t
    if start is not None and end - start >= min_s:
        spans.append((start, end))
    return spans


def coastdown_fit(samples: Iterable[Any], ride: Any) -> CoastdownResult:
    """Fit CdA and Crr from the coasting stretches of a ride (samples in time order).

    Raises :class:`CoastdownError` when no stretch is long and fast enough.
    """
    from livecoach.estimate.windows import WindowBuilder

    cfg = estimator_config(ride)
    samples = list(samples)
    power = [(s.t_s, s.power_w) for s in samples if type(s) is S.PowerSample
             and isinstance(s.power_w, (int, float))]
    spans = coast_intervals(power, cfg.coast_power_w, cfg.coast_min_s)
    if not spans:
        raise CoastdownError(
            f"no coasting stretch: need at least {cfg.coast_min_s:g} s of power reports at or "
            f"below {cfg.coast_power_w:g} W ({len(power)} power reports in the ride)"
        )
    wcfg = replace(cfg, window_s=COAST_WINDOW_S, power_lag_sd_s=0.0)
    builder = WindowBuilder(ride, wcfg, (cfg.power_lag_s,), cfg.power_lag_s)
    windows: list[EnergyWindow] = []
    for s in samples:
        builder.feed(s)
        if builder.out:
            windows.extend(builder.out)
            builder.out.clear()
    rejected = dict(builder.rejected)
    used: list[EnergyWindow] = []
    stretches: list[CoastStretch] = []
    margin = 0.1
    for t0, t1 in spans:
        inside = [w for w in windows if w.t0_s >= t0 + margin and w.t1_s <= t1 - margin]
        if not inside:
            rejected["coast_stretch_too_slow_or_short"] = rejected.get("coast_stretch_too_slow_or_short", 0) + 1
            continue
        used.extend(inside)
        stretches.append(CoastStretch(t0, t1, inside[0].v_mean_mps, inside[-1].v_mean_mps,
                                      len(inside)))
    if len(used) < 3:
        raise CoastdownError(
            f"coasting stretches found ({len(spans)}) but only {len(used)} usable windows: "
            f"coast longer, above {cfg.min_speed_mps:g} m/s"
        )
    # Weak priors: the coast-down should speak for itself.
    fit = DragFit([ride.vehicle.cda_m2, ride.vehicle.crr], [[1.0, 0.0], [0.0, 0.01]],
                  (cfg.power_lag_s,), [0.0], None, block_s=10.0)
    # Work terms are ~0 by construction; keep the measured ones (a few W of noise).
    for w in used:
        fit.add(w)
    res = fit.solve()
    rho = builder.rho_kgpm3
    cda, crr = res.theta[0], res.theta[1]
    return CoastdownResult(
        cda_m2=cda,
        cda_sd_m2=math.sqrt(max(res.cov[0][0], 0.0)),
        crr=crr,
        crr_sd=math.sqrt(max(res.cov[1][1], 0.0)),
        f0_n=crr * ride.vehicle.mass_kg * 9.80665,
        f2_nspm2=0.5 * rho * cda,
        air_density_kgpm3=rho,
        n_windows=len(used),
        stretches=stretches,
        rejected=rejected,
    )

