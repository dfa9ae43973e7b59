"""Local polynomial fits for speed and acceleration from irregular samples.

A quadratic least-squares fit over the samples near a time (the local
polynomial smoother of Savitzky & Golay (1964), Anal. Chem. 36:1627, on an
irregular time grid): from distance samples the slope is the speed, from
speed samples the value is the speed. Used instead of differencing, which
multiplies the timing noise.
"""

from __future__ import annotations

from dataclasses import dataclass

from livecoach.estimate.linalg import SingularMatrixError, inverse_spd


@dataclass(frozen=True, slots=True)
class LocalFit:
    """y(t) ~ c0 + c1 (t - t0) + c2 (t - t0)^2 fitted near ``t0`` (s).

    ``inv``: (X^T X)^-1 of the fit (to turn a noise variance into coefficient
    variances); ``rss``: residual sum of squares; ``n``: samples used.
    """

    t0: float
    c0: float
    c1: float
    c2: float
    inv: tuple[tuple[float, ...], ...]
    rss: float
    n: int


def quadratic_fit(ts: list[float], ys: list[float], lo: int, hi: int, t0: float) -> LocalFit | None:
    """Least-squares quadratic through samples ``lo..hi-1`` around ``t0`` (s).

    Falls back to a straight line (c2 = 0) with 2 samples, or when the
    quadratic is singular; returns None with fewer than 2 samples.
    """
    n = hi - lo
    if n < 2:
        return None
    y_ref = ys[lo]
    s1 = s2 = s3 = s4 = 0.0
    q0 = q1 = q2 = 0.0
    for j in range(lo, hi):
        u = ts[j] - t0
        u2 = u * u
        y = ys[j] - y_ref
        s1 += u
        s2 += u2
        s3 += u2 * u
        s4 += u2 * u2
        q0 += y
        q1 += u * y
        q2 += u2 * y
    if n >= 4:
        try:
            inv = inverse_spd([[float(n), s1, s2], [s1, s2, s3], [s2, s3, s4]])
        except SingularMatrixError:
            inv = None
        if inv is not None:
            c0 = inv[0][0] * q0 + inv[0][1] * q1 + inv[0][2] * q2
            c1 = inv[1][0] * q0 + inv[1][1] * q1 + inv[1][2] * q2
            c2 = inv[2][0] * q0 + inv[2][1] * q1 + inv[2][2] * q2
            rss = 0.0
            for j in range(lo, hi):
                u = ts[j] - t0
                r = ys[j] - y_ref - (c0 + c1 * u + c2 * u * u)
                rss += r * r
            return LocalFit(t0, c0 + y_ref, c1, c2, tuple(tuple(r) for r in inv), rss, n)
    det = n * s2 - s1 * s1
    if not det > 1e-12:
        return None
    c0 = (s2 * q0 - s1 * q1) / det
    c1 = (n * q1 - s1 * q0) / det
    rss = 0.0
    for j in range(lo, hi):
        r = ys[j] - y_ref - (c0 + c1 * (ts[j] - t0))
        rss += r * r
    inv2 = ((s2 / det, -s1 / det, 0.0), (-s1 / det, n / det, 0.0), (0.0, 0.0, 0.0))
    return LocalFit(t0, c0 + y_ref, c1, 0.0, inv2, rss, n)
