"""Webhook signatures: IETF HTTP Message Signatures (RFC 9421) with a Content-Digest (RFC 9530).

Each notice carries `Content-Digest: sha-256=:<base64>:` and a signature, labelled
`whichsense`, over `@method`, `@target-uri` and `content-digest`, with `created`,
`keyid` (the submitting API key's id), `alg="hmac-sha256"` and `tag`. The key is
that API key's signing secret (its UTF-8 bytes), RFC 9421's HMAC-SHA256
algorithm. Any RFC 9421 implementation verifies it; a receiver refuses stale
`created` times to resist replays. Signing is done by the `http-message-signatures`
library, so the signature base is built by a maintained implementation of the RFC.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import UTC, datetime

from http_message_signatures import HTTPMessageSigner, MappingKeyResolver
from http_message_signatures.algorithms import HMAC_SHA256

LABEL = "whichsense"
TAG = "whichsense-webhook"
COVERED_COMPONENTS = ("@method", "@target-uri", "content-digest")


@dataclass
class _Outgoing:
    """The request as the signing library sees it: method, URL, header fields."""

    method: str
    url: str
    headers: dict[str, str] = field(default_factory=dict)


def signature_headers(
    *, secret: str, key_id: str, url: str, body: bytes, created: int, method: str = "POST"
) -> dict[str, str]:
    """`Content-Digest`, `Signature-Input` and `Signature` for `body` sent to `url` at `created`.

    `url` is the callback URL as registered (the receiver's own view of its target URI).
    """
    message = _Outgoing(method, url)
    keys = MappingKeyResolver(public_keys={}, private_keys={key_id: secret.encode("utf-8")})
    HTTPMessageSigner(signature_algorithm=HMAC_SHA256, key_resolver=keys).sign(
        message,
        key_id=key_id,
        created=datetime.fromtimestamp(created, UTC),
        label=LABEL,
        tag=TAG,
        covered_component_ids=COVERED_COMPONENTS,
        body=body,
    )
    return message.headers
