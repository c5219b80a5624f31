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
from typing import Any

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.api import contract
from service.api.problems import REFUSED_STATUS, ProblemError, problem_response
from service.json_text import check_json_text, loads, refuse_nul
from service.refusal import Refused

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
        except Refused as refused:
            response = problem_response(
                None, REFUSED_STATUS[refused.reason], refused.detail, kind=refused.kind,
                **refused.extra, instance=scope.get("path", ""),
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
