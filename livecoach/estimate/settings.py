"""The ``[estimator]`` ride-file section: settings of the live drag estimator.

Every key has a default, so a ride file without the section works. Units are
in the key names; each ``doc`` says what the key does and, where it matters,
where the default comes from.
"""

from __future__ import annotations

from dataclasses import dataclass

from livecoach.config.schema import setting


@dataclass(frozen=True, kw_only=True)
class EstimatorConfig:
    """[estimator]: live CdA/Crr estimation, change alarm and coast-down analysis."""

    window_s: float = setting(
        5.0, doc="length of the energy windows the power balance is integrated over",
        unit="s", lo=1.0, hi=60.0,
    )
    min_speed_mps: float = setting(
        4.0, doc="windows slower than this anywhere (standing start) are not used",
        unit="m/s", lo=0.5, hi=30.0,
    )
    memory_s: float = setting(
        900.0, doc="time constant of the exponential forgetting of old data "
        "(riding time; the prior is never forgotten)", unit="s", lo=10.0, hi=1.0e7,
    )
    power_lag_s: float = setting(
        0.0, doc="expected extra delay of the power reports behind the wheel, beyond the "
        "half report interval that the interval-average model already covers", unit="s",
        lo=-2.0, hi=3.0,
    )
    power_lag_sd_s: float = setting(
        0.3, doc="prior standard deviation of that delay (0: take power_lag_s as known)",
        unit="s", lo=0.0, hi=3.0,
    )
    power_noise_pct: float = setting(
        1.5, doc="random error of one power report, share of the reading (sd)", unit="%",
        lo=0.0, hi=50.0,
    )
    power_noise_w: float = setting(
        2.0, doc="random error of one power report, additive part (sd)", unit="W", lo=0.0, hi=200.0
    )
    power_scale_sd_pct: float = setting(
        0.0, doc="calibration uncertainty of the power meter (sd of its scale error); "
        "added to the reported CdA and Crr uncertainty", unit="%", lo=0.0, hi=20.0,
    )
    gust_rms_mps: float = setting(
        0.2, doc="expected rms of the gusts along the course (weights the windows; "
        "the noise level itself is measured from the residuals)", unit="m/s", lo=0.0, hi=5.0,
    )
    gust_time_s: float = setting(
        5.0, doc="expected time scale of the gusts", unit="s", lo=0.1, hi=600.0
    )
    elevation_sd_m: float = setting(
        0.03, doc="survey error of the course elevation points (sd)", unit="m", lo=0.0, hi=10.0
    )
    elevation_error_spacing_m: float = setting(
        100.0, doc="distance over which elevation errors are independent", unit="m",
        lo=1.0, hi=100000.0,
    )
    estimate_headwind: bool = setting(
        False, doc="estimate a constant head wind as a third parameter (no air-speed probe)"
    )
    headwind_sd_mps: float = setting(
        1.0, doc="prior sd of the head wind when it is estimated", unit="m/s", lo=0.01, hi=20.0
    )
    cusum_drift: float = setting(
        1.0, doc="CUSUM reference value k (Page 1954), in residual standard deviations "
        "(half the smallest shift per window worth an alarm)",
        lo=0.0, hi=5.0,
    )
    cusum_threshold: float = setting(
        8.0, doc="CUSUM decision threshold h, in residual standard deviations", lo=1.0, hi=100.0
    )
    outlier_sigma: float = setting(
        6.0, doc="a window whose normalised residual exceeds this is set aside (braking, bump)",
        lo=2.0, hi=100.0,
    )
    max_accel_mps2: float = setting(
        5.0, doc="larger wheel-speed changes between events are implausible jumps",
        unit="m/s^2", lo=0.5, hi=50.0,
    )
    max_gap_s: float = setting(
        2.5, doc="longest gap in the wheel or power data inside a usable window", unit="s",
        lo=0.2, hi=30.0,
    )
    stale_s: float = setting(
        3.0, doc="a sensor silent this long is stale; its speed is not shown as current",
        unit="s", lo=0.2, hi=60.0,
    )
    coast_power_w: float = setting(
        5.0, doc="coast-down: reports at or below this power count as not pedalling",
        unit="W", lo=0.0, hi=100.0,
    )
    coast_min_s: float = setting(
        6.0, doc="coast-down: shortest usable stretch without pedalling", unit="s", lo=1.0, hi=600.0
    )


# Registered by name in livecoach.config.ridefile.OPTIONAL_SECTIONS ("estimator").


def estimator_config(ride) -> EstimatorConfig:
    """The ride's ``[estimator]`` section (defaults when the file has none)."""
    return ride.section("estimator")
