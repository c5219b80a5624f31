"""Repository errors that the HTTP layer turns into problem documents."""

from __future__ import annotations


class NotFound(LookupError):
    """The named thing does not exist (404)."""


class Conflict(RuntimeError):
    """The request clashes with what is stored (409)."""
