"""The drag regression: energy windows -> CdA, Crr (and head wind) with honest errors.

Shared by the live estimator and the offline batch fit, so both fit the
same model to the same windows; the live one forgets old data (stabilised
forgetting, see :mod:`livecoach.estimate.rls`), the batch one does not.

Noise scale. Each window carries a modelled error variance r; the actual
noise level is measured: the residual variance relative to r, sigma^2. The
window errors are correlated in time (gusts last seconds, survey errors
span 100 m, neighbouring windows share an end speed), so the scale is
measured on blocks of consecutive windows (the batch-means method for
correlated series; e.g. Law & Kelton, "Simulation Modeling and Analysis",
ch. 9, batch means), shrunk toward the window-level value while few blocks
exist. The reported covariance is the posterior covariance at that scale
(the estimator covariance scaled by the residual variance).

Power lag. The window work is computed for a grid of candidate lags
between the power and wheel time bases; each has its own least-squares
solution, and the lags are weighted by their posterior probability (the
Gaussian likelihood of their residuals times a normal prior on the lag:
Bayesian model averaging, Hoeting et al. 1999, Stat. Sci. 14:382). The
reported covariance includes the spread between lags.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from operator import mul

from livecoach.estimate.linalg import inverse_spd
from livecoach.estimate.records import EnergyWindow
from livecoach.estimate.rls import StabilisedRLS

#: Pseudo-count (in blocks) of the window-level scale in the block-scale estimate.
SCALE_PRIOR_BLOCKS = 4.0
#: Pseudo-count (in windows) of the modelled noise (sigma^2 = 1) in the window-level scale.
SCALE_PRIOR_WINDOWS = 6.0
#: Bartlett-kernel bandwidth (windows) of the long-run variance factor (Newey & West 1987).
LRV_LAGS = 4
#: Rows kept for the long-run variance factor.
MAX_ROWS = 600


@dataclass(frozen=True, slots=True)
class FitResult:
    """A solved regression: model-averaged ``theta`` and ``cov``; per-lag solutions."""

    theta: tuple[float, ...]
    cov: tuple[tuple[float, ...], ...]
    lag_s: float
    lag_sd_s: float
    sigma2: float
    n_windows: float
    best_k: int
    thetas: tuple[tuple[float, ...], ...]
    lag_weights: tuple[float, ...]


class DragFit:
    """Accumulates energy windows and solves for the parameters.

    ``theta0``/``prior_cov``: prior mean and covariance of the parameters
    (CdA m^2, Crr, and CdA x head wind m^3/s when estimated); ``lags_s``:
    candidate power lags with ``lag_log_prior``; ``memory_s``: forgetting time
    constant (None: no forgetting); ``block_s``: block length for the scale;
    ``power_scale_sd``: relative sd of the power meter's calibration.
    """

    def __init__(self, theta0: list[float], prior_cov: list[list[float]], lags_s: tuple[float, ...],
                 lag_log_prior: list[float], memory_s: float | None, block_s: float = 30.0,
                 power_scale_sd: float = 0.0) -> None:
        self.lags_s = lags_s
        self.lag_log_prior = list(lag_log_prior)
        self.memory_s = memory_s
        self.block_s = block_s
        self.power_scale_sd = power_scale_sd
        self.rls = StabilisedRLS(theta0, inverse_spd(prior_cov), len(lags_s))
        self.blocks: list[list] = []  # [t_end, X, Y_k, R, n]
        self._open: list | None = None
        self._t_last: float | None = None
        self._prev: tuple | None = None  # (node1, d, x, ys, aux) of the last window, whitened
        self.rows: list[tuple] = []       # (t1, x, ys, d) whitened, for the long-run variance
        self.lrv_factor = 1.0
        self.last_param_var = 0.0
        self.last_noise_var = 1.0
        self.sigma2 = 1.0
        self.result: FitResult | None = None
        self.n_added = 0

    @property
    def p(self) -> int:
        return self.rls.p

    def whiten(self, w: EnergyWindow) -> tuple[list[float], list[float], float, float]:
        """Decorrelate ``w`` from the previous window: (x, ys, variance, aux).

        Neighbouring windows share an end point, whose kinetic- and
        potential-energy errors enter one with + and the next with -, and
        gusts outlast a window: the window errors form a tridiagonal
        covariance. Its LDL^T factorisation, computed row by row
        (l_w = Sigma_{w,w-1} / d_{w-1}, d_w = Sigma_ww - l_w^2 d_{w-1}), turns
        the rows into independent ones, z_w = y_w - l_w z_{w-1}: exact
        generalised least squares (Aitken 1935, Proc. R. Soc. Edinb. 55:42)
        done recursively.
        """
        total = w.var_j2
        prev = self._prev
        if prev is None or prev[0] != w.node0 or w.node0 < 0:
            return list(w.x), list(w.ys_j), total, w.work_j
        lw = w.cov_prev_j2 / prev[1]
        d = total - lw * lw * prev[1]
        d = max(d, 0.05 * total)
        xt = [w.x[i] - lw * prev[2][i] for i in range(self.p)]
        yt = [w.ys_j[k] - lw * prev[3][k] for k in range(len(w.ys_j))]
        return xt, yt, d, w.work_j - lw * prev[4]

    def add(self, w: EnergyWindow) -> None:
        """Add one window (in time order)."""
        if self._t_last is not None and self.memory_s is not None:
            dt = max(0.0, w.t1_s - self._t_last)
            self.rls.decay(math.exp(-dt / self.memory_s))
        self._t_last = w.t1_s
        xt, yt, d, aux = self.whiten(w)
        self._prev = (w.node1, d, xt, yt, aux)
        self.rls.add(xt, yt, d, aux=aux)
        self.rows.append((w.t1_s, xt, yt, d))
        if len(self.rows) > MAX_ROWS:
            del self.rows[0]
        self.n_added += 1
        ob = self._open
        if ob is None:
            ob = self._open = [w.t0_s, w.t1_s, [0.0] * self.p, [0.0] * len(self.lags_s), 0.0, 0]
        ob[1] = w.t1_s
        for i in range(self.p):
            ob[2][i] += xt[i]
        for k in range(len(self.lags_s)):
            ob[3][k] += yt[k]
        ob[4] += d
        ob[5] += 1
        if ob[1] - ob[0] >= self.block_s:
            self.blocks.append(ob)
            self._open = None
            if len(self.blocks) > 120:
                del self.blocks[0]

    def _block_scale(self, k: int, theta: list[float], t_now: float) -> tuple[float, float]:
        """(sum of weighted normalised block residuals^2, sum of weights)."""
        acc = 0.0
        wsum = 0.0
        blocks = self.blocks if self._open is None or self._open[5] < 2 else self.blocks + [self._open]
        memory_s = self.memory_s
        exp = math.exp
        for b in blocks:
            wt = 1.0 if memory_s is None else exp(-max(0.0, t_now - b[1]) / memory_s)
            if wt < 1e-3:
                continue
            r = b[3][k] - sum(map(mul, b[2], theta))  # sum_i X_i theta_i, in index order
            acc += wt * r * r / b[4]
            wsum += wt
        return acc, wsum

    def _long_run_factor(self, k: int, theta: list[float], t_now: float) -> float:
        """Long-run variance of the normalised residuals over their variance.

        Gusts last longer than a window, so residuals stay correlated after the
        whitening; the Bartlett-weighted sum of their autocorrelations,
        1 + 2 sum_l (1 - l/(L+1)) rho_l (Newey & West 1987, Econometrica 55:703),
        scales the covariance up. Never below 1 (conservative), at most 6.
        """
        rows = self.rows
        n = len(rows)
        if n < 2 * LRV_LAGS + 4:
            return self.lrv_factor
        # The sums run in index order, as written in the formula; the products are
        # grouped left to right, w_i z_i first (a replay reproduces them to the bit).
        memory_s = self.memory_s
        exp, sqrt = math.exp, math.sqrt
        zs = [(yt[k] - sum(map(mul, xt, theta))) / sqrt(d) for _, xt, yt, d in rows]
        if memory_s is None:
            wz = zs  # every weight 1
        else:
            wz = [exp(-max(0.0, t_now - row[0]) / memory_s) * z for row, z in zip(rows, zs)]
        c0 = sum(map(mul, wz, zs))
        if c0 <= 0.0:
            return 1.0
        acc = 0.0
        for lag in range(1, LRV_LAGS + 1):
            cl = sum(map(mul, wz[lag:], zs))  # w_i z_i z_(i-lag), i = lag .. n-1
            acc += (1.0 - lag / (LRV_LAGS + 1.0)) * cl
        f = 1.0 + 2.0 * acc / c0
        self.lrv_factor = min(max(f, 1.0), 6.0)
        return self.lrv_factor

    def solve(self) -> FitResult:
        """Solve at the measured noise scale; model-average over the power lags."""
        rls = self.rls
        p = self.p
        t_now = self._t_last if self._t_last is not None else 0.0
        sigma2 = self.sigma2
        # Conjugate prior (theta | sigma^2 ~ N(theta0, sigma^2 V0)): the estimate does
        # not depend on the noise scale, which only scales the covariance; so a
        # misfit that raises the scale cannot make the estimate stubborn.
        thetas, cov = rls.solve(1.0)
        rss = [rls.rss(k, thetas[k]) + rls.prior_penalty(thetas[k]) for k in range(len(thetas))]
        n = rls.n
        dof_w = max(n - p, 0.0)
        first = True
        lrv = 1.0
        for _ in range(2):
            js = [rss[k] / sigma2 - 2.0 * self.lag_log_prior[k] for k in range(len(thetas))]
            best = min(range(len(js)), key=js.__getitem__)
            s_w = (SCALE_PRIOR_WINDOWS + rls.rss(best, thetas[best])) / (SCALE_PRIOR_WINDOWS + dof_w)
            acc, nb = self._block_scale(best, thetas[best], t_now)
            dof_b = max(nb - p * (nb / max(n, 1.0)), 0.0)
            sigma2 = (SCALE_PRIOR_BLOCKS * s_w + acc) / (SCALE_PRIOR_BLOCKS + dof_b)
            if first:
                first = False
                lrv = self._long_run_factor(best, thetas[best], t_now)
            sigma2 = min(max(sigma2 * lrv, 0.05), 1.0e4)
        js = [rss[k] / sigma2 - 2.0 * self.lag_log_prior[k] for k in range(len(thetas))]
        best = min(range(len(js)), key=js.__getitem__)
        sens_unit = [sum(cov[i][j] * rls.extra[j] for j in range(p)) for i in range(p)]
        cov = [[sigma2 * cov[i][j] for j in range(p)] for i in range(p)]
        self.sigma2 = sigma2
        # Lag posterior and model averaging.
        jmin = js[best]
        ws = [math.exp(-0.5 * (j - jmin)) for j in js]
        tot = sum(ws)
        ws = [w / tot for w in ws]
        mean = [sum(ws[k] * thetas[k][i] for k in range(len(ws))) for i in range(p)]
        c = [[cov[i][j] for j in range(p)] for i in range(p)]
        for k, wk in enumerate(ws):
            if wk < 1e-6:
                continue
            dv = [thetas[k][i] - mean[i] for i in range(p)]
            for i in range(p):
                for j in range(p):
                    c[i][j] += wk * dv[i] * dv[j]
        if self.power_scale_sd > 0.0:
            sens = sens_unit
            s2 = self.power_scale_sd**2
            for i in range(p):
                for j in range(p):
                    c[i][j] += s2 * sens[i] * sens[j]
        lag = sum(w * l for w, l in zip(ws, self.lags_s))
        lag_sd = math.sqrt(max(sum(w * (l - lag) ** 2 for w, l in zip(ws, self.lags_s)), 0.0))
        res = FitResult(tuple(mean), tuple(tuple(r) for r in c), lag, lag_sd, sigma2, rls.n, best,
                        tuple(tuple(t) for t in thetas), tuple(ws))
        self.result = res
        return res

    def innovation(self, w: EnergyWindow) -> tuple[float, float]:
        """(residual J, its predicted variance J^2) of ``w`` against the last solution."""
        res = self.result
        if res is None:
            res = self.solve()
        k = res.best_k
        th = res.thetas[k]
        xt, yt, d, _ = self.whiten(w)
        e = yt[k] - sum(xt[i] * th[i] for i in range(self.p))
        self.last_param_var = sum(
            xt[i] * sum(res.cov[i][j] * xt[j] for j in range(self.p)) for i in range(self.p))
        self.last_noise_var = self.sigma2 * d
        return e, self.last_noise_var + self.last_param_var

    def lag_log_posterior(self) -> list[float]:
        res = self.result if self.result is not None else self.solve()
        return [math.log(max(w, 1e-12)) for w in res.lag_weights]
