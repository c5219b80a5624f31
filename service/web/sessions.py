"""Browser sessions for reviewers: a server-side row, a signed cookie naming it, a CSRF token.

The cookie holds `<session id>.<HMAC-SHA256 of the id>` under a secret kept in the
database (made on first use), so a forged or altered cookie is refused before any
look-up; the row makes sign-out and expiry final on the server side.
"""

from __future__ import annotations

import hashlib
import hmac
import secrets
from dataclasses import dataclass
from datetime import timedelta

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.store.clock import as_utc, database_now
from service.store.models import ApiKey, WebSecret, WebSession

COOKIE_NAME = "whichsense_review"
SIGN_IN_COOKIE = "whichsense_sign_in"
SESSION_SECONDS = 8 * 3600
MAX_SKIPPED = 500


@dataclass(frozen=True)
class Reviewer:
    """The signed-in reviewer behind a page request."""

    session_id: str
    key_id: str
    team_id: int
    scope: str
    csrf_token: str


def _secret(session: Session) -> bytes:
    row = session.scalars(select(WebSecret).order_by(WebSecret.id).limit(1)).first()
    if row is None:
        row = WebSecret(secret=secrets.token_hex(32))
        session.add(row)
        session.flush()
    return row.secret.encode()


def sign(session: Session, value: str) -> str:
    digest = hmac.new(_secret(session), value.encode(), hashlib.sha256).hexdigest()
    return f"{value}.{digest}"


def unsign(session: Session, signed: str) -> str | None:
    value, _, digest = signed.rpartition(".")
    if not value or not digest:
        return None
    expected = hmac.new(_secret(session), value.encode(), hashlib.sha256).hexdigest()
    return value if hmac.compare_digest(expected, digest) else None


def start_session(session: Session, key: ApiKey, team_id: int) -> tuple[str, WebSession]:
    """A new session for `key`; returns the cookie value and the row."""
    now = database_now(session)
    row = WebSession(
        id=secrets.token_hex(24),
        key_id=key.key_id,
        team_id=team_id,
        scope=key.scope,
        csrf_token=secrets.token_urlsafe(32),
        skipped=[],
        created_at=now,
        expires_at=now + timedelta(seconds=SESSION_SECONDS),
    )
    session.add(row)
    session.flush()
    return sign(session, row.id), row


def load_session(session: Session, cookie: str | None) -> Reviewer | None:
    """The live session the cookie names: signature right, not ended, not expired, key live."""
    if not cookie:
        return None
    session_id = unsign(session, cookie)
    if session_id is None:
        return None
    row = session.get(WebSession, session_id)
    if row is None or row.ended_at is not None:
        return None
    if as_utc(row.expires_at) <= database_now(session):
        return None
    key = session.scalars(select(ApiKey).where(ApiKey.key_id == row.key_id)).one_or_none()
    if key is None or key.revoked_at is not None:
        return None
    return Reviewer(row.id, row.key_id, row.team_id, row.scope, row.csrf_token)


def end_session(session: Session, session_id: str) -> None:
    row = session.get(WebSession, session_id)
    if row is not None and row.ended_at is None:
        row.ended_at = database_now(session)
        session.flush()


def skipped(session: Session, session_id: str) -> list[int]:
    row = session.get(WebSession, session_id)
    return [int(i) for i in (row.skipped or [])] if row else []


def remember_skip(session: Session, session_id: str, item_id: int) -> None:
    row = session.get(WebSession, session_id)
    if row is not None:
        row.skipped = [*(row.skipped or [])[-(MAX_SKIPPED - 1) :], item_id]
        session.flush()


def forget_skips(session: Session, session_id: str) -> None:
    row = session.get(WebSession, session_id)
    if row is not None:
        row.skipped = []
        session.flush()


def csrf_ok(reviewer: Reviewer, submitted: str | None) -> bool:
    return bool(submitted) and hmac.compare_digest(reviewer.csrf_token, submitted or "")
