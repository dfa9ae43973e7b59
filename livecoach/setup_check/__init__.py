"""The pre-run go/no-go check (``livecoach check``) and the board installer's pieces.

Facts are gathered by thin probes (:mod:`.probes`, :mod:`.listen`); the
checks (:mod:`.checks`, :mod:`.sensor_checks`) are pure functions of them.
"""

from livecoach.setup_check.result import GO, NO_GO, SKIP, WARN, CheckResult, is_go

__all__ = ["GO", "NO_GO", "SKIP", "WARN", "CheckResult", "is_go"]
