"""JSON text checked before it is decoded: nesting depth, NUL characters, number range.

Every JSON input (request bodies, NDJSON lines, labeled files) goes through
`loads`, so the decoder never recurses deeply and both databases see the same
refusals: PostgreSQL cannot store a NUL character that SQLite would take, and a
number that overflows a double has no honest value. Refusals are `Refused`
(too_large for depth, invalid for NUL and range); the API maps them to statuses.
"""

from __future__ import annotations

import json
import re
from itertools import accumulate
from typing import Any

from service.refusal import Refused

# A JSON string literal (unrolled loop: fast on long texts, no catastrophic backtracking).
_STRING = re.compile(r'"[^"\\]*(?:\\.[^"\\]*)*"', re.DOTALL)
_BRACKET = re.compile(r"[\[\]{}]")
# \u0000 escaped in a JSON string, not preceded by an escaped backslash.
_NUL_ESCAPE = re.compile(r"(?<!\\)(?:\\\\)*\\u0000")
_DEPTH_STEP = {"[": 1, "{": 1, "]": -1, "}": -1}


def json_depth(text: str) -> int:
    """How deep arrays and objects nest in JSON `text` (brackets inside strings ignored)."""
    brackets = _BRACKET.findall(_STRING.sub("", text))
    return max(accumulate(_DEPTH_STEP[b] for b in brackets), default=0)


def refuse_nul(value: str, where: str) -> None:
    """Refused (invalid) if `value` holds a NUL character (PostgreSQL text cannot store one)."""
    if "\x00" in value:
        raise Refused(
            "invalid",
            f"{where} contains a NUL character (U+0000), which no text field may hold",
            kind="nul-character",
        )


def check_json_text(text: str, *, max_depth: int, where: str = "the body") -> None:
    """Refuse JSON text nesting deeper than `max_depth` or escaping a NUL, before decoding."""
    depth = json_depth(text)
    if depth > max_depth:
        raise Refused(
            "too_large",
            f"{where} nests JSON {depth} levels deep; the limit is {max_depth} "
            "(WHICHSENSE_MAX_JSON_DEPTH)",
            kind="too-deep",
            limit="max_json_depth",
        )
    if _NUL_ESCAPE.search(text):
        refuse_nul("\x00", where)


def _finite(literal: str) -> float:
    value = float(literal)
    if value in (float("inf"), float("-inf")):
        raise Refused("invalid", f"the number {literal[:40]} is out of range", kind="out-of-range")
    return value


def _no_constant(literal: str) -> float:
    raise Refused("invalid", f"{literal} is not a JSON number", kind="out-of-range")


def loads(text: str, *, max_depth: int | None = None, where: str = "the body") -> Any:
    """Decode JSON `text` strictly: no NaN/Infinity, no number that overflows a double.

    With `max_depth`, depth and NUL are checked first (NDJSON lines, which the
    request guard does not buffer); raises json.JSONDecodeError for malformed text.
    """
    if max_depth is not None:
        check_json_text(text, max_depth=max_depth, where=where)
    return json.loads(text, parse_float=_finite, parse_constant=_no_constant)
