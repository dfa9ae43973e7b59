"""Recursive least squares: the covariance form, and an information form with
exponential forgetting of the data toward a fixed prior.

Covariance form (e.g. Ljung & Soederstroem 1983, "Theory and Practice of
Recursive Identification", MIT Press, eq. 2.19 with forgetting): with
forgetting factor lambda and measurement variance r,

    K = P x / (lambda r + x^T P x),  theta += K (y - x^T theta),
    P = (P - K x^T P) / lambda.

Plain exponential forgetting divides the covariance by lambda at every
step, so in a direction the data do not excite (steady riding: the CdA and
Crr regressors nearly proportional) P grows without bound: covariance
wind-up. The information form used live avoids it by forgetting toward the
prior (stabilised forgetting, Kulhavy & Zarrop 1993, "On a general concept
of forgetting", Int. J. Control 58(4):905-924): the information matrix is

    Lambda_t = Lambda_0 + sum_s lambda^(t-s) x_s x_s^T / r_s,

so the prior's information Lambda_0 is never forgotten. The covariance is
therefore bounded above by the prior covariance (the ceiling) and below by
the inverse of Lambda_0 plus the largest information the data can
accumulate in one memory time (the floor). With lambda = 1 it is the
ordinary Bayesian (ridge) least-squares solution.

Several right-hand sides (one per candidate power lag) share the regressors.
"""

from __future__ import annotations

from livecoach.estimate.linalg import inverse_spd, zeros


def rls_update(theta: list[float], p: list[list[float]], x: list[float], y: float,
               r: float = 1.0, lam: float = 1.0) -> tuple[list[float], list[list[float]]]:
    """One covariance-form RLS step (see module docstring); returns new (theta, P)."""
    n = len(theta)
    px = [sum(p[i][j] * x[j] for j in range(n)) for i in range(n)]
    denom = lam * r + sum(x[i] * px[i] for i in range(n))
    k = [v / denom for v in px]
    e = y - sum(x[i] * theta[i] for i in range(n))
    theta2 = [theta[i] + k[i] * e for i in range(n)]
    p2 = [[(p[i][j] - k[i] * px[j]) / lam for j in range(n)] for i in range(n)]
    return theta2, p2


class StabilisedRLS:
    """Information-form RLS with forgetting toward the prior, for ``n_rhs`` right-hand sides.

    ``theta0``: prior mean; ``prior_info``: prior information matrix (the
    inverse of the prior covariance). Data enter with weight 1/r. The noise
    scale sigma^2 multiplies every r; it is given at solve time so it can be
    estimated from the residuals.
    """

    def __init__(self, theta0: list[float], prior_info: list[list[float]], n_rhs: int = 1) -> None:
        self.p = len(theta0)
        self.n_rhs = n_rhs
        self.theta0 = list(theta0)
        self.prior_info = [list(r) for r in prior_info]
        self.eta0 = [sum(prior_info[i][j] * theta0[j] for j in range(self.p)) for i in range(self.p)]
        self.clear()

    def clear(self) -> None:
        p = self.p
        self.d = zeros(p)                                  # sum x x^T / r
        self.b = [[0.0] * p for _ in range(self.n_rhs)]    # sum x y_k / r
        self.syy = [0.0] * self.n_rhs                      # sum y_k^2 / r
        self.n = 0.0                                       # sum of weights (decayed count)
        self.extra: list[float] = [0.0] * p                # sum x * aux / r (sensitivities)

    def decay(self, factor: float) -> None:
        """Forget the data by ``factor`` in (0, 1] (the prior stays)."""
        if factor >= 1.0:
            return
        for row in self.d:
            for j in range(self.p):
                row[j] *= factor
        for bk in self.b:
            for j in range(self.p):
                bk[j] *= factor
        for k in range(self.n_rhs):
            self.syy[k] *= factor
        for j in range(self.p):
            self.extra[j] *= factor
        self.n *= factor

    def add(self, x: tuple[float, ...] | list[float], ys: tuple[float, ...] | list[float],
            r: float = 1.0, aux: float = 0.0, weight: float = 1.0) -> None:
        """Add one row: regressors ``x``, one value per right-hand side ``ys``,
        variance ``r``; ``aux`` accumulates sum x*aux/r (for sensitivities)."""
        w = weight / r
        p = self.p
        for i in range(p):
            xi = x[i] * w
            row = self.d[i]
            for j in range(p):
                row[j] += xi * x[j]
            self.extra[i] += xi * aux
        for k in range(self.n_rhs):
            yk = ys[k]
            bk = self.b[k]
            for i in range(p):
                bk[i] += x[i] * w * yk
            self.syy[k] += w * yk * yk
        self.n += weight

    def information(self, sigma2: float = 1.0) -> list[list[float]]:
        """Posterior information matrix Lambda_0 + D / sigma^2."""
        return [[self.prior_info[i][j] + self.d[i][j] / sigma2 for j in range(self.p)]
                for i in range(self.p)]

    def solve(self, sigma2: float = 1.0) -> tuple[list[list[float]], list[list[float]]]:
        """(theta_k for every right-hand side, posterior covariance) at noise scale sigma^2."""
        cov = inverse_spd(self.information(sigma2))
        thetas = []
        for k in range(self.n_rhs):
            rhs = [self.eta0[i] + self.b[k][i] / sigma2 for i in range(self.p)]
            thetas.append([sum(cov[i][j] * rhs[j] for j in range(self.p)) for i in range(self.p)])
        return thetas, cov

    def rss(self, k: int, theta: list[float]) -> float:
        """Weighted residual sum of squares of right-hand side ``k`` at ``theta``."""
        p = self.p
        bt = sum(self.b[k][i] * theta[i] for i in range(p))
        dtt = sum(theta[i] * sum(self.d[i][j] * theta[j] for j in range(p)) for i in range(p))
        return max(self.syy[k] - 2.0 * bt + dtt, 0.0)

    def prior_penalty(self, theta: list[float]) -> float:
        """(theta - theta0)^T Lambda_0 (theta - theta0)."""
        p = self.p
        dv = [theta[i] - self.theta0[i] for i in range(p)]
        return sum(dv[i] * sum(self.prior_info[i][j] * dv[j] for j in range(p)) for i in range(p))
