"""Sample-level synthetic rides from the physics core, for tests and benchmarks.

A ride is integrated with the classical fourth-order Runge-Kutta method at a
fixed step from :func:`livecoach.physics.power_balance.acceleration_mps2`
(the shared physics core; no second copy of the equations), on a "true"
course that differs from the ride file's surveyed elevation table by a
seeded survey error, with Ornstein-Uhlenbeck gusts. The sensors are
emulated at the sample level (after decoding): a power meter that reports
the mean power over its report interval with proportional and additive
noise; a wheel sensor whose event times are quantised to 1/1024 s on its own
clock and reported at a notification rate; optional air-speed probe and
GPS. Everything random comes from one seeded generator, so the same seed
gives the same ride.

This is independent of the bench simulator in ``sim/`` on purpose: the
estimator's tests should not depend on another component's modelling
choices.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass, field
from typing import Any, Callable

from livecoach.physics.power_balance import acceleration_mps2
from livecoach.stream.samples import AirSample, GpsSample, PowerSample, SpeedSample, WheelSample


@dataclass(frozen=True)
class SyntheticRide:
    """Samples (time-ordered) and the truth they came from."""

    samples: list[Any]
    cda_at: Callable[[float], float]
    crr: float
    t_above_8mps_s: float | None
    duration_s: float
    distance_m: float
    truth_t_s: list[float] = field(repr=False, default_factory=list)
    truth_speed_mps: list[float] = field(repr=False, default_factory=list)
    truth_distance_m: list[float] = field(repr=False, default_factory=list)

    def truth_at(self, t_s: float) -> tuple[float, float]:
        """True (distance m, speed m/s) at ``t_s`` (s), linear between steps."""
        import bisect

        ts = self.truth_t_s
        k = min(max(bisect.bisect_right(ts, t_s), 1), len(ts) - 1)
        f = (t_s - ts[k - 1]) / (ts[k] - ts[k - 1])
        d = self.truth_distance_m[k - 1] + f * (self.truth_distance_m[k] - self.truth_distance_m[k - 1])
        v = self.truth_speed_mps[k - 1] + f * (self.truth_speed_mps[k] - self.truth_speed_mps[k - 1])
        return d, v


def default_power_profile(t_s: float) -> float:
    """A standing-start run-up effort: hard for 25 s, then steady (W)."""
    return 650.0 if t_s < 25.0 else 380.0


def synthesize_ride(
    ride: Any,
    *,
    cda_m2: float,
    crr: float,
    seed: int,
    distance_m: float | None = None,
    max_time_s: float = 1200.0,
    power_profile: Callable[[float], float] = default_power_profile,
    rider_noise_pct: float = 3.0,
    rider_noise_time_s: float = 2.0,
    rider_lag_s: float = 1.0,
    gust_rms_mps: float = 0.1,
    gust_time_s: float = 6.0,
    headwind_mps: float = 0.0,
    power_rate_hz: float = 2.0,
    power_noise_pct: float = 1.5,
    power_noise_w: float = 2.0,
    power_latency_s: float = 0.03,
    power_extra_lag_s: float = 0.0,
    wheel_rate_hz: float = 2.0,
    wheel_latency_s: float = 0.03,
    wheel_clock_offset_s: float = 1234.5,
    airspeed_probe: bool = False,
    airspeed_noise_pct: float = 1.0,
    gps: bool = False,
    gps_speed_sd_mps: float = 0.05,
    elevation_error_m: float = 0.03,
    elevation_error_spacing_m: float = 100.0,
    cda_steps: tuple[tuple[float, float], ...] = (),
    true_circumference_m: float | None = None,
    speed_samples_hz: float | None = None,
    step_s: float = 0.02,
) -> SyntheticRide:
    """Integrate one ride and emit sensor samples (see the module docstring).

    ``cda_steps``: ((t_s, cda_m2), ...) the drag area changes at t_s.
    ``rider_lag_s``: time constant of the rider's first-order response to a
    change of the profile, s. ``speed_samples_hz``: emit :class:`SpeedSample` (CSV-like, with distance)
    instead of wheel samples. ``power_extra_lag_s``: an extra delay of the
    power reports (a meter that averages behind the report time).
    """
    rng = random.Random(seed)
    veh = ride.vehicle
    course = ride.course
    rho = ride.air.density_kgpm3
    circ = true_circumference_m if true_circumference_m is not None else veh.wheel_circumference_m
    total_m = distance_m if distance_m is not None else course.runup_m + course.trap_m
    # True course = surveyed table + survey error, independent every spacing.
    n_err = int(total_m / elevation_error_spacing_m) + 3
    errs = [rng.gauss(0.0, elevation_error_m) for _ in range(n_err)]

    def true_grade(d: float) -> float:
        k = int(d / elevation_error_spacing_m)
        k = min(max(k, 0), n_err - 2)
        err_slope = (errs[k + 1] - errs[k]) / elevation_error_spacing_m
        return course.grade(d) + err_slope

    steps = sorted(cda_steps)

    def cda_at(t: float) -> float:
        c = cda_m2
        for ts, cv in steps:
            if t >= ts:
                c = cv
        return c

    models: dict[float, Any] = {}

    def model(t: float) -> Any:
        c = cda_at(t)
        if c not in models:
            models[c] = veh.model(cda_m2=c, crr=crr)
        return models[c]

    # Ornstein-Uhlenbeck processes, exact discretisation.
    a_g = math.exp(-step_s / gust_time_s)
    s_g = gust_rms_mps * math.sqrt(1.0 - a_g * a_g)
    a_r = math.exp(-step_s / rider_noise_time_s)
    s_r = rider_noise_pct / 100.0 * math.sqrt(1.0 - a_r * a_r)
    gust = rng.gauss(0.0, gust_rms_mps)
    wob = 0.0

    t, d, v = 0.0, 0.0, 0.0
    ts_l = [0.0]
    ds_l = [0.0]
    vs_l = [0.0]
    ps_l: list[float] = []
    ws_l: list[float] = []
    t8: float | None = None
    a_lag = math.exp(-step_s / rider_lag_s) if rider_lag_s > 0.0 else 0.0
    p_resp = power_profile(0.0)
    while d < total_m and t < max_time_s:
        p_resp = a_lag * p_resp + (1.0 - a_lag) * power_profile(t)
        p = max(0.0, p_resp * (1.0 + wob)) if p_resp >= 0.5 else 0.0
        w = headwind_mps + gust
        m = model(t)

        def acc(vv: float, dd: float) -> float:
            return acceleration_mps2(p, max(vv, 0.0), true_grade(dd), rho, m,
                                     airspeed_mps=max(vv, 0.0) + w)

        k1v = acc(v, d)
        k1d = v
        k2v = acc(v + 0.5 * step_s * k1v, d + 0.5 * step_s * k1d)
        k2d = v + 0.5 * step_s * k1v
        k3v = acc(v + 0.5 * step_s * k2v, d + 0.5 * step_s * k2d)
        k3d = v + 0.5 * step_s * k2v
        k4v = acc(v + step_s * k3v, d + step_s * k3d)
        k4d = v + step_s * k3v
        v = max(0.0, v + step_s / 6.0 * (k1v + 2 * k2v + 2 * k3v + k4v))
        d = d + step_s / 6.0 * (k1d + 2 * k2d + 2 * k3d + k4d)
        ps_l.append(p)
        ws_l.append(w)
        t += step_s
        ts_l.append(t)
        ds_l.append(d)
        vs_l.append(v)
        if t8 is None and v > 8.0:
            t8 = t
        gust = a_g * gust + s_g * rng.gauss(0.0, 1.0)
        wob = a_r * wob + s_r * rng.gauss(0.0, 1.0)
    duration = t
    samples: list[Any] = []

    # Power meter: mean over each report interval, noisy, received after a latency.
    interval = 1.0 / power_rate_hz
    n_steps_per = interval / step_s
    k = 1
    while k * interval <= duration:
        t_rep = k * interval
        lo = int(round((t_rep - interval - power_extra_lag_s) / step_s))
        hi = int(round((t_rep - power_extra_lag_s) / step_s))
        seg = ps_l[max(lo, 0):max(hi, 0)]
        mean_p = sum(seg) / len(seg) if seg else 0.0
        if len(seg) < n_steps_per * 0.5:
            mean_p = 0.0
        rep = mean_p * (1.0 + rng.gauss(0.0, power_noise_pct / 100.0)) + rng.gauss(0.0, power_noise_w)
        if mean_p == 0.0:
            rep = 0.0  # not pedalling: meters report zero
        lat = max(0.005, power_latency_s + rng.gauss(0.0, 0.01))
        samples.append(PowerSample(t_rep + lat, round(rep)))
        k += 1

    # Wheel: exact event times of each revolution, quantised on the sensor clock.
    if speed_samples_hz is None:
        events: list[float] = []
        next_d = circ
        for i in range(1, len(ds_l)):
            while ds_l[i] >= next_d:
                f = (next_d - ds_l[i - 1]) / (ds_l[i] - ds_l[i - 1])
                events.append(ts_l[i - 1] + f * step_s)
                next_d += circ
        ni = 1.0 / wheel_rate_hz
        j = 0
        n_ev = 0
        tn = 0.3 * ni
        while tn <= duration:
            while j < len(events) and events[j] <= tn:
                j += 1
            n_ev = j
            last = events[j - 1] if j > 0 else 0.0
            sensor_t = math.floor((last + wheel_clock_offset_s) * 1024.0) / 1024.0
            lat = max(0.005, wheel_latency_s + rng.gauss(0.0, 0.01))
            samples.append(WheelSample(tn + lat, n_ev + 1000, sensor_t))
            tn += ni
    else:
        ni = 1.0 / speed_samples_hz
        tn = 0.0
        while tn <= duration:
            i = min(int(round(tn / step_s)), len(ts_l) - 1)
            samples.append(SpeedSample(tn, vs_l[i], ds_l[i]))
            tn += ni

    if airspeed_probe:
        tn = 0.05
        while tn <= duration:
            i = min(int(round(tn / step_s)), len(ws_l) - 1)
            va = (vs_l[i] + ws_l[i]) * (1.0 + rng.gauss(0.0, airspeed_noise_pct / 100.0))
            samples.append(AirSample(tn + 0.005, airspeed_mps=va))
            tn += 0.1
    if gps:
        lat0, lon0, r_e = 31.0, -113.0, 6371008.8
        tn = 0.02
        while tn <= duration:
            i = min(int(round(tn / step_s)), len(ts_l) - 1)
            dn = ds_l[i]
            lat = lat0 + math.degrees(dn / r_e)
            samples.append(GpsSample(tn + 0.06, True, lat, lon0, None,
                                     max(0.0, vs_l[i] + rng.gauss(0.0, gps_speed_sd_mps))))
            tn += 0.1
    samples.sort(key=lambda s: s.t_s)
    return SyntheticRide(samples, cda_at, crr, t8, duration, d, ts_l, vs_l, ds_l)


def example_ride(estimator: dict[str, Any] | None = None, **sections: dict[str, Any]) -> Any:
    """The packaged example ride file, with an ``[estimator]`` table and other
    sections replaced or merged (for tests and benchmarks)."""
    import tomllib

    from livecoach.cli.commands.init import example_ride_text
    from livecoach.config.ridefile import parse_ride_dict

    data = tomllib.loads(example_ride_text())
    for name, table in sections.items():
        data.setdefault(name, {}).update(table)
    if estimator:
        data["estimator"] = dict(estimator)
    return parse_ride_dict(data, "example ride file")
