"""The outcome of one pre-run check, and the verdict over all of them."""

from __future__ import annotations

from dataclasses import dataclass

#: The check passed.
GO = "go"
#: The check failed: do not start a run.
NO_GO = "no-go"
#: Something to look at, but not a reason to stop (does not block go).
WARN = "warn"
#: Not applicable with this ride file (e.g. no BLE sensor configured).
SKIP = "skip"

STATUSES = (GO, WARN, SKIP, NO_GO)


@dataclass(frozen=True, slots=True)
class CheckResult:
    """One line of the go/no-go table.

    ``name``: what was checked; ``status``: one of GO, NO_GO, WARN, SKIP;
    ``detail``: what was found (numbers with units); ``hint``: what to do
    about a no-go or warning.
    """

    name: str
    status: str
    detail: str
    hint: str = ""

    def to_dict(self) -> dict[str, str]:
        return {"name": self.name, "status": self.status, "detail": self.detail, "hint": self.hint}


def is_go(results: tuple[CheckResult, ...] | list[CheckResult]) -> bool:
    """True when no check is no-go (and there is at least one check)."""
    return bool(results) and all(r.status != NO_GO for r in results)
