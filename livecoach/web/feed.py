"""What the crew page is sent: compact JSON payloads and a bounded history (pure).

:class:`CrewFeed` takes every state and notice (O(1) each) and keeps

* the newest state (what the page's numbers show);
* a history of chart points, one per ``point_every_s`` seconds of module
  time, in a ring of ``max_points`` (speed against distance, power, and the
  CdA and Crr estimates with their standard deviations);
* the last ``max_notices`` notices (the cue log).

Every point and notice has an absolute index, so each connected page keeps
its own cursor and gets exactly what it has not seen yet, however many
updates it missed while it was slow (its frames are merged, not queued).
No wall clock here: time is the module clock of the states.
"""

from __future__ import annotations

import collections
import itertools
import json
import math
from typing import Any

from livecoach.pipeline.state import LiveState, Notice

#: Columns of a chart point, in order (units in the names).
POINT_FIELDS = (
    "t_s", "distance_m", "speed_mps", "power_w", "target_power_w", "planned_speed_mps",
    "cda_m2", "cda_sd_m2", "crr", "crr_sd",
)


def _num(value: Any, digits: int = 6) -> float | None:
    """A finite float rounded to ``digits`` significant places (None otherwise)."""
    if value is None or isinstance(value, bool):
        return None
    try:
        x = float(value)
    except (TypeError, ValueError):
        return None
    if not math.isfinite(x):
        return None
    return float(f"{x:.{digits}g}")


def _plain(value: Any) -> Any:
    if isinstance(value, float):
        return _num(value, 9)
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if value is None or isinstance(value, (bool, int, str)):
        return value
    return str(value)


def dumps(obj: Any) -> str:
    """Compact JSON with non-finite numbers as null.

    Payloads built by this module are clean already and go straight to the
    C encoder; anything else is cleaned first."""
    try:
        return json.dumps(obj, separators=(",", ":"), allow_nan=False)
    except (TypeError, ValueError):
        return json.dumps(_plain(obj), separators=(",", ":"), allow_nan=False)


def state_payload(state: LiveState) -> dict[str, Any]:
    """The state as the page reads it (SI units; stale flags kept)."""
    out = _plain(state.to_dict())
    out["speed_kmh"] = _num(state.speed_mps * 3.6) if state.speed_mps is not None else None
    return out


def notice_payload(notice: Notice) -> dict[str, Any]:
    return {"t_s": _num(notice.t_s, 9), "kind": notice.kind, "text": notice.text,
            "data": _plain(notice.data)}


def state_point(state: LiveState) -> list[float | None]:
    """One chart point (see :data:`POINT_FIELDS`); stale speed and power are left out."""
    return [
        _num(state.t_s, 9),
        _num(state.distance_m, 7),
        None if state.speed_stale else _num(state.speed_mps),
        None if state.power_stale else _num(state.power_w),
        _num(state.target_power_w),
        _num(state.planned_speed_mps),
        _num(state.cda_m2),
        _num(state.cda_sd_m2),
        _num(state.crr),
        _num(state.crr_sd),
    ]


def plan_payload(plan: Any, max_points: int = 1500) -> dict[str, Any] | None:
    """The plan's ``distance_m``, ``speed_mps``, ``power_w`` arrays (thinned to at
    most ``max_points``, keeping the last point), plus the trap speed if it has one."""
    if plan is None:
        return None
    d = [float(x) for x in plan.distance_m]
    v = [float(x) for x in plan.speed_mps]
    p = [float(x) for x in getattr(plan, "power_w", [math.nan] * len(d))]
    n = len(d)
    if n and (len(v) != n or len(p) != n):
        raise ValueError(f"plan arrays differ in length: distance {n}, speed {len(v)}, power {len(p)}")
    step = max(1, math.ceil(n / max_points))
    idx = list(range(0, n, step))
    if n and idx[-1] != n - 1:
        idx.append(n - 1)
    out: dict[str, Any] = {
        "distance_m": [_num(d[i], 7) for i in idx],
        "speed_mps": [_num(v[i]) for i in idx],
        "power_w": [_num(p[i]) for i in idx],
    }
    for name in ("trap_speed_mps", "trap_entry_m", "trap_exit_m"):
        try:
            out[name] = _num(getattr(plan, name, None))
        except Exception:  # a plan property that cannot be computed is simply left out
            out[name] = None
    return out


def ride_payload(ride: Any) -> dict[str, Any]:
    """What the page's header and chart axes need from the ride file."""
    if ride is None:
        return {}
    course = ride.course
    return {
        "vehicle": ride.vehicle.name,
        "rider": ride.rider.name,
        "course": course.name,
        "runup_m": course.runup_m,
        "trap_m": course.trap_m,
        "trap_entry_m": course.trap_entry_m,
        "trap_exit_m": course.trap_exit_m,
        "cp_w": ride.rider.cp_w,
        "w_prime_j": ride.rider.w_prime_j,
        "prior_cda_m2": ride.vehicle.cda_m2,
        "prior_crr": ride.vehicle.crr,
    }


class CrewFeed:
    """Newest state, chart history and notice log with per-reader cursors.

    Points and notices are kept as their JSON text (made once, when they
    arrive), so a page's first message with the whole history is a string
    join, not thousands of float conversions on the live loop.
    """

    def __init__(self, point_every_s: float = 0.5, max_points: int = 4000,
                 max_notices: int = 200) -> None:
        self.point_every_s = point_every_s
        self.state: LiveState | None = None
        self.version = 0
        self._points: collections.deque[str] = collections.deque(maxlen=max_points)
        self._points_end = 0
        self._notices: collections.deque[str] = collections.deque(maxlen=max_notices)
        self._notices_end = 0
        self._next_point_t_s = -math.inf
        self._state_payload: dict[str, Any] | None = None
        self._state_version = -1

    def add_state(self, state: LiveState) -> None:
        """Take a state (O(1)); a chart point is kept every ``point_every_s`` of module time."""
        self.state = state
        self.version += 1
        t = state.t_s
        if t >= self._next_point_t_s or t < self._next_point_t_s - 10 * self.point_every_s:
            self._points.append(dumps(state_point(state)))
            self._points_end += 1
            self._next_point_t_s = t + self.point_every_s

    def add_notice(self, notice: Notice) -> None:
        self._notices.append(dumps(notice_payload(notice)))
        self._notices_end += 1
        self.version += 1

    @property
    def cursor(self) -> tuple[int, int]:
        """(points seen, notices seen) after everything so far."""
        return self._points_end, self._notices_end

    def state_payload(self) -> dict[str, Any] | None:
        """The newest state's payload (computed once per state)."""
        if self.state is None:
            return None
        if self._state_version != self.version or self._state_payload is None:
            self._state_payload = state_payload(self.state)
            self._state_version = self.version
        return self._state_payload

    @staticmethod
    def _since(ring: collections.deque, end: int, seen: int) -> list[str]:
        start = end - len(ring)
        k = max(seen, start) - start
        if k >= len(ring):
            return []
        return list(itertools.islice(ring, k, None))

    def _message(self, head: dict[str, Any], points: Any, notices: Any) -> str:
        text = dumps({**head, "state": self.state_payload()})
        return (text[:-1] + ',"points":[' + ",".join(points) + '],"notices":['
                + ",".join(notices) + "]}")

    def snapshot_json(self, head: dict[str, Any] | None = None) -> str:
        """JSON text of everything kept (newest state, all points and notices),
        with the keys of ``head`` added."""
        return self._message({**(head or {}), "fields": list(POINT_FIELDS)}, self._points,
                             self._notices)

    def delta_json(self, cursor: tuple[int, int],
                   head: dict[str, Any] | None = None) -> tuple[str, tuple[int, int]]:
        """JSON text of what a reader at ``cursor`` has not seen, and its new cursor."""
        seen_points, seen_notices = cursor
        text = self._message(head or {}, self._since(self._points, self._points_end, seen_points),
                             self._since(self._notices, self._notices_end, seen_notices))
        return text, self.cursor

    def snapshot(self) -> dict[str, Any]:
        """:meth:`snapshot_json` as a dict."""
        return json.loads(self.snapshot_json())

    def delta(self, cursor: tuple[int, int]) -> tuple[dict[str, Any], tuple[int, int]]:
        """:meth:`delta_json` as a dict."""
        text, new = self.delta_json(cursor)
        return json.loads(text), new
