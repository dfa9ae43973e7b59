"""Rider model: 3-parameter CP model (Morton 1996) and W′ balance (Skiba 2012, 2015)."""

from __future__ import annotations

import math
import random

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.config.ridefile import RiderConfig
from livecoach.errors import PhysicsError
from livecoach.rider import (
    WPrimeBalance,
    all_out_step,
    check_rider,
    max_power_w,
    recovery_time_constant_s,
    skiba2012_tau_s,
    time_to_exhaustion_s,
    w_prime_balance_differential,
    w_prime_balance_integral,
    w_prime_step_j,
)

RIDER = RiderConfig(cp_w=250.0, w_prime_j=20000.0, pmax_w=1000.0)


def test_skiba_2015_worked_check():
    # Skiba et al. (2015) Eur. J. Appl. Physiol. 115:703, differential model in closed
    # form; worked values from memory (design notes): CP 250 W, W' 20 kJ, 60 s at
    # 350 W -> 14 000 J; then 60 s at 0 W -> about 17 166 J (tau = W'/D_CP = 80 s).
    w = w_prime_step_j(20000.0, 350.0, 60.0, 250.0, 20000.0)
    assert w == pytest.approx(14000.0, abs=1e-9)
    w = w_prime_step_j(w, 0.0, 60.0, 250.0, 20000.0)
    assert w == pytest.approx(17166.0, abs=1.0)
    assert w == pytest.approx(20000.0 - 6000.0 * math.exp(-0.75), rel=1e-12)


def test_tracker_matches_worked_check_in_small_steps():
    # Same worked check (Skiba 2015, from memory) through the live tracker at 4 Hz:
    # exact integration means the step size does not matter.
    tr = WPrimeBalance(RIDER)
    tr.update(0.0, 0.0)
    t = 0.0
    for _ in range(240):
        t += 0.25
        tr.update(t, 350.0)
    assert tr.balance_j == pytest.approx(14000.0, abs=1e-6)
    for _ in range(240):
        t += 0.25
        tr.update(t, 0.0)
    assert tr.balance_j == pytest.approx(17166.0, abs=1.0)
    assert tr.min_balance_j == pytest.approx(14000.0, abs=1e-6)
    assert tr.work_above_cp_j == pytest.approx(6000.0, abs=1e-6)


def test_recovery_is_exact_exponential_against_fine_euler():
    # dW'/dt = (CP - P)(W' - W'bal)/W' (Skiba 2015) integrated by a fine explicit
    # Euler scheme agrees with the exact step.
    w0, p, dt = 5000.0, 120.0, 90.0
    w = w0
    n = 200000
    h = dt / n
    for _ in range(n):
        w += h * (250.0 - p) * (20000.0 - w) / 20000.0
    assert w_prime_step_j(w0, p, dt, 250.0, 20000.0) == pytest.approx(w, rel=1e-6)


def test_max_power_linear_decline_morton():
    # Morton (1996) Ergonomics 39:611: available power falls linearly from Pmax
    # (W' full) to CP (W' empty).
    assert max_power_w(250.0, 20000.0, 1000.0, 20000.0) == pytest.approx(1000.0)
    assert max_power_w(250.0, 20000.0, 1000.0, 0.0) == pytest.approx(250.0)
    assert max_power_w(250.0, 20000.0, 1000.0, 10000.0) == pytest.approx(625.0)
    assert max_power_w(250.0, 20000.0, 1000.0, -50.0) == pytest.approx(250.0)


@pytest.mark.parametrize("power_w", [300.0, 400.0, 600.0, 900.0])
def test_time_to_exhaustion_morton_equation(power_w):
    # Morton (1996) eq. t_lim = W'/(P - CP) + W'/(CP - Pmax): the time at which the
    # linearly falling W' balance (Skiba 2015 above CP) makes P_avail equal P.
    t_lim = time_to_exhaustion_s(power_w, 250.0, 20000.0, 1000.0)
    assert t_lim == pytest.approx(20000.0 / (power_w - 250.0) - 20000.0 / 750.0)
    w = w_prime_step_j(20000.0, power_w, t_lim, 250.0, 20000.0)
    assert max_power_w(250.0, 20000.0, 1000.0, w) == pytest.approx(power_w, rel=1e-9)
    assert time_to_exhaustion_s(200.0, 250.0, 20000.0, 1000.0) == math.inf
    assert time_to_exhaustion_s(1000.0, 250.0, 20000.0, 1000.0) == 0.0


def test_all_out_exponential_and_consistent():
    # All-out: dW'/dt = -(Pmax - CP) W'/W' (Morton 1996 ceiling with Skiba 2015),
    # compared with a fine Euler integration of P = P_avail(W'bal).
    p_mean, w1 = all_out_step(20000.0, 10.0, 250.0, 20000.0, 1000.0)
    w = 20000.0
    work = 0.0
    n = 100000
    h = 10.0 / n
    for _ in range(n):
        p = max_power_w(250.0, 20000.0, 1000.0, w)
        work += p * h
        w -= (p - 250.0) * h
    assert w1 == pytest.approx(w, rel=1e-4)
    assert p_mean == pytest.approx(work / 10.0, rel=1e-4)


def test_recovery_time_constant():
    # Skiba 2015: tau = W' / D_CP.
    assert recovery_time_constant_s(250.0, 20000.0, 0.0) == pytest.approx(80.0)
    assert recovery_time_constant_s(250.0, 20000.0, 250.0) == math.inf


def test_skiba_2012_tau_formula():
    # Skiba et al. (2012) MSSE 44:1526: tau = 546 exp(-0.01 D_CP) + 316 s.
    assert skiba2012_tau_s(0.0) == pytest.approx(862.0)
    assert skiba2012_tau_s(100.0) == pytest.approx(546.0 * math.exp(-1.0) + 316.0)


def test_integral_model_closed_form():
    # Skiba 2012 integral model with constant tau: an interval of 60 s at CP + 100 W
    # then 120 s at 150 W (D_CP = 100 W, tau = 546 e^-1 + 316 s). Closed form of the
    # convolution of a 60 s pulse of 100 W with exp(-t/tau).
    t = [float(i) for i in range(181)]
    p = [0.0] + [350.0] * 60 + [150.0] * 120
    out = w_prime_balance_integral(t, p, 250.0, 20000.0)
    tau = skiba2012_tau_s(100.0)
    end_pulse = 100.0 * tau * (1.0 - math.exp(-60.0 / tau))
    assert out[60] == pytest.approx(20000.0 - end_pulse, rel=1e-12)
    assert out[180] == pytest.approx(20000.0 - end_pulse * math.exp(-120.0 / tau), rel=1e-12)


def test_differential_series_equals_tracker():
    rng = random.Random(7)
    t = [0.0]
    p = [0.0]
    for _ in range(500):
        t.append(t[-1] + rng.uniform(0.1, 1.5))
        p.append(rng.uniform(0.0, 900.0))
    series = w_prime_balance_differential(t, p, RIDER.cp_w, RIDER.w_prime_j)
    tr = WPrimeBalance(RIDER)
    for ti, pi, expected in zip(t, p, series):
        assert tr.update(ti, pi) == expected


@settings(max_examples=60, deadline=None)
@given(
    w0=st.floats(0.0, 20000.0),
    p=st.floats(0.0, 1200.0),
    dt1=st.floats(0.0, 50.0),
    dt2=st.floats(0.0, 50.0),
)
def test_step_composes(w0, p, dt1, dt2):
    # Exact integration: one step of dt1 + dt2 equals two steps (semigroup property).
    one = w_prime_step_j(w0, p, dt1 + dt2, 250.0, 20000.0)
    two = w_prime_step_j(w_prime_step_j(w0, p, dt1, 250.0, 20000.0), p, dt2, 250.0, 20000.0)
    assert one == pytest.approx(two, rel=1e-9, abs=1e-6)
    if p < 250.0:
        assert w0 <= one <= 20000.0 + 1e-9


def test_negative_power_counts_as_zero():
    assert w_prime_step_j(1000.0, -80.0, 30.0, 250.0, 20000.0) == w_prime_step_j(
        1000.0, 0.0, 30.0, 250.0, 20000.0
    )


def test_tracker_rejects_bad_input_and_keeps_state():
    tr = WPrimeBalance(RIDER)
    tr.update(10.0, 0.0)
    tr.update(11.0, 500.0)
    before = tr.balance_j
    with pytest.raises(PhysicsError, match="backwards"):
        tr.update(10.5, 500.0)
    with pytest.raises(PhysicsError, match="non-finite"):
        tr.update(12.0, float("nan"))
    assert tr.balance_j == before
    assert tr.t_s == 11.0
    assert tr.update(12.0, 500.0) == pytest.approx(before - 250.0)
    assert tr.max_power_w() == pytest.approx(250.0 + 750.0 * tr.balance_j / 20000.0)


def test_check_rider_errors():
    with pytest.raises(PhysicsError, match="pmax_w"):
        check_rider(400.0, 20000.0, 300.0)
    with pytest.raises(PhysicsError, match="w_prime_j"):
        check_rider(250.0, 0.0, 900.0)
