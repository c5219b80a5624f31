"""Request bodies: bounded and checked before anything decodes them, decoded alike everywhere.

`BodyGuard` (ASGI middleware) is the one gate every request passes: a body needs a
Content-Type the route declares (else 415), a JSON body may nest at most
`max_json_depth` levels (checked on the raw text, so the decoder never recurses
deeply), and no string anywhere (JSON, path, query) may carry a NUL character,
which PostgreSQL refuses and SQLite would store: both backends see the same
refusal before the database is touched. NDJSON lines go through `loads` with
the same checks, one line at a time.
"""

from __future__ import annotations

import json
import re
from itertools import accumulate
from typing import Any

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.api import contract
from service.api.problems import ProblemError, problem_response

# A JSON string literal (unrolled loop: fast on long texts, no catastrophic backtracking).
_STRING = re.compile(r'"[^"\\]*(?:\\.[^"\\]*)*"', re.DOTALL)
_BRACKET = re.compile(r"[\[\]{}]")
# \u0000 escaped in a JSON string, not preceded by an escaped backslash.
_NUL_ESCAPE = re.compile(r"(?<!\\)(?:\\\\)*\\u0000")
_DEPTH_STEP = {"[": 1, "{": 1, "]": -1, "}": -1}
JSON_BODY_METHODS = frozenset({"POST", "PUT", "PATCH"})
# Other names in use for NDJSON; a route declaring application/x-ndjson takes them too.
_NDJSON_ALIASES = frozenset({"application/jsonl", "application/json-lines"})


def decode_utf8(raw: bytes | bytearray) -> str:
    """`raw` as text; 400 naming the first bad byte if it is not UTF-8."""
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ProblemError(
            400, f"the body is not UTF-8 (byte {exc.start})", kind="bad-encoding"
        ) from None


def json_depth(text: str) -> int:
    """How deep arrays and objects nest in JSON `text` (brackets inside strings ignored)."""
    brackets = _BRACKET.findall(_STRING.sub("", text))
    return max(accumulate(_DEPTH_STEP[b] for b in brackets), default=0)


def refuse_nul(value: str, where: str) -> None:
    """422 if `value` holds a NUL character (PostgreSQL text cannot store one)."""
    if "\x00" in value:
        raise ProblemError(
            422, f"{where} contains a NUL character (U+0000), which no text field may hold",
            kind="nul-character",
        )


def check_json_text(text: str, *, max_depth: int, where: str = "the body") -> None:
    """Refuse JSON text nesting deeper than `max_depth` or escaping a NUL, before decoding."""
    depth = json_depth(text)
    if depth > max_depth:
        raise ProblemError(
            413,
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
        raise ProblemError(422, f"the number {literal[:40]} is out of range", kind="out-of-range")
    return value


def _no_constant(literal: str) -> float:
    raise ProblemError(422, f"{literal} is not a JSON number", kind="out-of-range")


def loads(text: str, *, max_depth: int | None = None, where: str = "the body") -> Any:
    """Decode JSON `text` strictly: no NaN/Infinity, no number that overflows a double.

    With `max_depth`, depth and NUL are checked first (NDJSON lines, which the
    middleware does not buffer); raises json.JSONDecodeError for malformed text.
    """
    if max_depth is not None:
        check_json_text(text, max_depth=max_depth, where=where)
    return json.loads(text, parse_float=_finite, parse_constant=_no_constant)


def decode_json_object(raw: bytes | bytearray, expected: str) -> dict[str, Any]:
    """`raw` as a JSON object; 400 for bad UTF-8 or JSON, 422 if it is not an object.

    `expected` completes "the body must be ..." in the 422 detail. Depth and NUL
    were checked by `BodyGuard` before the route ran.
    """
    text = decode_utf8(raw)
    try:
        data = loads(text)
    except json.JSONDecodeError as exc:
        raise ProblemError(
            400,
            f"the body is not valid JSON: {exc.msg} at line {exc.lineno} column {exc.colno}",
            kind="malformed-json",
        ) from None
    if not isinstance(data, dict):
        raise ProblemError(422, f"the body must be {expected}")
    return data


def media_type(value: str | None) -> str:
    """The bare media type of a Content-Type value, lower case ('' when absent)."""
    return (value or "").split(";")[0].strip().lower()


def _is_json(media: str) -> bool:
    return media == "application/json" or media.endswith("+json")


class BodyGuard:
    """ASGI middleware: Content-Type, JSON depth and NUL checks ahead of every route."""

    def __init__(self, app: ASGIApp, max_json_depth: int):
        self.app = app
        self.max_json_depth = max_json_depth

    @staticmethod
    def _declared_media(scope: Scope) -> frozenset[str]:
        """Media types the documented operation takes a body in (empty: none, or no route)."""
        operation = contract.find(scope["app"], scope["method"], scope.get("path", ""))
        return frozenset() if operation is None else operation.body_media

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        try:
            self._check_target(scope)
            receive = await self._checked_body(scope, receive)
        except ProblemError as exc:
            response = problem_response(
                None, exc.status, exc.detail, kind=exc.kind, **exc.extra,
                instance=scope.get("path", ""),
            )
            await response(scope, receive, send)
            return
        await self.app(scope, receive, send)

    def _check_target(self, scope: Scope) -> None:
        if "\x00" in scope.get("path", ""):
            raise ProblemError(404, "no resource has a NUL character (U+0000) in its path")
        query: bytes = scope.get("query_string", b"")
        if b"%00" in query or b"\x00" in query:
            refuse_nul("\x00", "the query string")

    async def _checked_body(self, scope: Scope, receive: Receive) -> Receive:
        if scope["method"] not in JSON_BODY_METHODS:
            return receive
        headers = dict(scope["headers"])
        length = headers.get(b"content-length")
        if length is not None and length.strip() == b"0":
            return receive
        if length is None and b"transfer-encoding" not in headers:
            return receive
        media = media_type(headers.get(b"content-type", b"").decode("latin-1"))
        accepted = self._declared_media(scope)
        if not accepted:  # no route (404/405 follow) or a route without a body
            return receive
        if not media:
            raise ProblemError(
                415,
                f"the body has no Content-Type; send one of {', '.join(sorted(accepted))}",
                accepted=sorted(accepted),
            )
        if media in _NDJSON_ALIASES and "application/x-ndjson" in accepted:
            return receive
        if media not in accepted and not (_is_json(media) and "application/json" in accepted):
            raise ProblemError(
                415,
                f"send {' or '.join(sorted(accepted))}, not {media}",
                accepted=sorted(accepted),
            )
        if not _is_json(media):
            return receive  # CSV and NDJSON are checked as they are read
        body = bytearray()
        while True:
            message = await receive()
            if message["type"] != "http.request":
                break
            body += message.get("body", b"")
            if not message.get("more_body", False):
                break
        try:
            text = body.decode("utf-8")
        except UnicodeDecodeError:
            text = None  # the route answers 400 naming the byte
        if text is not None:
            check_json_text(text, max_depth=self.max_json_depth)
        replayed = False

        async def replay() -> Message:
            nonlocal replayed
            if not replayed:
                replayed = True
                return {"type": "http.request", "body": bytes(body), "more_body": False}
            return await receive()

        return replay
