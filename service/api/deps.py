"""Dependencies the routers share: settings, a database session, the caller's key."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import dataclass

from fastapi import Request
from sqlalchemy.orm import Session

from service.api.problems import ProblemError
from service.config import Settings
from service.store.keys import Scope, authenticate, grants
from service.store.models import ApiKey

_CHALLENGE = {"WWW-Authenticate": "Bearer"}


def get_settings_dep(request: Request) -> Settings:
    return request.app.state.settings


def get_session(request: Request) -> Iterator[Session]:
    """A session per request; routes commit what they write, anything else rolls back.

    GET and HEAD only read: their session does not take SQLite's write lock.
    """
    reads = request.method in ("GET", "HEAD")
    session: Session = (request.app.state.read_sessions if reads else request.app.state.sessions)()
    try:
        yield session
    finally:
        session.rollback()
        session.close()


@dataclass(frozen=True)
class Caller:
    """The authenticated API key behind a request, and the team every store call is
    scoped to (another team's rows are invisible to it)."""

    key_id: str
    scope: str
    signing_secret: str
    team_id: int


def _look_up(request: Request, token: str) -> ApiKey | None:
    """The live key for `token`, read in a read-only session of its own.

    The lookup writes nothing, so on SQLite it must not take the one write lock: a
    POST would otherwise queue for that lock twice (here, then for its own writes).
    """
    with request.app.state.read_sessions() as session:
        return authenticate(session, token)  # closing detaches it, attributes loaded


def require_scope(needed: Scope | None) -> Callable[..., Caller]:
    """A dependency admitting keys that grant `needed` (any live key when None).

    No or unknown key is 401 (with a Bearer challenge); a live key of the wrong
    scope is 403, so a client can tell "who are you" from "not allowed".
    """

    def dependency(request: Request) -> Caller:
        scheme, _, token = request.headers.get("authorization", "").partition(" ")
        if scheme.lower() != "bearer" or not token.strip():
            raise ProblemError(
                401, "send an API key as 'Authorization: Bearer <key>'", headers=_CHALLENGE
            )
        key = _look_up(request, token.strip())
        if key is None:
            raise ProblemError(
                401,
                "no live key matches the one sent (mistyped, cut short or revoked?)",
                kind="unknown-api-key",
                headers=_CHALLENGE,
            )
        if needed is not None and not grants(key.scope, needed):
            raise ProblemError(
                403, f"this route needs scope '{needed}'; the key has scope '{key.scope}'"
            )
        return Caller(key.key_id, key.scope, key.signing_secret, key.team_id)

    return dependency


any_key = require_scope(None)
ingest_key = require_scope("ingest")
review_key = require_scope("review")
admin_key = require_scope("admin")
