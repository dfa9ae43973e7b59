"""Seeded random streams and the Ornstein-Uhlenbeck process used by the simulator.

Every random quantity of a run comes from a named stream derived from the run's
seed and the stream's name (``numpy.random.Generator`` on PCG64, seeded with
``[seed, crc32(name)]``), so adding a sensor never changes the wind of an
existing scenario and the same seed always gives the same run, in any process.

Sources
-------
* Uhlenbeck, G. E. and Ornstein, L. S. (1930), "On the theory of the Brownian
  motion", Phys. Rev. 36, 823-841: the process dX = -X/T dt + sigma*sqrt(2/T) dW,
  stationary standard deviation sigma and autocorrelation exp(-|lag|/T).
* Gillespie, D. T. (1996), "Exact numerical simulation of the Ornstein-Uhlenbeck
  process and its integral", Phys. Rev. E 54, 2084-2091: the exact update
  X(t+dt) = X(t)*mu + sigma*sqrt(1 - mu^2)*N(0,1), mu = exp(-dt/T), valid for
  any step size (no discretisation error).
"""

from __future__ import annotations

import math
import zlib

import numpy as np

_BLOCK = 4096


def stream(seed: int, name: str) -> np.random.Generator:
    """An independent generator for ``name`` within the run seeded by ``seed``."""
    return np.random.Generator(np.random.PCG64([int(seed) & 0xFFFFFFFFFFFFFFFF, zlib.crc32(name.encode())]))


class Normals:
    """Standard normal draws from a named stream, fetched in blocks (fast scalar access)."""

    __slots__ = ("_gen", "_buf", "_i")

    def __init__(self, seed: int, name: str) -> None:
        self._gen = stream(seed, name)
        self._buf: list[float] = []
        self._i = 0

    def next(self) -> float:
        """One N(0, 1) draw."""
        if self._i >= len(self._buf):
            self._buf = self._gen.standard_normal(_BLOCK).tolist()
            self._i = 0
        x = self._buf[self._i]
        self._i += 1
        return x

    def uniform(self) -> float:
        """One U(0, 1) draw from the same generator (unbuffered)."""
        return float(self._gen.random())

    def integers(self, lo: int, hi: int) -> int:
        """One integer in [lo, hi) from the same generator (unbuffered)."""
        return int(self._gen.integers(lo, hi))

    def bytes(self, n: int) -> bytes:
        """``n`` random bytes from the same generator."""
        return self._gen.bytes(n)


class OrnsteinUhlenbeck:
    """A stationary Ornstein-Uhlenbeck process with standard deviation ``sd`` and
    time scale ``time_s`` (s), updated exactly (Gillespie 1996) by :meth:`step`.

    ``sd`` is in the unit of the quantity (e.g. m/s for gusts); ``sd = 0`` gives
    a process that stays at 0. The initial value is drawn from the stationary
    distribution N(0, sd^2).
    """

    __slots__ = ("sd", "time_s", "value", "_normals", "_dt", "_mu", "_k")

    def __init__(self, sd: float, time_s: float, normals: Normals) -> None:
        if not (math.isfinite(sd) and sd >= 0.0):
            raise ValueError(f"OU standard deviation {sd!r} must be >= 0")
        if not (math.isfinite(time_s) and time_s > 0.0):
            raise ValueError(f"OU time scale {time_s!r} must be > 0 s")
        self.sd = sd
        self.time_s = time_s
        self._normals = normals
        self.value = sd * normals.next() if sd > 0.0 else 0.0
        self._dt = -1.0
        self._mu = 0.0
        self._k = 0.0

    def step(self, dt_s: float) -> float:
        """Advance by ``dt_s`` seconds and return the new value."""
        if self.sd == 0.0:
            return 0.0
        if dt_s != self._dt:
            self._dt = dt_s
            self._mu = math.exp(-dt_s / self.time_s)
            self._k = self.sd * math.sqrt(1.0 - self._mu * self._mu)
        self.value = self.value * self._mu + self._k * self._normals.next()
        return self.value
