"""Energy windows: the power balance integrated over a few seconds.

Over a window [t_a, t_b] between two distance points the power balance of
Martin et al. (1998, J. Appl. Biomech. 14:276) integrates to

    E_c * W_crank - 1/2 m_eff (v_b^2 - v_a^2) - m g (h_b - h_a) - W_bearing
        = CdA * 1/2 rho int v_air^2 v dt  +  Crr * m g cos(theta) (d_b - d_a)

with m_eff = m + I/r^2. Only the end speeds enter (through the kinetic
energy), so no speed is differentiated; this is the energy form of the
balance behind Chung's virtual-elevation method (Chung 2003, "Estimating
CdA with a power meter"). Each window becomes one regression row
(EnergyWindow) for the estimator, with one left-hand side per candidate
power lag, and a modelled error variance from the sensor noise, the gusts
and the survey error of the course. Windows the model does not describe
(standing start, braking, gaps, stale sensors) are counted by reason and
set aside.
"""

from __future__ import annotations

import bisect
import math
from typing import Any

from livecoach.estimate.kinematics import PointTrack, SpeedTrack, WheelTrack
from livecoach.estimate.odometry import Odometer
from livecoach.estimate.power import PowerTrack
from livecoach.estimate.records import EnergyWindow
from livecoach.estimate.settings import EstimatorConfig
from livecoach.physics.atmosphere import air_density_kgpm3
from livecoach.physics.power_balance import GRAVITY_MPS2
from livecoach.stream import samples as S
from livecoach.stream.events import CH_POWER

#: Longest spacing of air-speed readings for a window to use the probe, s.
AIR_MAX_SPACING_S = 1.0
#: GPS fixes older than this do not stand in for the wheel, s.
GPS_FRESH_S = 1.5


def integrated_ou_variance(sigma: float, tau_s: float, t_s: float) -> float:
    """Variance of the time integral over ``t_s`` of an Ornstein-Uhlenbeck process
    with sd ``sigma`` and time constant ``tau_s``: 2 sigma^2 tau (T - tau (1 - e^(-T/tau)))
    (Uhlenbeck & Ornstein 1930, Phys. Rev. 36:823; integrated autocovariance)."""
    if sigma <= 0.0 or t_s <= 0.0:
        return 0.0
    return 2.0 * sigma * sigma * tau_s * (t_s - tau_s * (1.0 - math.exp(-t_s / tau_s)))


def survey_error_covariance(distance_m: float, spacing_m: float) -> float:
    """Covariance (per unit variance) of the survey error at two points ``distance_m`` apart.

    Model: independent errors of unit variance at survey points ``spacing_m``
    apart, linear between them, at a random phase. The covariance is then the
    autocorrelation of the linear-interpolation (hat) kernel, the cubic
    B-spline: 2/3 - u^2 + u^3/2 for u = |distance|/spacing <= 1,
    (2 - u)^3 / 6 for 1 <= u <= 2, else 0 (de Boor 1978, "A Practical Guide to
    Splines", the cubic B-spline as the convolution of two hat functions).
    """
    u = abs(distance_m) / spacing_m
    if u <= 1.0:
        return 2.0 / 3.0 - u * u + 0.5 * u * u * u
    if u <= 2.0:
        return (2.0 - u) ** 3 / 6.0
    return 0.0


class WindowBuilder:
    """Turns samples (in time order) into energy windows and kinematics.

    ``lags_s``: candidate power lags (s); the work of each window is computed
    for each. Windows ready for the estimator collect in :attr:`out`; set-aside
    windows and rejected samples are counted in :attr:`rejected`.
    """

    def __init__(self, ride: Any, cfg: EstimatorConfig, lags_s: tuple[float, ...],
                 prior_lag_s: float = 0.0) -> None:
        v = ride.vehicle
        self.cfg = cfg
        self.course = ride.course
        self.lags_s = lags_s
        self.prior_lag_s = prior_lag_s
        self.lag_lo_s = min(lags_s)
        self.lag_hi_s = max(lags_s)
        self.mass_kg = v.mass_kg
        self.m_eff_kg = v.mass_kg + v.wheel_inertia_kgm2 / v.wheel_radius_m**2
        self.efficiency = v.drivetrain_efficiency
        self.bearing = bool(v.wheel_bearing_loss)
        self.circumference_m = v.wheel_circumference_m
        self.cda_ref_m2 = v.cda_m2
        self.headwind_mps = ride.air.headwind_mps
        self.estimate_headwind = cfg.estimate_headwind
        self.air = ride.air
        self._rho_default = ride.air.density_kgpm3
        self.rho_kgpm3 = self._rho_default
        self._p_pa: float | None = None
        self._t_c: float | None = None
        self._rh_pct: float | None = None
        self._rho_dirty = False
        self.track: PointTrack | None = None
        self.wheel: WheelTrack | None = None
        self.speed: SpeedTrack | None = None
        self.power = PowerTrack()
        self.air_ts: list[float] = []
        self.air_vs: list[float] = []
        self.alt_ts: list[float] = []
        self.alt_hs: list[float] = []
        self.grade_ts: list[float] = []
        self.grade_gs: list[float] = []
        self.gps_t_s: float | None = None
        self.gps_speed_mps: float | None = None
        self.odometer: Odometer | None = None  # shown distance and speed (wheel path)
        self.out: list[EnergyWindow] = []
        self.rejected: dict[str, int] = {}
        self.samples_used = 0
        self.t_s = 0.0
        self._node_a: int | None = None
        self._node_a_val: tuple[float, float, float] | None = None
        self._node_gen = -1
        self._start_i = 0
        self._search_b: int | None = None
        self._prev_close: tuple[int, float, float] | None = None
        self._disp_v: float | None = None
        self._disp_a: float | None = None
        self._wind_ewma: float | None = None
        self.air_last_t_s: float | None = None
        self.air_last_mps: float | None = None

    # ------------------------------------------------------------------ input
    def count(self, reason: str) -> None:
        self.rejected[reason] = self.rejected.get(reason, 0) + 1

    def feed(self, s: Any) -> None:
        """Take one sample of any type (unused types are ignored)."""
        self._feed(s)
        odo = self.odometer
        if odo is not None and self.track is self.wheel:
            odo.update(self.t_s, self.gps_t_s, self.gps_speed_mps, self._disp_v, self._disp_a)

    def _feed(self, s: Any) -> None:
        kind = type(s)
        t = s.t_s
        if isinstance(t, (int, float)) and math.isfinite(t) and t > self.t_s:
            self.t_s = t
        if kind is S.PowerSample:
            r = self.power.feed(t, s.power_w)
            if r is not None:
                self.count(r)
                return
            self.samples_used += 1
            self._advance()
        elif kind is S.WheelSample:
            if self.speed is not None and self.track is self.speed:
                return  # speed given directly: the wheel is not used
            if self.wheel is None:
                self.wheel = WheelTrack(self.circumference_m, self.cfg.max_accel_mps2)
                self.wheel.source = s.source
                self.track = self.wheel
                self.odometer = Odometer(self.wheel, self.cfg.stale_s, GPS_FRESH_S)
            if s.source != self.wheel.source:
                return  # one wheel source at a time (the first one seen)
            n_before = self.wheel.end
            r = self.wheel.feed(t, s.wheel_revolutions, s.wheel_event_time_s)
            if r is not None:
                self.count(r)
                return
            self.samples_used += 1
            if self.wheel.end > n_before:
                f = self.wheel.recent_fit()
                if f is not None:
                    self._disp_v, self._disp_a = f.c1, 2.0 * f.c2
                self._advance()
        elif kind is S.SpeedSample:
            if self.wheel is not None:
                return
            if self.speed is None:
                self.speed = SpeedTrack()
                self.track = self.speed
            r = self.speed.feed(t, s.speed_mps, s.distance_m)
            if r is not None:
                self.count(r)
                return
            self.samples_used += 1
            self._disp_v = s.speed_mps
            self._advance()
        elif kind is S.AirSample:
            self._feed_air(s)
        elif kind is S.AltitudeSample:
            if s.altitude_m is not None and math.isfinite(s.altitude_m) and -500.0 <= s.altitude_m <= 9000.0:
                if not self.alt_ts or t > self.alt_ts[-1]:
                    self.alt_ts.append(t)
                    self.alt_hs.append(float(s.altitude_m))
            elif s.grade is not None and math.isfinite(s.grade) and abs(s.grade) < 0.5:
                if not self.grade_ts or t > self.grade_ts[-1]:
                    self.grade_ts.append(t)
                    self.grade_gs.append(float(s.grade))
            elif s.altitude_m is not None or s.grade is not None:
                self.count("altitude_implausible")
        elif kind is S.GpsSample:
            if s.valid and s.speed_mps is not None and math.isfinite(s.speed_mps) and 0.0 <= s.speed_mps < 60.0:
                self.gps_t_s = t
                self.gps_speed_mps = s.speed_mps
        elif kind is S.LinkSample:
            if s.channel == CH_POWER and s.state != "up":
                self.power.link_down()

    def _feed_air(self, s: S.AirSample) -> None:
        t = s.t_s
        used = False
        va = s.airspeed_mps
        if va is not None:
            if math.isfinite(va) and -5.0 <= va <= 80.0:
                if not self.air_ts or t > self.air_ts[-1]:
                    self.air_ts.append(t)
                    self.air_vs.append(float(va))
                    self.air_last_t_s = t
                    self.air_last_mps = float(va)
                    used = True
            else:
                self.count("airspeed_implausible")
        for name, value, lo, hi in (
            ("_p_pa", s.pressure_pa, 30000.0, 110000.0),
            ("_t_c", s.temperature_c, -40.0, 60.0),
            ("_rh_pct", s.relative_humidity_pct, 0.0, 100.0),
        ):
            if value is None:
                continue
            if math.isfinite(value) and lo <= value <= hi:
                setattr(self, name, float(value))
                self._rho_dirty = True
                used = True
            else:
                self.count("air_data_implausible")
        if used:
            self.samples_used += 1

    def _density(self) -> float:
        if self._rho_dirty:
            self._rho_dirty = False
            p = self._p_pa if self._p_pa is not None else self.air.station_pressure_pa
            tc = self._t_c if self._t_c is not None else self.air.temperature_c
            rh = self._rh_pct if self._rh_pct is not None else self.air.relative_humidity_pct
            self.rho_kgpm3 = air_density_kgpm3(p, tc, rh)
        return self.rho_kgpm3

    # --------------------------------------------------------------- windows
    def _advance(self) -> None:
        """Close every window whose data are complete."""
        tr = self.track
        if tr is None or not tr.ts:
            return
        cfg = self.cfg
        while True:
            if self._node_gen != tr.generation or self._node_a is None or self._node_a < tr.base:
                if self._node_gen != tr.generation:
                    self._start_i = tr.base
                self._node_gen = tr.generation
                self._node_a = None
                # The first point with a usable speed fit starts the windows.
                i = max(tr.base, self._start_i)
                val = None
                while i < tr.end and tr.ready(i):
                    val = tr.node(i)
                    if val is not None:
                        break
                    i += 1
                self._start_i = i
                if val is None:
                    return
                self._node_a, self._node_a_val = i, val
                self._search_b = i + 1
            a = self._node_a
            ta_own = tr.ts[a - tr.base]
            b = self._search_b if self._search_b is not None else a + 1
            while b < tr.end and tr.ts[-tr.base + b] < ta_own + cfg.window_s:
                b += 1
            self._search_b = b
            if b >= tr.end or not tr.ready(b):
                return
            tb = tr.t(b)
            p_end = self.power.t_end
            power_stale = (
                self.power.last_rx_s is None or self.t_s - self.power.last_rx_s > cfg.stale_s
            )
            if (p_end is None or p_end < tb + self.lag_hi_s) and not power_stale:
                return  # wait for the power reports that cover the window
            val_b = tr.node(b)
            if val_b is None:
                self.count("window_fit_failed")
                self._node_a = None
                tr.prune(b)
                continue
            if power_stale and (p_end is None or p_end < tb + self.lag_hi_s):
                self.count("window_power_stale")
            else:
                self._close(a, b, self._node_a_val, val_b)  # type: ignore[arg-type]
            self._node_a, self._node_a_val = b, val_b
            self._search_b = b + 1
            # Keep what the fits around b still need.
            keep = b
            while keep > tr.base and tr.ts[keep - 1 - tr.base] >= tr.ts[-tr.base + b] - 3.0:
                keep -= 1
            tr.prune(keep)
            t_keep = tr.t(keep) + self.lag_lo_s - 2.0
            self.power.prune(t_keep)
            self._prune_series(t_keep)

    def _prune_series(self, t_keep: float) -> None:
        for ts, vs in ((self.air_ts, self.air_vs), (self.alt_ts, self.alt_hs),
                       (self.grade_ts, self.grade_gs)):
            k = bisect.bisect_left(ts, t_keep) - 1
            if k > 256:
                del ts[:k]
                del vs[:k]

    def _close(self, a: int, b: int, va: tuple[float, float, float], vb: tuple[float, float, float]) -> None:
        cfg = self.cfg
        tr = self.track
        if tr is None:
            return
        ta, tb = tr.t(a), tr.t(b)
        dur = tb - ta
        node0 = tr.generation * 1_000_000_000 + a
        node1 = tr.generation * 1_000_000_000 + b
        rho = self._density()
        w0 = self.headwind_mps
        use_probe = self._probe_covers(ta, tb)
        sum_aero = 0.0
        sum_wind = 0.0
        sum_bear = 0.0
        dd_tot = 0.0
        v_min = math.inf
        dt_max = 0.0
        wind_acc = 0.0
        off = tr.t_offset_s
        for j in range(a, b):
            dt, dd, v = tr.segment(j)
            dd_tot += dd
            if v < v_min:
                v_min = v
            if dt > dt_max:
                dt_max = dt
            if use_probe:
                t0 = tr.ts[j - tr.base] + off
                vair2 = self._air_sq_mean(t0, t0 + dt)
                wind_acc += (math.sqrt(max(vair2, 0.0)) - v) * dt
            else:
                u = v + w0
                vair2 = u * abs(u)
                sum_wind += (v + w0) * v * dt
            sum_aero += vair2 * v * dt
            if self.bearing:
                sum_bear += (91.0 + 8.7 * v) * 1e-3 * v * dt
        if v_min < cfg.min_speed_mps or min(va[0], vb[0]) < cfg.min_speed_mps:
            self.count("window_below_min_speed")
            return
        if dt_max > cfg.max_gap_s:
            self.count("window_wheel_gap")
            return
        if use_probe and dur > 0.0:
            w = wind_acc / dur
            self._wind_ewma = w if self._wind_ewma is None else 0.8 * self._wind_ewma + 0.2 * w
        # Power over the window for each candidate lag.
        pw = self.power
        lo_t, hi_t = ta + self.lag_lo_s, tb + self.lag_hi_s
        if not pw.ts or lo_t < pw.ts[0]:
            self.count("window_power_missing")
            return
        p_var, p_gap = pw.stats(ta + self.prior_lag_s, tb + self.prior_lag_s,
                                cfg.power_noise_pct / 100.0, cfg.power_noise_w)
        _, p_gap_wide = pw.stats(lo_t, hi_t, 0.0, 0.0)
        if max(p_gap, p_gap_wide - (self.lag_hi_s - self.lag_lo_s)) > cfg.max_gap_s:
            self.count("window_power_gap")
            return
        works = []
        for lag in self.lags_s:
            w_a = pw.work_at(ta + lag)
            w_b = pw.work_at(tb + lag)
            if w_a is None or w_b is None:
                self.count("window_power_missing")
                return
            works.append(self.efficiency * (w_b - w_a))
        # Potential energy: measured altitude, else given grade, else the course table.
        d_a, d_b = tr.d(a), tr.d(b)
        dh = self._delta_h(ta, tb, d_a, d_b, a, b)
        m, g = self.mass_kg, GRAVITY_MPS2
        cos_t = 1.0 / math.sqrt(1.0 + (dh / dd_tot) ** 2) if dd_tot > 0.0 else 1.0
        ke = 0.5 * self.m_eff_kg * (vb[0] * vb[0] - va[0] * va[0])
        pe = m * g * dh
        known = ke + pe + sum_bear
        ys = tuple(w - known for w in works)
        x: tuple[float, ...]
        x1 = 0.5 * rho * sum_aero
        x2 = m * g * cos_t * dd_tot
        if self.estimate_headwind:
            x = (x1, x2, 0.0 if use_probe else rho * sum_wind)
        else:
            x = (x1, x2)
        # Modelled error variance, J^2, and covariance with the previous window.
        v_mean = dd_tot / dur if dur > 0.0 else 0.0
        prev = self._prev_close if (self._prev_close is not None and self._prev_close[0] == node0) else None
        ke_a = (self.m_eff_kg * va[0]) ** 2 * va[1]
        ke_b = (self.m_eff_kg * vb[0]) ** 2 * vb[1]
        var = ke_a + ke_b + self.efficiency**2 * p_var
        cov = -ke_a if prev is not None else 0.0
        # Survey error of the course (see survey_error_covariance).
        sig2_pe = (m * g * cfg.elevation_sd_m) ** 2
        lsp = cfg.elevation_error_spacing_m
        c0 = survey_error_covariance(0.0, lsp)
        var += 2.0 * sig2_pe * (c0 - survey_error_covariance(dd_tot, lsp))
        if prev is not None:
            dd_prev = prev[2]
            cov += sig2_pe * (survey_error_covariance(dd_tot, lsp)
                              - survey_error_covariance(dd_tot + dd_prev, lsp)
                              - c0 + survey_error_covariance(dd_prev, lsp))
        sens = rho * self.cda_ref_m2 * v_mean**2  # aero force per m/s of air speed, x v
        if use_probe:
            n_air = max(1.0, dur * 10.0)
            var += (sens * v_mean * 0.01 * dur) ** 2 / n_air
        else:
            var += sens**2 * integrated_ou_variance(cfg.gust_rms_mps, cfg.gust_time_s, dur)
            if prev is not None:
                tau = cfg.gust_time_s
                cov += (sens * cfg.gust_rms_mps * tau) ** 2 * (
                    (1.0 - math.exp(-dur / tau)) * (1.0 - math.exp(-prev[1] / tau)))
        # Model error floor: 0.2 % of the work, and 1 J.
        var += (0.002 * abs(works[0])) ** 2 + 1.0
        self._prev_close = (node1, dur, dd_tot)
        i0 = min(range(len(self.lags_s)), key=lambda k: abs(self.lags_s[k] - self.prior_lag_s))
        self.out.append(EnergyWindow(ta, tb, x, ys, var, works[i0], v_mean, d_a, d_b,
                                     cov, node0, node1))

    def _probe_covers(self, ta: float, tb: float) -> bool:
        ts = self.air_ts
        if len(ts) < 2 or ts[-1] < tb - AIR_MAX_SPACING_S or ts[0] > ta + AIR_MAX_SPACING_S:
            return False
        lo = bisect.bisect_left(ts, ta - AIR_MAX_SPACING_S)
        hi = bisect.bisect_right(ts, tb + AIR_MAX_SPACING_S)
        if hi - lo < 2 or ts[lo] > ta + AIR_MAX_SPACING_S or ts[hi - 1] < tb - AIR_MAX_SPACING_S:
            return False
        for k in range(lo + 1, hi):
            if ts[k] - ts[k - 1] > AIR_MAX_SPACING_S:
                return False
        return True

    def _air_sq_mean(self, t0: float, t1: float) -> float:
        """Mean of v_air |v_air| over [t0, t1] (s) from the probe readings."""
        ts, vs = self.air_ts, self.air_vs
        lo = bisect.bisect_left(ts, t0)
        hi = bisect.bisect_right(ts, t1)
        if hi > lo:
            acc = 0.0
            for k in range(lo, hi):
                acc += vs[k] * abs(vs[k])
            return acc / (hi - lo)
        u = _interp(ts, vs, 0.5 * (t0 + t1))
        return u * abs(u)

    def _delta_h(self, ta: float, tb: float, d_a: float, d_b: float, a: int, b: int) -> float:
        if len(self.alt_ts) >= 2 and self.alt_ts[0] <= ta and self.alt_ts[-1] >= tb:
            return _interp(self.alt_ts, self.alt_hs, tb) - _interp(self.alt_ts, self.alt_hs, ta)
        if len(self.grade_ts) >= 1 and self.grade_ts[0] <= ta and self.t_s - self.grade_ts[-1] < 5.0:
            tr = self.track
            if tr is None:
                return 0.0
            dh = 0.0
            off = tr.t_offset_s
            for j in range(a, b):
                dt, dd, _ = tr.segment(j)
                tm = tr.ts[j - tr.base] + off + 0.5 * dt
                dh += _interp(self.grade_ts, self.grade_gs, tm) * dd
            return dh
        return self.course.elevation_m(d_b) - self.course.elevation_m(d_a)

    # ------------------------------------------------------------ kinematics
    def position(self, t_s: float) -> tuple[float | None, float | None]:
        """``(distance_m, speed_mps)`` at ``t_s``: the two fields of :meth:`kinematics`
        shown after every event, with the same values, without the rest."""
        tr = self.track
        if tr is None or not tr.ts:
            if (self.gps_t_s is not None and t_s - self.gps_t_s <= GPS_FRESH_S
                    and self.gps_speed_mps is not None):
                return None, self.gps_speed_mps
            return None, None
        odo = self.odometer
        if tr is self.wheel and odo is not None:
            return odo.distance_m(t_s), odo.speed_mps
        return tr.ds[-1], self._disp_v

    def kinematics(self, t_s: float) -> dict[str, Any]:
        """Distance, speed, acceleration and air data at ``t_s`` for the display."""
        tr = self.track
        distance_m, speed_mps = self.position(t_s)
        out: dict[str, Any] = {
            "distance_m": distance_m, "speed_mps": speed_mps, "accel_mps2": None,
            "speed_source": None, "speed_stale": True, "airspeed_mps": None, "wind_mps": None,
        }
        if self.air_last_t_s is not None and t_s - self.air_last_t_s <= self.cfg.stale_s:
            out["airspeed_mps"] = self.air_last_mps
            out["wind_mps"] = self._wind_ewma
        if tr is None or not tr.ts:
            if speed_mps is not None:  # a fresh GPS speed
                out.update(speed_source="gps", speed_stale=False)
            return out
        odo = self.odometer
        if tr is self.wheel and odo is not None:
            out.update(accel_mps2=odo.accel_mps2, speed_source=odo.source, speed_stale=odo.stale(t_s))
            return out
        last_rx = tr.last_new_point_rx_s if tr.last_new_point_rx_s is not None else t_s  # type: ignore[attr-defined]
        out.update(speed_source="speed", speed_stale=t_s - last_rx > self.cfg.stale_s)
        return out


def _interp(ts: list[float], vs: list[float], t: float) -> float:
    """Linear interpolation in a sorted series (held constant beyond the ends)."""
    if t <= ts[0]:
        return vs[0]
    if t >= ts[-1]:
        return vs[-1]
    k = bisect.bisect_right(ts, t)
    f = (t - ts[k - 1]) / (ts[k] - ts[k - 1])
    return vs[k - 1] + f * (vs[k] - vs[k - 1])
