"""A small stateful tracker of the rider's W′ balance for the live loop.

Pure apart from its own state: the same sequence of ``update`` calls always
gives the same balances (no wall clock). The maths is in
:mod:`livecoach.rider.wprime` (Skiba et al. 2015 differential model, Morton
1996 power ceiling).
"""

from __future__ import annotations

import math

from livecoach.errors import PhysicsError
from livecoach.rider.wprime import RiderParams, check_rider, max_power_w, w_prime_step_j


class WPrimeBalance:
    """W′ balance of one rider through a ride.

    ``rider``: an object with ``cp_w`` (W), ``w_prime_j`` (J) and ``pmax_w``
    (W), e.g. :class:`livecoach.config.ridefile.RiderConfig`.
    ``initial_balance_j``: the balance at the first update, J (default W′:
    a rested rider).

    Convention: the power given to :meth:`update` at time ``t_s`` is the mean
    power since the previous update (a power meter's report covers the
    period before it was sent), and it is integrated exactly over that
    interval. The first update only sets the clock.
    """

    __slots__ = ("cp_w", "w_prime_j", "pmax_w", "_t_s", "_balance_j", "_min_balance_j", "_work_above_cp_j")

    def __init__(self, rider: RiderParams, initial_balance_j: float | None = None) -> None:
        check_rider(rider.cp_w, rider.w_prime_j, rider.pmax_w)
        self.cp_w = float(rider.cp_w)
        self.w_prime_j = float(rider.w_prime_j)
        self.pmax_w = float(rider.pmax_w)
        start = self.w_prime_j if initial_balance_j is None else float(initial_balance_j)
        if not math.isfinite(start):
            raise PhysicsError(f"initial_balance_j={initial_balance_j!r} is not finite")
        self._t_s: float | None = None
        self._balance_j = start
        self._min_balance_j = start
        self._work_above_cp_j = 0.0

    @property
    def balance_j(self) -> float:
        """The current W′ balance, J (may be below 0 if the rider beat the model)."""
        return self._balance_j

    @property
    def min_balance_j(self) -> float:
        """Lowest balance seen so far, J."""
        return self._min_balance_j

    @property
    def work_above_cp_j(self) -> float:
        """Total work done above CP so far, J (the integral of max(P - CP, 0))."""
        return self._work_above_cp_j

    @property
    def t_s(self) -> float | None:
        """Time of the last update, s (None before the first)."""
        return self._t_s

    def update(self, t_s: float, power_w: float) -> float:
        """Integrate ``power_w`` (W, the mean since the last update) up to ``t_s`` (s).

        Returns the W′ balance, J. Raises :class:`PhysicsError` (and keeps its
        state) for a non-finite input or a time earlier than the last update.
        """
        if not (math.isfinite(t_s) and math.isfinite(power_w)):
            raise PhysicsError(f"W' balance: non-finite input t_s={t_s!r}, power_w={power_w!r}")
        if self._t_s is None:
            self._t_s = t_s
            return self._balance_j
        dt_s = t_s - self._t_s
        if dt_s < 0.0:
            raise PhysicsError(
                f"W' balance: time went backwards from {self._t_s!r} s to {t_s!r} s"
            )
        if dt_s > 0.0:
            self._balance_j = w_prime_step_j(self._balance_j, power_w, dt_s, self.cp_w, self.w_prime_j)
            if power_w > self.cp_w:
                self._work_above_cp_j += (power_w - self.cp_w) * dt_s
            if self._balance_j < self._min_balance_j:
                self._min_balance_j = self._balance_j
        self._t_s = t_s
        return self._balance_j

    def max_power_w(self) -> float:
        """Power available now, W: CP + (Pmax - CP) * W′bal / W′ (Morton 1996)."""
        return max_power_w(self.cp_w, self.w_prime_j, self.pmax_w, self._balance_j)

    def fraction(self) -> float:
        """The balance as a fraction of W′, clamped to 0..1."""
        return min(max(self._balance_j / self.w_prime_j, 0.0), 1.0)
