"""What the batch wing refuses, without HTTP: the API maps each reason to a status."""

from __future__ import annotations

from typing import Any, Literal

Reason = Literal["malformed", "invalid", "too_large", "unsupported_media", "conflict"]


class Refused(Exception):
    """A submission or request the batch wing will not take; nothing was stored.

    `reason`: malformed (not UTF-8, JSON or NDJSON), invalid (well-formed but
    wrong), too_large (a size or count limit; `limit` names it), unsupported_media,
    conflict (clashes with what is stored, e.g. a reused Idempotency-Key).
    `kind` names the problem more finely; `extra` carries where it was found.
    """

    def __init__(self, reason: Reason, detail: str, *, kind: str | None = None, **extra: Any):
        super().__init__(detail)
        self.reason = reason
        self.detail = detail
        self.kind = kind
        self.extra = extra
