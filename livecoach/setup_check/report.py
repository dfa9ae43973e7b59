"""The go/no-go table as text (for a terminal or a log) and as a JSON-able dict."""

from __future__ import annotations

import textwrap
from typing import Iterable

from livecoach.setup_check.result import GO, NO_GO, SKIP, WARN, CheckResult, is_go

_MARK = {GO: "GO", NO_GO: "NO-GO", WARN: "WARN", SKIP: "skip"}


def verdict_text(results: list[CheckResult]) -> str:
    """``GO`` or ``NO-GO: n problems`` (and the number of warnings)."""
    bad = sum(r.status == NO_GO for r in results)
    warn = sum(r.status == WARN for r in results)
    tail = f", {warn} warning{'s' if warn != 1 else ''}" if warn else ""
    if is_go(results):
        return f"GO{tail}"
    return f"NO-GO: {bad} problem{'s' if bad != 1 else ''}{tail}"


def format_table(results: Iterable[CheckResult], width: int = 100) -> str:
    """A fixed-width table: status, check, what was found; hints indented below."""
    results = list(results)
    name_w = min(max((len(r.name) for r in results), default=10), 42)
    lines = [f"{'STATUS':<6}  {'CHECK':<{name_w}}  FOUND", "-" * min(width, 6 + 2 + name_w + 2 + 40)]
    detail_w = max(20, width - 6 - 2 - name_w - 2)
    for r in results:
        name = r.name if len(r.name) <= name_w else r.name[: name_w - 1] + "~"
        detail = textwrap.wrap(r.detail, detail_w) or [""]
        lines.append(f"{_MARK[r.status]:<6}  {name:<{name_w}}  {detail[0]}")
        for more in detail[1:]:
            lines.append(f"{'':<6}  {'':<{name_w}}  {more}")
        if r.hint and r.status in (NO_GO, WARN):
            for i, h in enumerate(textwrap.wrap(r.hint, detail_w - 3)):
                lines.append(f"{'':<6}  {'':<{name_w}}  {'-> ' if i == 0 else '   '}{h}")
    lines.append("")
    lines.append(verdict_text(results))
    return "\n".join(lines)


def to_json(results: list[CheckResult]) -> dict:
    """``{"go": bool, "verdict": str, "checks": [{name, status, detail, hint}, ...]}``."""
    return {
        "go": is_go(results),
        "verdict": verdict_text(results),
        "checks": [r.to_dict() for r in results],
    }
