"""API key scopes: what a key may do. Kept apart from the key repository so that the
command line can offer them as choices without importing the database layer."""

from __future__ import annotations

from typing import Literal

Scope = Literal["ingest", "review", "admin"]
SCOPES: tuple[Scope, ...] = ("ingest", "review", "admin")
