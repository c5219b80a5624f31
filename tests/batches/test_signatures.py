"""Webhook signatures follow RFC 9421 (HTTP Message Signatures) and RFC 9530 (Content-Digest)."""

from __future__ import annotations

import base64
from dataclasses import dataclass, field

import pytest
from http_message_signatures import HTTPMessageVerifier, InvalidSignature, MappingKeyResolver
from http_message_signatures.algorithms import HMAC_SHA256

from service.batches.webhooks.signatures import signature_headers
from tests.batches import http_signatures as rfc

# RFC 9421 Appendix B.1.4 (the shared secret) and B.2.5 (HMAC-SHA256 example): the
# signature base and signature below are the RFC's published example.
RFC_SHARED_SECRET = base64.b64decode(
    "uzvJfB4u3N0Jy4T7NZ75MDVcr8zSTInedJtkgcu46YW4XByzNJjxBdtjUkdJPBtbmHhIDi6pcl8jsasjlTMtDQ=="
)
URL = "https://hooks.example.com/whichsense/batches?team=search"
BODY = b'{"batch_id":"b_1","event":"batch.finished","state":"done"}'


def test_checker_reproduces_rfc_9421_b_2_5():
    base = rfc.signature_base(
        [
            ("date", "Tue, 20 Apr 2021 02:07:55 GMT"),
            ("@authority", "example.com"),
            ("content-type", "application/json"),
        ],
        '("date" "@authority" "content-type");created=1618884473;keyid="test-shared-secret"',
    )
    assert (
        rfc.hmac_sha256(RFC_SHARED_SECRET, base) == "pxcQw6G3AjtMBQjwo8XzkZf/bws5LelbaMk5rGIGtE8="
    )


def test_content_digest_matches_rfc_9530_example():
    # RFC 9530 section 2 (and RFC 9421's examples): the digest of {"hello": "world"}.
    assert rfc.content_digest(b'{"hello": "world"}') == (
        "sha-256=:X48E9qOokqqrvdts8nOJRJN3OWDUoyWxBf7kbu9DBPE=:"
    )


def _signed(**changes) -> dict[str, str]:
    arguments = {"secret": "s3cret", "key_id": "a1b2c3", "url": URL, "body": BODY}
    arguments |= {"created": 1_765_000_000} | changes
    return {name.lower(): value for name, value in signature_headers(**arguments).items()}


def test_our_signature_verifies_with_the_independent_checker():
    headers = _signed()
    params = rfc.check(
        headers, method="POST", target_uri=URL, body=BODY, key=b"s3cret", label="whichsense"
    )
    assert params["covered"] == "@method @target-uri content-digest"
    assert (params["created"], params["keyid"], params["alg"]) == (
        "1765000000",
        "a1b2c3",
        "hmac-sha256",
    )
    with pytest.raises(AssertionError, match="Content-Digest"):
        rfc.check(
            headers,
            method="POST",
            target_uri=URL,
            body=BODY + b" ",
            key=b"s3cret",
            label="whichsense",
        )
    with pytest.raises(AssertionError, match="signature"):
        other = URL.replace("search", "ads")
        rfc.check(
            headers, method="POST", target_uri=other, body=BODY, key=b"s3cret", label="whichsense"
        )
    with pytest.raises(AssertionError, match="signature"):
        rfc.check(
            headers, method="POST", target_uri=URL, body=BODY, key=b"guess", label="whichsense"
        )


@dataclass
class Received:
    """What a receiver built on the library sees: method, URL, header fields."""

    method: str
    url: str
    headers: dict[str, str] = field(default_factory=dict)


def test_a_receiver_verifies_with_the_rfc_9421_library():
    headers = _signed()
    keys = MappingKeyResolver(public_keys={"a1b2c3": b"s3cret"}, private_keys={})
    verifier = HTTPMessageVerifier(signature_algorithm=HMAC_SHA256, key_resolver=keys)
    request = Received("POST", URL, {"Content-Type": "application/json", **headers})
    (result,) = verifier.verify(request, max_age=None, body=BODY)
    assert result.parameters["keyid"] == "a1b2c3" and result.body == BODY
    with pytest.raises(InvalidSignature):
        verifier.verify(request, max_age=None, body=BODY.replace(b"done", b"failed"))
    with pytest.raises(InvalidSignature):  # created long ago: a replay
        verifier.verify(Received("POST", URL, {**headers}), body=BODY)
