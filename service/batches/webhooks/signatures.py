"""Webhook signatures: `Whichsense-Signature: t=<unix seconds>,v1=<hex>`.

v1 is HMAC-SHA256, keyed with the submitting API key's signing secret, over
`<t>.<raw body>`. Signing the timestamp lets a receiver refuse replays older
than its tolerance; the scheme tag lets a future scheme be added alongside.
"""

from __future__ import annotations

import hashlib
import hmac

SIGNATURE_HEADER = "Whichsense-Signature"


def sign(secret: str, timestamp: int, body: bytes) -> str:
    """The header value for `body` sent at `timestamp`."""
    message = str(timestamp).encode("ascii") + b"." + body
    digest = hmac.new(secret.encode("utf-8"), message, hashlib.sha256).hexdigest()
    return f"t={timestamp},v1={digest}"


def verify(secret: str, header: str, body: bytes, *, now: int, tolerance: int = 300) -> bool:
    """Whether `header` signs `body` with `secret` and its time is within `tolerance` of `now`."""
    values: dict[str, list[str]] = {}
    for item in header.split(","):
        key, _, value = item.strip().partition("=")
        values.setdefault(key, []).append(value)
    try:
        timestamp = int(values["t"][0])
    except (KeyError, ValueError):
        return False
    if abs(now - timestamp) > tolerance:
        return False
    expected = sign(secret, timestamp, body).split("v1=", 1)[1]
    return any(hmac.compare_digest(expected, given) for given in values.get("v1", []))
