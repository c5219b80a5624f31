"""Delivering a batch's completion notice to its callback URL.

The URL is checked again right before the POST (scheme, and every address the
host now resolves to), and the connection goes to the address that passed,
with the original host in the Host header and in TLS SNI/verification, so a
DNS answer cannot change between the check and the connection. Redirects are
not followed. Any 2xx is success; anything else is retried with backoff.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass

import httpx
from sqlalchemy.orm import Session, sessionmaker

from service import __version__
from service.batches.webhooks.deliveries import (
    DueWebhook,
    claim_due_webhook,
    record_webhook_attempt,
    webhook_due,
)
from service.batches.webhooks.signatures import signature_headers
from service.batches.webhooks.urls import WebhookUrlRefused, check_url
from service.store.database import read_only


@dataclass(frozen=True)
class WebhookPolicy:
    """How often and how patiently to deliver: backoff base * 2^(attempt-1), capped."""

    max_attempts: int = 8
    base_seconds: float = 10.0
    max_seconds: float = 3600.0

    def retry_in(self, attempt: int) -> float | None:
        if attempt >= self.max_attempts:
            return None
        return min(self.max_seconds, self.base_seconds * 2 ** max(0, attempt - 1))


@dataclass(frozen=True)
class DeliveryResult:
    delivered: bool
    status_code: int | None
    error: str | None
    permanent: bool
    duration_seconds: float


def encode_body(due: DueWebhook) -> bytes:
    return json.dumps(due.body, separators=(",", ":"), sort_keys=True).encode("utf-8")


def deliver(
    due: DueWebhook,
    *,
    allow_private: bool,
    timeout: float,
    client: httpx.Client | None = None,
) -> DeliveryResult:
    """POST the signed body once; never raises for network or policy problems."""
    started = time.perf_counter()

    def result(
        delivered: bool, status: int | None, error: str | None, permanent: bool = False
    ) -> DeliveryResult:
        return DeliveryResult(delivered, status, error, permanent, time.perf_counter() - started)

    try:
        checked = check_url(due.url, allow_private=allow_private)
    except WebhookUrlRefused as exc:
        return result(False, None, f"refused: {exc}", permanent=not exc.transient)
    body = encode_body(due)
    address = checked.addresses[0]
    url = httpx.URL(due.url)
    default_port = 443 if url.scheme == "https" else 80
    host_header = checked.host if checked.port == default_port else f"{checked.host}:{checked.port}"
    if ":" in checked.host and not checked.host.startswith("["):
        host_header = f"[{checked.host}]" + (
            "" if checked.port == default_port else f":{checked.port}"
        )
    headers = {
        "Host": host_header,
        "Content-Type": "application/json",
        "User-Agent": f"whichsense-webhook/{__version__}",
        "Whichsense-Event": "batch.finished",
        "Whichsense-Batch": due.batch_id,
        "Whichsense-Attempt": str(due.attempt),
        **signature_headers(
            secret=due.signing_secret,
            key_id=due.key_id,
            url=due.url,
            body=body,
            created=int(time.time()),
        ),
    }
    extensions = {"sni_hostname": checked.host} if url.scheme == "https" else {}
    owned = client is None
    http = client or httpx.Client(follow_redirects=False, trust_env=False)
    try:
        response = http.post(
            url.copy_with(host=str(address)),
            content=body,
            headers=headers,
            extensions=extensions,
            timeout=timeout,
        )
    except httpx.HTTPError as exc:
        return result(False, None, f"{type(exc).__name__}: {exc}"[:2000])
    finally:
        if owned:
            http.close()
    if 200 <= response.status_code < 300:
        return result(True, response.status_code, None)
    return result(False, response.status_code, f"the receiver answered {response.status_code}")


def deliver_next(
    sessions: sessionmaker[Session],
    policy: WebhookPolicy,
    *,
    timeout: float,
    allow_private: bool,
) -> tuple[DueWebhook, str] | None:
    """Claim the oldest due delivery, POST it, record the attempt; the delivery and its
    outcome (delivered, retry, failed), or None when nothing is due (read first, so an
    empty queue takes no write lock)."""
    with read_only(sessions)() as session:
        due_now = webhook_due(session)
        session.rollback()
    if not due_now:
        return None
    with sessions.begin() as session:
        due = claim_due_webhook(session, claim_seconds=timeout * 3 + 5)
    if due is None:
        return None
    result = deliver(due, allow_private=allow_private, timeout=timeout)
    retry_in = None if result.permanent else policy.retry_in(due.attempt)
    with sessions.begin() as session:
        record_webhook_attempt(
            session,
            due,
            status_code=result.status_code,
            error=result.error,
            duration_seconds=result.duration_seconds,
            delivered=result.delivered,
            retry_in=retry_in,
        )
    return due, "delivered" if result.delivered else ("retry" if retry_in else "failed")
