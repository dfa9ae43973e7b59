"""The rider model: critical power, W′ and the W′ balance.

Sources: Morton (1996) Ergonomics 39:611 (3-parameter critical-power model);
Skiba et al. (2015) Eur. J. Appl. Physiol. 115:703 (differential W′ balance);
Skiba et al. (2012) Med. Sci. Sports Exerc. 44:1526 (integral W′ balance,
for analysis only).
"""

from livecoach.rider.integral import (
    skiba2012_tau_s,
    w_prime_balance_differential,
    w_prime_balance_integral,
)
from livecoach.rider.tracker import WPrimeBalance
from livecoach.rider.wprime import (
    all_out_step,
    check_rider,
    max_power_w,
    recovery_time_constant_s,
    time_to_exhaustion_s,
    w_prime_step_j,
)

__all__ = [
    "WPrimeBalance",
    "all_out_step",
    "check_rider",
    "max_power_w",
    "recovery_time_constant_s",
    "skiba2012_tau_s",
    "time_to_exhaustion_s",
    "w_prime_balance_differential",
    "w_prime_balance_integral",
    "w_prime_step_j",
]
