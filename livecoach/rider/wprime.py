"""The rider's budget: critical power, W′ and the W′ balance (pure functions).

Model
-----
* 3-parameter critical-power model (Morton, R. H. (1996), "A 3-parameter
  critical power model", Ergonomics 39(4), 611-619): critical power CP (W),
  work capacity above CP W′ (J) and maximal instantaneous power Pmax (W).
  The power available falls linearly with the W′ left::

      P_avail = CP + (Pmax - CP) * W′bal / W′,     0 <= P <= P_avail

  and at a constant power P > CP the time to exhaustion is
  ``t_lim = W′/(P - CP) + W′/(CP - Pmax)`` (Morton 1996, eq. 5).
* W′ balance, differential form (Skiba, P. F., Fulford, J., Clarke, D. C.,
  Vanhatalo, A. and Jones, A. M. (2015), "Intramuscular determinants of the
  ability to recover work capacity above critical power", Eur. J. Appl.
  Physiol. 115, 703-713)::

      dW′bal/dt = -(P - CP)                          for P >= CP
      dW′bal/dt = (CP - P) * (W′ - W′bal) / W′        for P <  CP

  At constant power over a step both are integrated exactly here: a straight
  line above CP, an exponential approach to W′ with time constant
  W′/(CP - P) below CP.

Negative power (back-pedalling reported by some meters) counts as 0 W.
Above CP the balance may fall below zero when a rider produces more than the
model allows; the pure step keeps that value (it says the model is wrong),
and :func:`max_power_w` treats a negative balance as zero.
"""

from __future__ import annotations

import math
from typing import Protocol

from livecoach.errors import PhysicsError


class RiderParams(Protocol):
    """Anything with the three model parameters (e.g. ``RiderConfig``)."""

    cp_w: float
    w_prime_j: float
    pmax_w: float


def check_rider(cp_w: float, w_prime_j: float, pmax_w: float) -> None:
    """Raise :class:`PhysicsError` unless 0 < CP < Pmax and W′ > 0 (all finite)."""
    for name, value in (("cp_w", cp_w), ("w_prime_j", w_prime_j), ("pmax_w", pmax_w)):
        if not math.isfinite(value) or value <= 0.0:
            raise PhysicsError(f"rider {name}={value!r} must be a finite number > 0")
    if pmax_w <= cp_w:
        raise PhysicsError(f"rider pmax_w={pmax_w!r} W must be above cp_w={cp_w!r} W")


def max_power_w(cp_w: float, w_prime_j: float, pmax_w: float, w_prime_balance_j: float) -> float:
    """Power available now, W: CP + (Pmax - CP) * W′bal / W′ (Morton 1996).

    ``w_prime_balance_j`` is clamped to 0..W′, so the result is in CP..Pmax.
    """
    frac = min(max(w_prime_balance_j, 0.0), w_prime_j) / w_prime_j
    return cp_w + (pmax_w - cp_w) * frac


def w_prime_step_j(
    w_prime_balance_j: float, power_w: float, dt_s: float, cp_w: float, w_prime_j: float
) -> float:
    """W′ balance, J, after ``dt_s`` seconds at constant ``power_w`` (W).

    Exact integral of the Skiba et al. (2015) differential model over the
    step: ``W′bal - (P - CP) dt`` above CP, and
    ``W′ - (W′ - W′bal) exp(-(CP - P) dt / W′)`` below CP. A balance above W′
    (not physiological) is brought down to W′ by the recovery branch only
    when it is already at or below W′; it is passed through otherwise.
    """
    p = power_w if power_w > 0.0 else 0.0
    if p >= cp_w:
        return w_prime_balance_j - (p - cp_w) * dt_s
    if w_prime_balance_j >= w_prime_j:
        return w_prime_balance_j
    deficit = w_prime_j - w_prime_balance_j
    # W′ - deficit * e^(-x), written with expm1 so that short steps keep full precision.
    return w_prime_balance_j - deficit * math.expm1(-(cp_w - p) * dt_s / w_prime_j)


def recovery_time_constant_s(cp_w: float, w_prime_j: float, power_w: float) -> float:
    """Time constant of W′ recovery, s, at ``power_w`` < CP: W′ / (CP - P) (Skiba 2015).

    Infinite at or above CP (no recovery).
    """
    p = max(power_w, 0.0)
    if p >= cp_w:
        return math.inf
    return w_prime_j / (cp_w - p)


def time_to_exhaustion_s(power_w: float, cp_w: float, w_prime_j: float, pmax_w: float) -> float:
    """Time, s, a fresh rider can hold constant ``power_w`` (Morton 1996, eq. 5).

    ``t_lim = W′/(P - CP) + W′/(CP - Pmax)`` for CP < P <= Pmax; infinite at or
    below CP; 0 at or above Pmax. Equivalently: the time for the balance to
    fall, at (P - CP) J/s, until the power available equals P.
    """
    if power_w <= cp_w:
        return math.inf
    if power_w >= pmax_w:
        return 0.0
    return w_prime_j / (power_w - cp_w) + w_prime_j / (cp_w - pmax_w)


def all_out_step(
    w_prime_balance_j: float, dt_s: float, cp_w: float, w_prime_j: float, pmax_w: float
) -> tuple[float, float]:
    """An all-out effort for ``dt_s`` s: (mean power W, W′ balance J at the end).

    Riding at the power available, dW′bal/dt = -(Pmax - CP) W′bal / W′, so the
    balance decays exponentially with time constant W′/(Pmax - CP) (Morton
    1996 with Skiba 2015 above CP); the mean power is CP + (W′bal0 - W′bal1)/dt.
    """
    w0 = max(w_prime_balance_j, 0.0)
    if dt_s <= 0.0:
        return max_power_w(cp_w, w_prime_j, pmax_w, w0), w0
    w1 = w0 * math.exp(-(pmax_w - cp_w) * dt_s / w_prime_j)
    return cp_w + (w0 - w1) / dt_s, w1
