"""Plain frozen records the estimator hands out (SI units; names carry the unit)."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True, slots=True)
class DragEstimate:
    """A snapshot of the live estimator after the last sample fed.

    Kinematics: ``t_s`` (s, receive clock), ``distance_m`` along the course,
    ``speed_mps`` ground speed, ``accel_mps2`` dv/dt, ``airspeed_mps`` from the
    probe (None without one), ``wind_mps`` measured head wind (probe minus
    ground speed, None without a probe), ``speed_source`` ("wheel", "gps",
    "speed" for CSV speed, or None).

    Estimate: ``cda_m2`` and ``crr`` with their standard deviations (from the
    covariance scaled by the measured residual variance, including the
    uncertainty of the power lag); ``headwind_mps`` (+ against the rider: the
    configured value, or the estimate when it is estimated) and its sd;
    ``power_lag_s`` the estimated extra delay of the power reports.

    Bookkeeping: ``samples_used`` samples that fed the estimate,
    ``windows_used`` energy windows in the fit, ``rejected`` reason -> count
    for samples and windows set aside, ``noise_scale`` the measured residual
    variance relative to the modelled one (about 1 when the noise model fits).
    """

    t_s: float
    distance_m: float | None
    speed_mps: float | None
    accel_mps2: float | None
    airspeed_mps: float | None
    cda_m2: float
    cda_sd_m2: float
    crr: float
    crr_sd: float
    samples_used: int
    rejected: dict[str, int] = field(default_factory=dict)
    windows_used: int = 0
    headwind_mps: float = 0.0
    headwind_sd_mps: float | None = None
    power_lag_s: float = 0.0
    power_lag_sd_s: float = 0.0
    noise_scale: float = 1.0
    wind_mps: float | None = None
    speed_source: str | None = None
    speed_stale: bool = True
    air_density_kgpm3: float | None = None

    def to_dict(self) -> dict[str, Any]:
        return {name: getattr(self, name) for name in self.__slots__}  # type: ignore[attr-defined]


@dataclass(frozen=True, slots=True)
class DragAlarm:
    """"Drag changed": a CUSUM alarm (Page 1954) on the normalised residuals.

    ``t_s``: when the alarm was raised (s); ``start_t_s``: estimated start of
    the change (s); ``step_cda_m2``: estimated size of the step as a change
    of CdA (m^2; a change of rolling resistance shows as its CdA equivalent at
    the speeds ridden), ``step_sd_cda_m2`` its sd; ``step_force_n``: the step
    as a resistive force at the mean speed since the change, N; ``text``: a
    one-line message for the crew.
    """

    t_s: float
    step_cda_m2: float
    start_t_s: float
    text: str
    step_sd_cda_m2: float = 0.0
    step_force_n: float = 0.0
    kind: str = "drag_changed"


@dataclass(frozen=True, slots=True)
class BatchFit:
    """An offline least-squares fit of a whole ride with the live model.

    ``n``: energy windows used; ``power_lag_s``: the power delay that fits
    best (model-averaged); ``headwind_mps``: configured or estimated;
    ``rejected``: windows and samples set aside, by reason.
    """

    cda_m2: float
    crr: float
    cda_sd_m2: float
    crr_sd: float
    n: int
    power_lag_s: float = 0.0
    headwind_mps: float = 0.0
    noise_scale: float = 1.0
    rejected: dict[str, int] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {name: getattr(self, name) for name in self.__slots__}  # type: ignore[attr-defined]


@dataclass(frozen=True, slots=True)
class EnergyWindow:
    """One energy window of the power balance (Martin et al. 1998, integrated).

    Over [t0_s, t1_s] (receive clock): for each candidate power lag k,
    ``ys_j[k]`` = crank work x efficiency - delta kinetic energy (with wheel
    inertia) - delta potential energy - known losses, J; ``x`` the regressors
    (J per unit parameter): x[0] = 1/2 rho int v_air^2 v dt (per m^2 of CdA),
    x[1] = m g cos(theta) delta_d (per unit Crr), and x[2] (head-wind
    estimation only) = rho int v_air v dt (per m^3/s of CdA x wind).
    ``var_j2``: modelled variance of the window's error, J^2 (power reports,
    gusts or probe noise, end-speed errors through the kinetic energy, survey
    error through the potential energy); ``cov_prev_j2``: its covariance with
    the previous window's error when the two share an end point (the shared
    point's errors enter one with + and the other with -; gusts outlast a
    window), J^2. ``node0``/``node1``: identities of the start and end points.
    ``work_j``: crank work x efficiency at the prior lag, J (for the power
    calibration sensitivity); ``v_mean_mps``: mean ground speed.
    """

    t0_s: float
    t1_s: float
    x: tuple[float, ...]
    ys_j: tuple[float, ...]
    var_j2: float
    work_j: float
    v_mean_mps: float
    d0_m: float
    d1_m: float
    cov_prev_j2: float = 0.0
    node0: int = -1
    node1: int = -1
