"""W′ balance by the integral model of Skiba et al. (2012) — an analysis option.

Source: Skiba, P. F., Chidnok, W., Vanhatalo, A. and Jones, A. M. (2012),
"Modeling the expenditure and reconstitution of work capacity above critical
power", Med. Sci. Sports Exerc. 44(8), 1526-1532::

    W′bal(t) = W′ - ∫_0^t W′exp(u) * exp(-(t - u)/τ) du
    W′exp(u) = max(P(u) - CP, 0)
    τ = 546 * exp(-0.01 * D_CP) + 316   (s)

D_CP is CP minus the mean power of the parts of the ride below CP. τ is one
number for the whole record, so this model needs the whole ride: it is for
analysis after the ride, not for the live loop (which uses the differential
model in :mod:`livecoach.rider.wprime`).

The integral is evaluated with the power held constant over each interval
(the value reported at the interval's end, as in
:class:`livecoach.rider.tracker.WPrimeBalance`), exactly for that piecewise
constant power, by the recursion S_k = S_{k-1} e^{-dt/τ} + W′exp_k τ (1 - e^{-dt/τ}).
"""

from __future__ import annotations

import math
from typing import Sequence

from livecoach.errors import PhysicsError


def skiba2012_tau_s(d_cp_w: float) -> float:
    """Recovery time constant, s, for a mean shortfall ``d_cp_w`` (W) below CP (Skiba 2012)."""
    return 546.0 * math.exp(-0.01 * d_cp_w) + 316.0


def mean_shortfall_below_cp_w(
    t_s: Sequence[float], power_w: Sequence[float], cp_w: float
) -> float:
    """D_CP, W: CP minus the time-weighted mean power over the intervals below CP.

    Returns 0 when the ride never goes below CP.
    """
    total_t = 0.0
    total_deficit = 0.0
    for k in range(1, len(t_s)):
        dt = t_s[k] - t_s[k - 1]
        p = max(power_w[k], 0.0)
        if p < cp_w and dt > 0.0:
            total_t += dt
            total_deficit += (cp_w - p) * dt
    return total_deficit / total_t if total_t > 0.0 else 0.0


def w_prime_balance_integral(
    t_s: Sequence[float],
    power_w: Sequence[float],
    cp_w: float,
    w_prime_j: float,
    tau_s: float | None = None,
) -> list[float]:
    """W′ balance, J, at each time of a ride by the Skiba (2012) integral model.

    ``t_s``: sample times, s (non-decreasing); ``power_w``: power, W, the
    mean over the interval ending at that sample; ``tau_s``: override the
    time constant (default: Skiba 2012's formula from D_CP).
    """
    if len(t_s) != len(power_w):
        raise PhysicsError(f"t_s has {len(t_s)} values but power_w has {len(power_w)}")
    if cp_w <= 0.0 or w_prime_j <= 0.0:
        raise PhysicsError(f"cp_w={cp_w!r} and w_prime_j={w_prime_j!r} must be > 0")
    for k in range(1, len(t_s)):
        if not t_s[k] >= t_s[k - 1]:
            raise PhysicsError(f"t_s[{k}]={t_s[k]!r} is before t_s[{k - 1}]={t_s[k - 1]!r}")
    tau = skiba2012_tau_s(mean_shortfall_below_cp_w(t_s, power_w, cp_w)) if tau_s is None else tau_s
    out = [w_prime_j] if len(t_s) else []
    s = 0.0
    for k in range(1, len(t_s)):
        dt = t_s[k] - t_s[k - 1]
        decay = math.exp(-dt / tau)
        expended_rate = max(power_w[k] - cp_w, 0.0)
        s = s * decay + expended_rate * tau * (1.0 - decay)
        out.append(w_prime_j - s)
    return out


def w_prime_balance_differential(
    t_s: Sequence[float],
    power_w: Sequence[float],
    cp_w: float,
    w_prime_j: float,
    initial_balance_j: float | None = None,
) -> list[float]:
    """W′ balance, J, at each time by the Skiba (2015) differential model (whole ride).

    Same convention as :func:`w_prime_balance_integral`; the live tracker
    gives the same numbers sample by sample.
    """
    from livecoach.rider.wprime import w_prime_step_j

    if len(t_s) != len(power_w):
        raise PhysicsError(f"t_s has {len(t_s)} values but power_w has {len(power_w)}")
    w = w_prime_j if initial_balance_j is None else initial_balance_j
    out = [w] if len(t_s) else []
    for k in range(1, len(t_s)):
        dt = t_s[k] - t_s[k - 1]
        if dt < 0.0:
            raise PhysicsError(f"t_s[{k}]={t_s[k]!r} is before t_s[{k - 1}]={t_s[k - 1]!r}")
        w = w_prime_step_j(w, power_w[k], dt, cp_w, w_prime_j)
        out.append(w)
    return out
