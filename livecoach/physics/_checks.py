"""Input checks shared by the physics functions: no NaN, no infinity, no text.

Every physics function checks its inputs at the door so that a bad value
raises :class:`~livecoach.errors.PhysicsError` naming the argument, instead of
a NaN that flows on into estimates, plans and cues.
"""

from __future__ import annotations

import math

from livecoach.errors import PhysicsError


def finite(name: str, value: object) -> float:
    """``value`` as a float; :class:`PhysicsError` naming ``name`` unless it is a finite number.

    Accepts ints, floats and numpy scalars; rejects bools, text, None, NaN and +-inf.
    """
    kind = type(value)
    if (kind is float or kind is int) and math.isfinite(value):  # fast path
        return float(value)  # type: ignore[arg-type]
    if isinstance(value, (bool, str, bytes)) or value is None:
        raise PhysicsError(f"{name}={value!r} is not a number")
    try:
        x = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise PhysicsError(f"{name}={value!r} is not a number") from None
    if not math.isfinite(x):
        raise PhysicsError(f"{name}={value!r} is not a finite number")
    return x
