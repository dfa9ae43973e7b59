"""Recursive least squares against outside references (padasip, numpy least squares)."""

from __future__ import annotations

import random

import numpy as np
import pytest

from livecoach.estimate.linalg import SingularMatrixError, inverse_spd
from livecoach.estimate.rls import StabilisedRLS, rls_update


def _data(seed: int, n: int = 200):
    """The drag regression in scaled units (aero ~ v^3, rolling ~ v; v/20 m/s), so the
    covariance-form reference keeps its precision."""
    rng = random.Random(seed)
    theta = [2.4, 1.1]
    rows = []
    for _ in range(n):
        u = rng.uniform(8.0, 28.0) / 20.0
        x = [u**3, u]
        y = x[0] * theta[0] + x[1] * theta[1] + rng.gauss(0.0, 0.02)
        rows.append((x, y))
    return rows


def test_covariance_rls_equals_padasip_with_forgetting():
    # Outside reference: padasip.FilterRLS (PyPI), same regression, mu = forgetting factor,
    # P0 = I/eps, zero initial weights.
    padasip = pytest.importorskip("padasip")
    rows = _data(1, 150)
    for mu in (1.0, 0.99):
        f = padasip.filters.FilterRLS(2, mu=mu, eps=0.5, w="zeros")
        theta, p = [0.0, 0.0], [[2.0, 0.0], [0.0, 2.0]]
        for x, y in rows:
            f.adapt(y, np.array(x))
            theta, p = rls_update(theta, p, x, y, r=1.0, lam=mu)
        assert theta == pytest.approx(list(f.w), rel=1e-6)
        assert np.allclose(np.array(p), f.R, rtol=1e-6, atol=1e-9 * np.abs(f.R).max())


def test_information_form_equals_padasip_and_ridge_without_forgetting():
    # padasip.FilterRLS with mu = 1 is ridge least squares solve(X^T X + eps I, X^T y)
    # (design notes); StabilisedRLS with prior information eps*I and theta0 = 0 must match both.
    padasip = pytest.importorskip("padasip")
    rows = _data(2, 120)
    eps = 0.25
    f = padasip.filters.FilterRLS(2, mu=1.0, eps=eps, w="zeros")
    s = StabilisedRLS([0.0, 0.0], [[eps, 0.0], [0.0, eps]], n_rhs=1)
    for x, y in rows:
        f.adapt(y, np.array(x))
        s.add(x, [y])
    thetas, cov = s.solve(1.0)
    x_mat = np.array([r[0] for r in rows])
    y_vec = np.array([r[1] for r in rows])
    ridge = np.linalg.solve(x_mat.T @ x_mat + eps * np.eye(2), x_mat.T @ y_vec)
    assert thetas[0] == pytest.approx(list(ridge), rel=1e-8)
    assert thetas[0] == pytest.approx(list(f.w), rel=1e-6)
    assert np.allclose(np.array(cov), f.R, rtol=1e-6)


def test_weighted_rows_and_several_right_hand_sides_match_numpy_lstsq():
    rows = _data(3, 80)
    rng = random.Random(9)
    r = [rng.uniform(50.0, 900.0) for _ in rows]
    r = [rv * 1e-6 for rv in r]
    s = StabilisedRLS([0.03, 0.004], [[1 / 0.006**2, 0.0], [0.0, 1 / 0.001**2]], n_rhs=2)
    for (x, y), rv in zip(rows, r):
        s.add(x, [y, y + 0.03], r=rv)
    thetas, _ = s.solve(1.0)
    # Reference: the same weighted, regularised problem stacked for numpy.linalg.lstsq.
    for k, shift in enumerate((0.0, 0.03)):
        a = [np.array(x) / np.sqrt(rv) for (x, _), rv in zip(rows, r)]
        b = [(y + shift) / np.sqrt(rv) for (_, y), rv in zip(rows, r)]
        a += [np.array([1 / 0.006, 0.0]), np.array([0.0, 1 / 0.001])]
        b += [0.03 / 0.006, 0.004 / 0.001]
        ref, *_ = np.linalg.lstsq(np.array(a), np.array(b), rcond=None)
        assert thetas[k] == pytest.approx(list(ref), rel=1e-7)


def test_stabilised_forgetting_has_no_covariance_windup():
    # Steady riding: every row has the same direction, so plain exponential forgetting
    # lets the covariance grow without bound in the other direction (wind-up), while
    # forgetting toward the prior keeps it below the prior covariance.
    x = [0.5 * 1.03 * 20.0**3 * 5.0, 98.0 * 9.80665 * 20.0 * 5.0]
    prior = [[0.006**2, 0.0], [0.0, 0.001**2]]
    theta, p = [0.03, 0.0035], [r[:] for r in prior]
    s = StabilisedRLS([0.03, 0.0035], inverse_spd(prior), n_rhs=1)
    for _ in range(2000):
        theta, p = rls_update(theta, p, x, x[0] * 0.03 + x[1] * 0.0035, r=400.0, lam=0.98)
        s.decay(0.98)
        s.add(x, [x[0] * 0.03 + x[1] * 0.0035], r=400.0)
    _, cov = s.solve(1.0)
    eig_plain = max(np.linalg.eigvalsh(np.array(p)))
    assert eig_plain > 1e6 * prior[0][0]            # wound up
    assert cov[0][0] <= prior[0][0] * (1 + 1e-9)    # bounded by the prior (ceiling)
    assert cov[1][1] <= prior[1][1] * (1 + 1e-9)
    assert cov[0][0] < 0.5 * prior[0][0]            # and still informed by the data


def test_singular_information_is_a_clear_error():
    with pytest.raises(SingularMatrixError, match="singular"):
        inverse_spd([[1.0, 2.0], [2.0, 4.0]])
