"""An independent RFC 9421 / RFC 9530 checker for the tests, standard library only.

Written from the RFCs' text, not from the signing code: the signature base
(RFC 9421 section 2.5), HMAC-SHA256 (section 3.3.3), Content-Digest (RFC 9530
section 2). `test_checker_reproduces_rfc_9421_b_2_5` proves it against the RFC's
own example before it is trusted with ours.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import re
from urllib.parse import urlsplit


def content_digest(body: bytes) -> str:
    """RFC 9530: a Structured Field Dictionary, sha-256 as a Byte Sequence."""
    return "sha-256=:" + base64.b64encode(hashlib.sha256(body).digest()).decode() + ":"


def signature_base(components: list[tuple[str, str]], signature_params: str) -> bytes:
    """RFC 9421 section 2.5: one `"name": value` line per component, then @signature-params."""
    lines = [f'"{name}": {value}' for name, value in components]
    lines.append(f'"@signature-params": {signature_params}')
    return "\n".join(lines).encode()


def hmac_sha256(key: bytes, base: bytes) -> str:
    """RFC 9421 section 3.3.3, serialised as a Byte Sequence (base64)."""
    return base64.b64encode(hmac.new(key, base, hashlib.sha256).digest()).decode()


def member(field_value: str, label: str) -> str:
    """The value of one Dictionary member (good enough for one label without commas)."""
    for item in field_value.split(", "):
        name, _, value = item.partition("=")
        if name == label:
            return value
    raise KeyError(label)


def check(
    headers: dict[str, str], *, method: str, target_uri: str, body: bytes, key: bytes, label: str
) -> dict[str, str]:
    """Raise AssertionError unless `headers` sign this request; returns the parameters."""
    assert headers["content-digest"] == content_digest(body), "Content-Digest does not match"
    params = member(headers["signature-input"], label)
    inner = re.fullmatch(r"\(([^)]*)\)(;.*)", params)
    assert inner is not None, params
    covered = re.findall(r'"([^"]+)"', inner.group(1))
    values = {
        "@method": method,
        "@target-uri": target_uri,
        "content-digest": headers["content-digest"],
    }
    base = signature_base([(name, values[name]) for name in covered], params)
    sent = member(headers["signature"], label)
    assert sent == f":{hmac_sha256(key, base)}:", "signature does not match"
    parsed = dict(re.findall(r';([a-z]+)=("[^"]*"|\d+)', inner.group(2)))
    return {name: value.strip('"') for name, value in parsed.items()} | {
        "covered": " ".join(covered),
        "authority": urlsplit(target_uri).netloc,
    }
