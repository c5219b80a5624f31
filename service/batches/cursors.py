"""Opaque pagination cursors: keyset positions, never offsets, so pages stay stable
while workers keep appending results."""

from __future__ import annotations

import base64
import json
from datetime import UTC, datetime, timedelta

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_MICROSECOND = timedelta(microseconds=1)


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


def encode_listing_cursor(created_at: datetime, batch_id: str) -> str:
    """A batch listing position: creation time to the microsecond, then the id (24 hex
    digits, as two integers), with no float rounding on the way."""
    moment = created_at if created_at.tzinfo else created_at.replace(tzinfo=UTC)
    micros = (moment - _EPOCH) // _MICROSECOND
    return encode_cursor(micros, int(batch_id[:12], 16), int(batch_id[12:], 16))


def decode_listing_cursor(cursor: str) -> tuple[datetime, str]:
    micros, high, low = decode_cursor(cursor, 3)
    if high >= 16**12 or low >= 16**12:
        raise CursorInvalid("the cursor is not one this service issued")
    try:
        moment = _EPOCH + micros * _MICROSECOND
    except OverflowError:
        raise CursorInvalid("the cursor is not one this service issued") from None
    return moment, f"{high:012x}{low:012x}"
