"""Opaque pagination cursors: keyset positions, never offsets, so pages stay stable
while workers keep appending results."""

from __future__ import annotations

import base64
import json


class CursorInvalid(ValueError):
    pass


def encode_cursor(*position: int) -> str:
    raw = json.dumps(list(position), separators=(",", ":")).encode("ascii")
    return base64.urlsafe_b64encode(raw).decode("ascii").rstrip("=")


def decode_cursor(cursor: str, size: int) -> tuple[int, ...]:
    """The `size` integers inside `cursor`; CursorInvalid for anything else."""
    try:
        padded = cursor + "=" * (-len(cursor) % 4)
        values = json.loads(base64.urlsafe_b64decode(padded.encode("ascii")))
    except (ValueError, UnicodeError) as exc:
        raise CursorInvalid("the cursor is not one this service issued") from exc
    if (
        not isinstance(values, list)
        or len(values) != size
        or not all(
            isinstance(v, int) and not isinstance(v, bool) and 0 <= v < 2**63 for v in values
        )
    ):
        raise CursorInvalid("the cursor is not one this service issued")
    return tuple(values)
