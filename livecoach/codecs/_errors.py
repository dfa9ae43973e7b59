"""The one error type the codecs raise, with a short machine-readable kind.

:class:`PayloadError` is a :class:`livecoach.errors.DecodeError`, so callers
that only know the project's error tree catch it as usual; the decode layer
uses ``kind`` to count rejections by reason.
"""

from __future__ import annotations

from livecoach.errors import DecodeError

# Reason kinds (stable; used as keys of the decode layer's counters).
TRUNCATED = "truncated"
WRONG_LENGTH = "wrong length"
RESERVED_BITS = "reserved bits set"
BAD_CHECKSUM = "bad checksum"
NOT_UTF8 = "not UTF-8"
MALFORMED = "malformed"
OUT_OF_RANGE = "out of range"
UNSUPPORTED = "unsupported"


class PayloadError(DecodeError):
    """A payload could not be decoded; ``kind`` is one of the reason kinds above.

    The message reads ``"<kind>: <detail>"``.
    """

    def __init__(self, kind: str, detail: str) -> None:
        super().__init__(f"{kind}: {detail}")
        self.kind = kind
        self.detail = detail
