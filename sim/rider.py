"""The simulated rider: limits from the critical-power model, and a human response.

Limits (the rider model family the planner uses):

* Morton, R. H. (1996), "A 3-parameter critical power model", Ergonomics 39,
  611-619: the power available falls linearly with the work capacity left,
  P <= CP + (Pmax - CP) * W'bal / W', and P >= 0.
* Skiba, P. F., Fulford, J., Clarke, D. C., Vanhatalo, A. and Jones, A. M.
  (2015), "Intramuscular determinants of the ability to recover work capacity
  above critical power", Eur. J. Appl. Physiol. 115, 703-713: the differential
  W' balance, dW'bal/dt = -(P - CP) above CP and (CP - P) * (W' - W'bal) / W'
  below it, integrated exactly for a power held over each step.

Both come from the shared rider model, :mod:`livecoach.rider.wprime`.

Human response: the rider's power follows the target through a first-order
lag (time constant ``lag_s``) with a multiplicative wobble from an
Ornstein-Uhlenbeck process (rms ``noise_pct``), then is clipped to the limits.
"""

from __future__ import annotations

import math

from livecoach.rider.wprime import check_rider, max_power_w, w_prime_step_j
from sim.randomness import Normals, OrnsteinUhlenbeck
from sim.scenario import Scenario


class ProfileTarget:
    """A scripted target power: steps ``[[at, power_w], ...]`` over distance or time."""

    def __init__(self, points: list[list[float]], basis: str, default_w: float) -> None:
        self.at = [p[0] for p in points]
        self.power_w = [p[1] for p in points]
        self.basis = basis
        self.default_w = default_w

    def target_w(self, t_s: float, distance_m: float) -> float:
        """Target power, W, at time ``t_s`` (s) and distance ``distance_m`` (m)."""
        x = distance_m if self.basis == "distance" else t_s
        if not self.at or x < self.at[0]:
            return self.power_w[0] if self.at else self.default_w
        lo, hi = 0, len(self.at) - 1
        while lo < hi:
            mid = (lo + hi + 1) // 2
            if self.at[mid] <= x:
                lo = mid
            else:
                hi = mid - 1
        return self.power_w[lo]


class Rider:
    """The simulated rider: true CP, W', Pmax, and the response to a target power.

    Call :meth:`power_for_step` once per integration step with the target
    power (W); it returns the crank power (W) held over that step and updates
    the W' balance (J).
    """

    def __init__(self, scenario: Scenario, seed: int) -> None:
        r = scenario.rider
        self.cp_w = scenario.true_cp_w
        self.w_prime_j = scenario.true_w_prime_j
        self.pmax_w = scenario.true_pmax_w
        check_rider(self.cp_w, self.w_prime_j, self.pmax_w)
        self.w_bal_j = self.w_prime_j
        self.lag_s = r.lag_s
        self.wobble = OrnsteinUhlenbeck(r.noise_pct / 100.0, r.noise_time_s, Normals(seed, "rider.wobble"))
        self.profile = ProfileTarget(r.profile, r.profile_basis, self.cp_w)
        self.follows_coach = r.mode == "coach"
        self.stand_down_after_trap = r.stand_down_after_trap
        self.cadence_rpm = r.cadence_rpm
        self._response_w: float | None = None
        self.limited_steps = 0

    def power_for_step(self, target_w: float, dt_s: float) -> float:
        """Crank power, W, for the next ``dt_s`` s given the ``target_w`` (W)."""
        target_w = max(0.0, target_w)
        if self._response_w is None:
            self._response_w = target_w
        elif self.lag_s > 0.0:
            alpha = 1.0 - math.exp(-dt_s / self.lag_s)
            self._response_w += alpha * (target_w - self._response_w)
        else:
            self._response_w = target_w
        wobble = self.wobble.step(dt_s)
        power_w = self._response_w * (1.0 + wobble) if target_w > 0.0 else 0.0
        limit_w = max_power_w(self.cp_w, self.w_prime_j, self.pmax_w, self.w_bal_j)
        if power_w > limit_w:
            power_w = limit_w
            self.limited_steps += 1
        power_w = max(0.0, power_w)
        self.w_bal_j = max(0.0, w_prime_step_j(self.w_bal_j, power_w, dt_s, self.cp_w, self.w_prime_j))
        return power_w
