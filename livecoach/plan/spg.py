"""Spectral projected gradient for box-constrained minimisation (pure Python).

Source: Birgin, E. G., Martínez, J. M. and Raydan, M. (2000), "Nonmonotone
spectral projected gradient methods on convex sets", SIAM J. Optim. 10(4),
1196-1211 (algorithm SPG2): a projected gradient step with the
Barzilai-Borwein step length (Barzilai & Borwein 1988, IMA J. Numer. Anal.
8, 141-148) and a nonmonotone Armijo line search (Grippo, Lampariello &
Lucidi 1986) against the largest of the last ``memory`` objective values.

Used for the live re-plan, which must not import scipy; deterministic (no
randomness, no clock): it stops after ``max_evaluations`` evaluations or
when the projected-gradient step is below ``tolerance``.
"""

from __future__ import annotations

from typing import Callable

Objective = Callable[[list[float]], tuple[float, list[float]]]


def _project(x: list[float], lo: float, hi: float) -> list[float]:
    return [lo if v < lo else (hi if v > hi else v) for v in x]


def spg_minimise(
    fun: Objective,
    x0: list[float],
    *,
    lo: float = 0.0,
    hi: float = 1.0,
    max_evaluations: int = 200,
    tolerance: float = 1e-9,
    memory: int = 10,
    sufficient_decrease: float = 1e-4,
) -> tuple[list[float], float, int]:
    """Minimise ``fun`` (returns value and gradient) over lo <= x <= hi.

    Returns (x, f(x), evaluations used).
    """
    x = _project(list(x0), lo, hi)
    f, g = fun(x)
    evals = 1
    history = [f]
    # First step length: a unit projected-gradient step scaled to the gradient.
    gnorm = max(abs(v) for v in g) if g else 0.0
    lam = 1.0 / gnorm if gnorm > 0.0 else 1.0
    while evals < max_evaluations:
        d = [pv - xv for pv, xv in zip(_project([xv - lam * gv for xv, gv in zip(x, g)], lo, hi), x)]
        pg = max((abs(v) for v in d), default=0.0)
        if pg <= tolerance:
            break
        gtd = sum(gv * dv for gv, dv in zip(g, d))
        if gtd >= 0.0:
            break
        f_ref = max(history[-memory:])
        alpha = 1.0
        while True:
            x_new = [xv + alpha * dv for xv, dv in zip(x, d)]
            f_new, g_new = fun(x_new)
            evals += 1
            if f_new <= f_ref + sufficient_decrease * alpha * gtd or evals >= max_evaluations:
                break
            # Safeguarded quadratic interpolation of the step (SPG2).
            denom = 2.0 * (f_new - f - alpha * gtd)
            a_q = -gtd * alpha * alpha / denom if denom > 0.0 else 0.5 * alpha
            alpha = a_q if 0.1 * alpha <= a_q <= 0.9 * alpha else 0.5 * alpha
        if f_new > f_ref + sufficient_decrease * alpha * gtd:
            break  # out of evaluations without an acceptable step
        s = [xn - xv for xn, xv in zip(x_new, x)]
        y = [gn - gv for gn, gv in zip(g_new, g)]
        sty = sum(a * b for a, b in zip(s, y))
        sts = sum(a * a for a in s)
        lam = min(max(sts / sty, 1e-12), 1e12) if sty > 0.0 else 1e12
        x, f, g = x_new, f_new, g_new
        history.append(f)
    return x, f, evals
