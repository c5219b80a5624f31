"""Bounds every backend can store, checked before a value reaches the database.

SQLite stores integers up to 2**63-1 and text with NUL characters; PostgreSQL's
`integer` stops at 2**31-1 and its text refuses NUL. Checking at the door with
the narrower bound makes the two backends answer alike (422/404, never a 5xx).
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Path, Query

DB_INT_MAX = 2**31 - 1  # PostgreSQL `integer`, the narrowest integer column we store

VersionNumber = Annotated[int, Path(ge=1, le=DB_INT_MAX, description="an inventory version")]
ExampleIndex = Annotated[int, Path(ge=0, le=DB_INT_MAX, description="position of the example")]
OptionalVersion = Annotated[
    int | None, Query(ge=1, le=DB_INT_MAX, description="a version (default: the current one)")
]
