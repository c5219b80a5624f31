"""Decoding request bodies into JSON objects, with the same problem documents everywhere."""

from __future__ import annotations

import json
from typing import Any

from service.api.problems import ProblemError


def decode_utf8(raw: bytes | bytearray) -> str:
    """`raw` as text; 400 naming the first bad byte if it is not UTF-8."""
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ProblemError(
            400, f"the body is not UTF-8 (byte {exc.start})", kind="bad-encoding"
        ) from None


def decode_json_object(raw: bytes | bytearray, expected: str) -> dict[str, Any]:
    """`raw` as a JSON object; 400 for bad UTF-8 or JSON, 422 if it is not an object.

    `expected` completes "the body must be ..." in the 422 detail.
    """
    text = decode_utf8(raw)
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ProblemError(
            400,
            f"the body is not valid JSON: {exc.msg} at line {exc.lineno} column {exc.colno}",
            kind="malformed-json",
        ) from None
    if not isinstance(data, dict):
        raise ProblemError(422, f"the body must be {expected}")
    return data
