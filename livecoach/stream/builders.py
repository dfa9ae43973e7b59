"""Fast construction of the frozen records made once or more per event.

The records the pipeline hands out (samples, :class:`LiveState`, step
results, ...) are frozen slotted dataclasses, so sinks can never change what
the core computed. A frozen dataclass's generated ``__init__`` sets every
field through ``object.__setattr__`` (frozen classes forbid plain
assignment), which on CPython 3.11 costs about 0.3 µs per field on the
development machine: 10 µs for one :class:`LiveState`, the largest single
item of the replay cost per event (benchmarks/replay_throughput.py
``--stages``).

:func:`positional_builder` makes a callable that builds the *same* record
faster: an unfrozen slotted twin with the same fields in the same order is
filled by plain slot stores, then its ``__class__`` is set to the frozen
class (allowed by CPython because the two have the same slot layout). The
result is an ordinary instance of the frozen class: equal to, hashing and
printing like, and as immutable as one built by keyword. The builder takes
every field positionally, in declaration order, and has no defaults, so a
forgotten field is a ``TypeError`` at once rather than a silent default.
"""

from __future__ import annotations

import dataclasses
from typing import Any, Callable, TypeVar

T = TypeVar("T")


def positional_builder(cls: type[T]) -> Callable[..., T]:
    """A callable ``build(*values) -> cls`` taking every field of the frozen,
    slotted dataclass ``cls`` positionally, in declaration order."""
    params = getattr(cls, "__dataclass_params__", None)
    if params is None or not params.frozen or "__slots__" not in cls.__dict__:
        raise TypeError(f"{cls.__name__} is not a frozen slotted dataclass")
    fields = dataclasses.fields(cls)
    if tuple(cls.__dict__["__slots__"]) != tuple(f.name for f in fields):
        raise TypeError(f"{cls.__name__}: slots do not match its fields")

    def _become(self: Any) -> None:
        self.__class__ = cls

    draft = dataclasses.make_dataclass(
        f"_{cls.__name__}Draft",
        [(f.name, f.type) for f in fields],
        namespace={"__post_init__": _become},
        slots=True,
        eq=False,
        repr=False,
    )
    return draft
