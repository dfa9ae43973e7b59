"""Two-sided CUSUM change detector (Page 1954, Biometrika 41:100-115).

On normalised residuals z_t (zero mean, unit variance while nothing
changes): g+_t = max(0, g+_{t-1} + z_t - k), g-_t = max(0, g-_{t-1} - z_t - k);
an alarm when either exceeds h. The change is estimated to have started just
after the statistic last left zero (the maximum-likelihood change point of
the CUSUM, e.g. Basseville & Nikiforov 1993, "Detection of Abrupt Changes",
sec. 2.2). Inputs are clipped to +-``clip`` so a single wild window cannot
raise an alarm alone.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class CusumAlarm:
    """An alarm: ``sign`` +1 (residuals went up: more drag) or -1; ``start_t_s``
    the estimated start of the change; ``n`` steps since then."""

    sign: int
    start_t_s: float
    n: int


class Cusum:
    """Two-sided CUSUM with reference value ``k`` and threshold ``h`` (in sd units)."""

    def __init__(self, k: float = 0.5, h: float = 8.0, clip: float = 4.0) -> None:
        self.k = k
        self.h = h
        self.clip = clip
        self.reset()

    def reset(self) -> None:
        self.g_pos = 0.0
        self.g_neg = 0.0
        self.start_pos: float | None = None
        self.start_neg: float | None = None
        self.n_pos = 0
        self.n_neg = 0

    def update(self, z: float, t_start_s: float) -> CusumAlarm | None:
        """Feed one normalised residual; ``t_start_s`` is when its window began."""
        z = max(-self.clip, min(self.clip, z))
        g = self.g_pos + z - self.k
        if g <= 0.0:
            self.g_pos, self.start_pos, self.n_pos = 0.0, None, 0
        else:
            if self.g_pos == 0.0:
                self.start_pos = t_start_s
            self.g_pos = g
            self.n_pos += 1
        g = self.g_neg - z - self.k
        if g <= 0.0:
            self.g_neg, self.start_neg, self.n_neg = 0.0, None, 0
        else:
            if self.g_neg == 0.0:
                self.start_neg = t_start_s
            self.g_neg = g
            self.n_neg += 1
        if self.g_pos > self.h:
            alarm = CusumAlarm(+1, self.start_pos if self.start_pos is not None else t_start_s, self.n_pos)
            self.reset()
            return alarm
        if self.g_neg > self.h:
            alarm = CusumAlarm(-1, self.start_neg if self.start_neg is not None else t_start_s, self.n_neg)
            self.reset()
            return alarm
        return None
