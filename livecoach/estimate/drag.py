"""The live drag estimator: samples in, CdA and Crr with honest errors out.

Chain: samples -> kinematics and energy windows
(:mod:`livecoach.estimate.windows`) -> regression with stabilised forgetting
and power-lag averaging (:mod:`livecoach.estimate.regression`) -> CUSUM
change alarm (:mod:`livecoach.estimate.cusum`).

After a "drag changed" alarm the estimator restarts its data from the
estimated start of the change, with the pre-change estimate (shifted by the
estimated step) as the new prior: covariance resetting on a detected change
(Goodwin & Sin 1984, "Adaptive Filtering, Prediction and Control",
sec. 3.4; Astrom & Wittenmark 1995, "Adaptive Control", sec. 11.2).

Pure and deterministic: no clock, no randomness, no I/O. One bad sample is
counted and set aside, never raised.
"""

from __future__ import annotations

import math
from collections import deque
from typing import Any

from livecoach.errors import LivecoachError
from livecoach.estimate.cusum import Cusum
from livecoach.estimate.records import DragAlarm, DragEstimate, EnergyWindow
from livecoach.estimate.regression import DragFit, FitResult
from livecoach.estimate.settings import EstimatorConfig, estimator_config
from livecoach.estimate.windows import WindowBuilder

#: Windows before the change alarm is armed (and after a restart).
ARM_AFTER_WINDOWS = 10
#: The change alarm is armed when the parameter part of the predicted residual
#: variance is below this share of the noise part.
ARM_PARAM_SHARE = 0.5
#: Consecutive same-sign outliers after which they are taken as a real change.
OUTLIER_RUN_ACCEPT = 3
#: Windows kept for a restart after an alarm.
HISTORY_WINDOWS = 400
#: Windows kept for :meth:`LiveDragEstimator.batch` (an hour of 5 s windows).
ALL_WINDOWS = 720


def lag_grid(cfg: EstimatorConfig) -> tuple[tuple[float, ...], list[float]]:
    """Candidate power lags (s) and their log prior weights (normal prior)."""
    mu, sd = cfg.power_lag_s, cfg.power_lag_sd_s
    if sd <= 0.0:
        return (mu,), [0.0]
    half = max(3.0 * sd, 0.3)
    step = max(0.05, min(0.125, sd / 2.0))
    n = int(math.floor(half / step + 1e-9))
    lags = tuple(round(mu + i * step, 6) for i in range(-n, n + 1))
    return lags, [-0.5 * ((lag - mu) / sd) ** 2 for lag in lags]


def prior_of(ride: Any, cfg: EstimatorConfig) -> tuple[list[float], list[list[float]]]:
    """Prior mean and covariance of the parameters from the ride file."""
    v = ride.vehicle
    theta0 = [v.cda_m2, v.crr]
    var = [v.cda_sd_m2**2, v.crr_sd**2]
    if cfg.estimate_headwind:
        theta0.append(0.0)
        var.append((v.cda_m2 * cfg.headwind_sd_mps) ** 2)
    cov = [[var[i] if i == j else 0.0 for j in range(len(var))] for i in range(len(var))]
    return theta0, cov


class LiveDragEstimator:
    """Live CdA/Crr estimation (see the module docstring).

    ``feed(sample)`` takes any sample type in time order; ``snapshot()`` gives
    the current :class:`DragEstimate`; ``pop_alarms()`` the new
    :class:`DragAlarm` records; ``batch()`` an offline fit of every window so
    far, without forgetting.
    """

    def __init__(self, ride: Any) -> None:
        self.ride = ride
        self.cfg = cfg = estimator_config(ride)
        self.lags_s, self.lag_log_prior = lag_grid(cfg)
        self.theta0, self.prior_cov = prior_of(ride, cfg)
        self.builder = WindowBuilder(ride, cfg, self.lags_s, cfg.power_lag_s)
        self.fit = self._new_fit(self.theta0, self.prior_cov, self.lag_log_prior)
        self.cusum = Cusum(cfg.cusum_drift, cfg.cusum_threshold)
        self.history: deque[EnergyWindow] = deque(maxlen=HISTORY_WINDOWS)
        # The windows of the last hour or so, for batch(); bounded so that memory
        # stays flat over a long session.
        self.all_windows: deque[EnergyWindow] = deque(maxlen=ALL_WINDOWS)
        self.keep_all_windows = True
        self._alarms: list[DragAlarm] = []
        self._windows_used = 0
        self._since_restart = 0
        self._outlier_run = 0
        self._outlier_sign = 0
        self._pre: dict[int, FitResult | None] = {1: None, -1: None}
        self._res: FitResult | None = None
        self._sigma2_ref: float | None = None
        self._t_s = 0.0
        # live_values(): the estimate part, and the fit result it was made from.
        self._drag: tuple[float, float, float, float] | None = None
        self._drag_of: FitResult | None = None

    def _new_fit(self, theta0: list[float], cov: list[list[float]], lag_lp: list[float]) -> DragFit:
        return DragFit(theta0, cov, self.lags_s, lag_lp, self.cfg.memory_s,
                       power_scale_sd=self.cfg.power_scale_sd_pct / 100.0)

    # ---------------------------------------------------------------- input
    def feed(self, sample: Any) -> None:
        """Take one sample of any type from :mod:`livecoach.stream.samples`."""
        t = getattr(sample, "t_s", None)
        if isinstance(t, (int, float)) and math.isfinite(t):
            self._t_s = max(self._t_s, float(t))
        try:
            self.builder.feed(sample)
            out = self.builder.out
            while out:
                self._take(out.pop(0))
        except (ArithmeticError, ValueError, TypeError, AttributeError, IndexError,
                LivecoachError) as exc:
            # One bad sample must not stop the live loop: count it with the reason.
            self.builder.out.clear()
            self.builder.count(f"estimator_error:{type(exc).__name__}")

    def _take(self, w: EnergyWindow) -> None:
        fit = self.fit
        b = self.builder
        z = 0.0
        armed = False
        if self._res is not None and self._since_restart >= 3:
            e, var = fit.innovation(w)
            # A change inflates the measured noise scale and would hide itself: the
            # CUSUM normalises with the scale seen while nothing was changing.
            ref = self._sigma2_ref if self._sigma2_ref is not None else fit.sigma2
            ref = min(ref, fit.sigma2)
            var = ref / fit.sigma2 * var if fit.sigma2 > 0.0 else var
            z = e / math.sqrt(var) if var > 0.0 else 0.0
            # Armed once the estimate predicts a window better than the noise does.
            armed = (self._since_restart >= ARM_AFTER_WINDOWS
                     and fit.last_param_var < ARM_PARAM_SHARE * fit.last_noise_var)
            if abs(z) > self.cfg.outlier_sigma:
                # Energy lost beyond drag with the cranks (nearly) still: braking,
                # always set aside. Other outliers: set aside unless they persist
                # (then the drag really changed and the alarm must see it).
                low_power = w.work_j < 20.0 * (w.t1_s - w.t0_s)
                if z > 0 and low_power:
                    b.count("window_braking")
                    self._outlier_run = 0
                    return
                sign = 1 if z > 0 else -1
                if sign == self._outlier_sign:
                    self._outlier_run += 1
                else:
                    self._outlier_sign, self._outlier_run = sign, 1
                if self._outlier_run < OUTLIER_RUN_ACCEPT:
                    b.count("window_outlier")
                    return
            else:
                self._outlier_run = 0
        alarm = None
        if armed:
            c = self.cusum
            was_pos, was_neg = c.g_pos == 0.0, c.g_neg == 0.0
            alarm = c.update(z, w.t0_s)
            if alarm is None:
                if was_pos and c.g_pos > 0.0:
                    self._pre[1] = self._res
                if was_neg and c.g_neg > 0.0:
                    self._pre[-1] = self._res
        c = self.cusum
        if c.g_pos == 0.0 and c.g_neg == 0.0 and self._res is not None:
            s2 = self._res.sigma2
            self._sigma2_ref = s2 if self._sigma2_ref is None else 0.9 * self._sigma2_ref + 0.1 * s2
        fit.add(w)
        self.history.append(w)
        if self.keep_all_windows:
            self.all_windows.append(w)
        self._windows_used += 1
        self._since_restart += 1
        if alarm is not None:
            self._restart(alarm.sign, alarm.start_t_s, w.t1_s)
        self._res = self.fit.solve()

    def _restart(self, sign: int, start_t_s: float, t_alarm_s: float) -> None:
        """Raise the alarm and restart the data from the change (see module docstring)."""
        pre = self._pre.get(sign) or self._res
        if pre is None:
            return
        k = pre.best_k
        th = list(pre.thetas[k])
        p = len(th)
        since = [w for w in self.history if w.t0_s >= start_t_s - 1e-9]
        sigma2 = max(pre.sigma2, 1e-6)
        # Residuals against the pre-change fit; the change point is the split that
        # best explains them with one step of CdA (maximum likelihood, Hinkley 1971,
        # Biometrika 58:509), searched from the CUSUM's start on.
        rs = []
        for w in since:
            e = w.ys_j[k] - sum(w.x[i] * th[i] for i in range(p))
            rs.append((w, e, 1.0 / (sigma2 * w.var_j2)))
        best_j, best_cost = 0, math.inf
        for j in range(max(len(rs) - 1, 1)):
            sxx = sum(w.x[0] ** 2 * wt for w, _, wt in rs[j:])
            sxe = sum(w.x[0] * e * wt for w, e, wt in rs[j:])
            if sxx <= 0.0:
                continue
            cost = sum(e * e * wt for _, e, wt in rs[:j]) + sum(
                (e - sxe / sxx * w.x[0]) ** 2 * wt for w, e, wt in rs[j:])
            if cost < best_cost:
                best_j, best_cost = j, cost
        since = since[best_j:]
        rs = rs[best_j:]
        if since:
            start_t_s = since[0].t0_s
        sxx = sxe = 0.0
        v_sum = 0.0
        for w, e, wt in rs:
            sxx += w.x[0] * w.x[0] * wt
            sxe += w.x[0] * e * wt
            v_sum += w.v_mean_mps
        if sxx <= 0.0 or not since:
            return
        step = sxe / sxx
        step_sd = math.sqrt(1.0 / sxx)
        v_mean = v_sum / len(since)
        rho = self.builder.rho_kgpm3
        force = 0.5 * rho * step * v_mean * v_mean
        cda_pre = th[0]
        rel = step / cda_pre if cda_pre > 0.0 else 0.0
        text = (
            f"drag changed: CdA {step:+.4f} m^2 ({rel:+.0%}), "
            f"{force:+.2f} N at {v_mean:.1f} m/s, since t = {start_t_s:.1f} s"
        )
        self._alarms.append(DragAlarm(t_alarm_s, step, start_t_s, text, step_sd, force))
        # New prior: the pre-change estimate shifted by the step, widened by its uncertainty.
        mean = list(th)
        mean[0] = max(cda_pre + step, 1e-4)
        # Prior (per unit noise scale, see regression): CdA as wide as the ride
        # file's prior around the shifted estimate; Crr from before, widened.
        cov = [[0.0] * p for _ in range(p)]
        for i in range(p):
            cov[i][i] = pre.cov[i][i] / sigma2
        cov[0][0] = max(self.prior_cov[0][0], step_sd**2 / sigma2, (0.5 * step) ** 2 / sigma2)
        cov[1][1] *= 2.0
        fit = self._new_fit(mean, cov, self._fit_lag_prior(pre))
        fit.sigma2 = pre.sigma2
        for w in since:
            fit.add(w)
        self.fit = fit
        self.cusum.reset()
        self._pre = {1: None, -1: None}
        self._since_restart = 0

    def _fit_lag_prior(self, pre: FitResult) -> list[float]:
        return [math.log(max(w, 1e-9)) for w in pre.lag_weights]

    # ---------------------------------------------------------------- output
    def latest_track_point(self) -> tuple[float, float] | None:
        """The newest point of the distance track in use: (time on the receive
        clock, s; distance, m). For the wheel sensor that is the last wheel
        event at its own event time (mapped to the receive clock), so timing
        lines between two such points is exact to the wheel's resolution."""
        tr = self.builder.track
        if tr is None or not tr.ts:
            return None
        return tr.ts[-1] + tr.t_offset_s, tr.ds[-1]

    def snapshot(self) -> DragEstimate:
        """The current estimate and kinematics (a frozen record)."""
        t = self._t_s
        kin = self.builder.kinematics(t)
        res = self._res
        cfg = self.cfg
        w0 = self.builder.headwind_mps
        if res is None:
            cda, crr = self.theta0[0], self.theta0[1]
            cda_sd, crr_sd = math.sqrt(self.prior_cov[0][0]), math.sqrt(self.prior_cov[1][1])
            wind, wind_sd = w0, (cfg.headwind_sd_mps if cfg.estimate_headwind else None)
            lag, lag_sd, scale = cfg.power_lag_s, cfg.power_lag_sd_s, 1.0
        else:
            cda, crr = res.theta[0], res.theta[1]
            cda_sd = math.sqrt(max(res.cov[0][0], 0.0))
            crr_sd = math.sqrt(max(res.cov[1][1], 0.0))
            wind, wind_sd = w0, None
            if len(res.theta) > 2 and cda > 0.0:
                wind = w0 + res.theta[2] / cda
                wind_sd = math.sqrt(max(res.cov[2][2], 0.0)) / cda
            lag, lag_sd, scale = res.lag_s, res.lag_sd_s, res.sigma2
        return DragEstimate(
            t_s=t,
            distance_m=kin["distance_m"],
            speed_mps=kin["speed_mps"],
            accel_mps2=kin["accel_mps2"],
            airspeed_mps=kin["airspeed_mps"],
            cda_m2=cda,
            cda_sd_m2=cda_sd,
            crr=crr,
            crr_sd=crr_sd,
            samples_used=self.builder.samples_used,
            rejected=dict(self.builder.rejected),
            windows_used=self._windows_used,
            headwind_mps=wind,
            headwind_sd_mps=wind_sd,
            power_lag_s=lag,
            power_lag_sd_s=lag_sd,
            noise_scale=scale,
            wind_mps=kin["wind_mps"],
            speed_source=kin["speed_source"],
            speed_stale=kin["speed_stale"],
            air_density_kgpm3=self.builder.rho_kgpm3,
        )

    def live_values(self) -> tuple[float | None, float | None, float, float, float, float]:
        """``(distance_m, speed_mps, cda_m2, cda_sd_m2, crr, crr_sd)`` now: the
        fields of :meth:`snapshot` the pipeline shows after every event, with
        the same values, without building the whole record. The estimate part
        changes only when a window is taken, so it is kept until then."""
        distance_m, speed_mps = self.builder.position(self._t_s)
        res = self._res
        if res is not self._drag_of or self._drag is None:
            if res is None:
                drag = (self.theta0[0], math.sqrt(self.prior_cov[0][0]),
                        self.theta0[1], math.sqrt(self.prior_cov[1][1]))
            else:
                drag = (res.theta[0], math.sqrt(max(res.cov[0][0], 0.0)),
                        res.theta[1], math.sqrt(max(res.cov[1][1], 0.0)))
            self._drag, self._drag_of = drag, res
        return (distance_m, speed_mps, *self._drag)

    def pop_alarms(self) -> list[DragAlarm]:
        """Alarms raised since the last call (oldest first)."""
        out, self._alarms = self._alarms, []
        return out

    def batch(self):
        """Offline fit of every window used so far, without forgetting (see :func:`batch_fit`)."""
        from livecoach.estimate.batch import fit_windows

        return fit_windows(list(self.all_windows), self.ride, dict(self.builder.rejected))
