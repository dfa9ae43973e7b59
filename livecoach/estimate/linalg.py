"""Tiny dense linear algebra in plain floats for 2 or 3 parameters.

For matrices this small, plain Python is several times faster than numpy
(whose per-call overhead dominates), and it keeps the live loop free of
array allocations. Matrices are lists of row lists; vectors are lists.
"""

from __future__ import annotations

from livecoach.errors import LivecoachError


class SingularMatrixError(LivecoachError):
    """A normal-equation matrix is singular (no information on some parameter)."""


def zeros(n: int) -> list[list[float]]:
    return [[0.0] * n for _ in range(n)]


def diag(values: list[float]) -> list[list[float]]:
    n = len(values)
    m = zeros(n)
    for i in range(n):
        m[i][i] = values[i]
    return m


def matvec(a: list[list[float]], x: list[float]) -> list[float]:
    return [sum(a[i][j] * x[j] for j in range(len(x))) for i in range(len(a))]


def dot(x: list[float], y: list[float]) -> float:
    return sum(a * b for a, b in zip(x, y))


def quad(a: list[list[float]], x: list[float]) -> float:
    """x^T A x."""
    return dot(x, matvec(a, x))


def inverse_spd(a: list[list[float]]) -> list[list[float]]:
    """Inverse of a symmetric positive-definite matrix of size 1..3 (cofactors)."""
    n = len(a)
    if n == 1:
        if a[0][0] <= 0.0:
            raise SingularMatrixError("1x1 matrix is not positive")
        return [[1.0 / a[0][0]]]
    if n == 2:
        (p, q), (r, s) = a
        det = p * s - q * r
        if not det > 0.0:
            raise SingularMatrixError(f"2x2 matrix is singular (det {det!r})")
        return [[s / det, -q / det], [-r / det, p / det]]
    if n == 3:
        (a00, a01, a02), (a10, a11, a12), (a20, a21, a22) = a
        c00 = a11 * a22 - a12 * a21
        c01 = -(a10 * a22 - a12 * a20)
        c02 = a10 * a21 - a11 * a20
        det = a00 * c00 + a01 * c01 + a02 * c02
        if not det > 0.0:
            raise SingularMatrixError(f"3x3 matrix is singular (det {det!r})")
        c10 = -(a01 * a22 - a02 * a21)
        c11 = a00 * a22 - a02 * a20
        c12 = -(a00 * a21 - a01 * a20)
        c20 = a01 * a12 - a02 * a11
        c21 = -(a00 * a12 - a02 * a10)
        c22 = a00 * a11 - a01 * a10
        inv = 1.0 / det
        return [
            [c00 * inv, c10 * inv, c20 * inv],
            [c01 * inv, c11 * inv, c21 * inv],
            [c02 * inv, c12 * inv, c22 * inv],
        ]
    raise ValueError(f"inverse_spd supports 1..3 parameters, got {n}")


def add_scaled(a: list[list[float]], b: list[list[float]], s: float) -> list[list[float]]:
    """A + s B (new matrix)."""
    return [[x + s * y for x, y in zip(ra, rb)] for ra, rb in zip(a, b)]
