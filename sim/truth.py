"""The truth log: what really happened in a simulated run, beside its sensor events.

One row per integration step (or every ``every``-th step). Row k holds the
state at ``t_s`` and the inputs held from ``t_s`` for the next step: crank
power, wind, drag area, rolling resistance, air density. Work integrals are
cumulative from the start (J). Columns are ``array('d')`` (8 bytes a value);
a 10-minute run at 100 Hz with 21 columns takes about 10 MB.
"""

from __future__ import annotations

from array import array
from bisect import bisect_right
from dataclasses import dataclass, field
from typing import Any

COLUMNS = (
    "t_s",
    "distance_m",
    "speed_mps",
    "accel_mps2",
    "power_w",
    "target_power_w",
    "cda_m2",
    "crr",
    "headwind_mps",
    "airspeed_mps",
    "air_density_kgpm3",
    "elevation_m",
    "grade",
    "w_prime_balance_j",
    "crank_work_j",
    "wheel_work_j",
    "aero_work_j",
    "rolling_work_j",
    "bearing_work_j",
    "grade_work_j",
    "kinetic_energy_j",
)


class TruthLog:
    """Columns of true values, one row per logged step (see module doc)."""

    def __init__(self, every: int = 1) -> None:
        if every < 1:
            raise ValueError("every must be >= 1")
        self.every = every
        self.columns: dict[str, array] = {name: array("d") for name in COLUMNS}
        self._n = 0

    def add(self, row: tuple[float, ...], force: bool = False) -> None:
        """Append ``row`` (values in :data:`COLUMNS` order) if it is due (or ``force``)."""
        if force or self._n % self.every == 0:
            for col, value in zip(self.columns.values(), row):
                col.append(value)
        self._n += 1

    def __len__(self) -> int:
        return len(self.columns["t_s"])

    def __getitem__(self, name: str) -> array:
        return self.columns[name]

    def as_numpy(self) -> dict[str, Any]:
        """The columns as numpy arrays (copies)."""
        import numpy as np

        return {k: np.frombuffer(v, dtype=float).copy() for k, v in self.columns.items()}

    def at(self, name: str, t_s: float) -> float:
        """Column ``name`` linearly interpolated at ``t_s`` (held beyond the ends)."""
        ts = self.columns["t_s"]
        col = self.columns[name]
        i = bisect_right(ts, t_s)
        if i <= 0:
            return col[0]
        if i >= len(ts):
            return col[-1]
        f = (t_s - ts[i - 1]) / (ts[i] - ts[i - 1])
        return col[i - 1] + f * (col[i] - col[i - 1])


@dataclass
class TruthSummary:
    """The outcome of a run (SI units); times in simulated seconds."""

    end_reason: str = ""
    end_t_s: float = 0.0
    end_distance_m: float = 0.0
    trap_entry_t_s: float | None = None
    trap_exit_t_s: float | None = None
    trap_speed_mps: float | None = None
    max_speed_mps: float = 0.0
    w_prime_min_j: float = 0.0
    w_prime_at_trap_exit_j: float | None = None
    rider_limited_steps: int = 0
    steps: int = 0
    events: int = 0
    faults: dict[str, int] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        from dataclasses import asdict

        return asdict(self)
