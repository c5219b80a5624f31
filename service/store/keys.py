"""API keys: `ws_<key id>_<secret>`, only a SHA-256 of the secret is stored.

The secret has 256 bits of entropy, so a plain hash (no slow KDF) suffices and
keeps per-request checks cheap. Scopes nest: admin > review, admin > ingest.
"""

from __future__ import annotations

import hashlib
import hmac
import secrets
from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.store.audit import record_audit
from service.store.errors import NotFound
from service.store.models import ApiKey, utcnow
from service.store.scopes import SCOPES, Scope

PREFIX = "ws"


@dataclass(frozen=True)
class IssuedKey:
    """What the creator sees once: the full token and the webhook signing secret."""

    key_id: str
    token: str
    scope: Scope
    signing_secret: str
    team_id: int


def _hash(secret: str) -> str:
    return hashlib.sha256(secret.encode("utf-8", "surrogatepass")).hexdigest()


def grants(held: str, needed: Scope) -> bool:
    """Whether a key of scope `held` may call a route that needs `needed`."""
    return held == needed or held == "admin"


def create_key(session: Session, team_id: int, scope: Scope, label: str = "") -> IssuedKey:
    """A new key of `team_id` (an operator action: no HTTP route calls this); audited."""
    if scope not in SCOPES:
        raise ValueError(f"scope must be one of {', '.join(SCOPES)}")
    key_id = secrets.token_hex(6)
    secret = secrets.token_urlsafe(32)
    signing_secret = secrets.token_hex(32)
    session.add(
        ApiKey(
            key_id=key_id,
            team_id=team_id,
            secret_hash=_hash(secret),
            scope=scope,
            label=label,
            signing_secret=signing_secret,
        )
    )
    session.flush()
    record_audit(session, team_id, None, "key.create", key_id, {"scope": scope, "label": label})
    return IssuedKey(key_id, f"{PREFIX}_{key_id}_{secret}", scope, signing_secret, team_id)


def authenticate(session: Session, token: str) -> ApiKey | None:
    """The live key for `token`, or None if it is malformed, unknown or revoked."""
    parts = token.split("_", 2)
    if len(parts) != 3 or parts[0] != PREFIX:
        return None
    key = session.scalars(select(ApiKey).where(ApiKey.key_id == parts[1])).one_or_none()
    if key is None or key.revoked_at is not None:
        return None
    if not hmac.compare_digest(key.secret_hash, _hash(parts[2])):
        return None
    return key


def list_keys(session: Session, team_id: int | None = None) -> list[ApiKey]:
    """Keys of one team, or of every team (the operator's view) when `team_id` is None."""
    query = select(ApiKey)
    if team_id is not None:
        query = query.where(ApiKey.team_id == team_id)
    return list(session.scalars(query.order_by(ApiKey.created_at, ApiKey.id)))


def rotate_signing_secret(session: Session, key_id: str) -> str:
    """Give a live key a new webhook signing secret; the old one stops signing at once."""
    key = session.scalars(select(ApiKey).where(ApiKey.key_id == key_id)).one_or_none()
    if key is None or key.revoked_at is not None:
        raise NotFound(f"API key '{key_id}' does not exist or is revoked")
    key.signing_secret = secrets.token_hex(32)
    session.flush()
    return key.signing_secret


def revoke_key(session: Session, key_id: str, *, team_id: int | None = None) -> ApiKey:
    """Revoke a key (of `team_id` only, when given); audited in the key's team."""
    query = select(ApiKey).where(ApiKey.key_id == key_id)
    if team_id is not None:
        query = query.where(ApiKey.team_id == team_id)
    key = session.scalars(query).one_or_none()
    if key is None:
        raise NotFound(f"API key '{key_id}' does not exist")
    if key.revoked_at is None:
        key.revoked_at = utcnow()
        record_audit(session, key.team_id, None, "key.revoke", key_id, {"scope": key.scope})
    return key
