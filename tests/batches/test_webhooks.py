"""Completion webhooks: signed with HMAC-SHA256, retried, visible in the status, and
never sent to link-local, metadata or (unless allowed) private addresses."""

from __future__ import annotations

import hashlib
import hmac
import json
import time

import pytest

from service.batches.webhooks.signatures import verify
from service.batches.webhooks.urls import WebhookUrlRefused, address_refusal, check_url
from tests.pipeline import documents
from tests.problem_details import assert_problem


def _check_signature(secret: str, header: str, body: bytes) -> int:
    """Verify `t=<unix>,v1=<hex>` with the standard library only; returns t."""
    parts = dict(item.split("=", 1) for item in header.split(","))
    timestamp = int(parts["t"])
    # HMAC-SHA256 (RFC 2104 with SHA-256, via Python's hmac module) over "<t>.<body>".
    expected = hmac.new(
        secret.encode(), f"{timestamp}.".encode() + body, hashlib.sha256
    ).hexdigest()
    assert hmac.compare_digest(expected, parts["v1"])
    return timestamp


def test_completion_webhook_is_signed_and_retried(make_pipeline, receiver):
    pipe = make_pipeline(allow_private_webhooks=True)
    receiver.answers = [500]  # the first delivery fails, the retry succeeds
    batch = pipe.submit(documents(3), callback_url=receiver.url)
    assert batch["webhook"] == {"url": receiver.url, "state": "none", "attempts": []}
    worker = pipe.worker()
    worker.run_until_idle()
    assert receiver.requests.qsize() == 2
    secret = pipe.signing_secret("ingest")
    for attempt in (1, 2):
        headers, body = receiver.requests.get_nowait()
        timestamp = _check_signature(secret, headers["whichsense-signature"], body)
        assert abs(timestamp - time.time()) < 120
        assert headers["content-type"] == "application/json"
        assert headers["whichsense-attempt"] == str(attempt)
        assert headers["host"] == receiver.url.split("/")[2]
        payload = json.loads(body)
        assert payload["batch_id"] == batch["id"] and payload["state"] == "done"
        assert payload["counts"]["processed_documents"] == 3
        assert payload["results_url"] == f"http://testserver/v1/batches/{batch['id']}/results"
    webhook = pipe.status(batch["id"])["webhook"]
    assert webhook["state"] == "delivered"
    assert [a["status_code"] for a in webhook["attempts"]] == [500, 200]
    assert "500" in webhook["attempts"][0]["error"] and webhook["attempts"][1]["error"] is None
    tampered = body.replace(b'"done"', b'"failed"')
    with pytest.raises(AssertionError):
        _check_signature(secret, headers["whichsense-signature"], tampered)
    signature = headers["whichsense-signature"]
    assert verify(secret, signature, body, now=timestamp)  # the helper receivers may use
    assert not verify(secret, signature, tampered, now=timestamp)
    assert not verify(secret, signature, body, now=timestamp + 3600)  # too old: a replay


def test_webhook_gives_up_after_its_attempts(make_pipeline, receiver):
    pipe = make_pipeline(allow_private_webhooks=True)
    receiver.answers = [503, 503, 503, 503]
    batch = pipe.submit(documents(1), callback_url=receiver.url)
    pipe.worker().run_until_idle()  # the test policy allows 3 attempts
    webhook = pipe.status(batch["id"])["webhook"]
    assert webhook["state"] == "failed"
    assert [a["attempt"] for a in webhook["attempts"]] == [1, 2, 3]
    assert receiver.requests.qsize() == 3


def test_cancellation_is_notified_too(make_pipeline, receiver):
    pipe = make_pipeline(allow_private_webhooks=True)
    batch = pipe.submit(documents(2), callback_url=receiver.url)
    pipe.client.delete(f"/v1/batches/{batch['id']}", headers=pipe.ingest)
    pipe.worker().run_until_idle()
    _, body = receiver.requests.get_nowait()
    assert json.loads(body)["state"] == "cancelled"


@pytest.mark.parametrize(
    ("url", "words"),
    [
        ("http://169.254.169.254/latest/meta-data", "metadata"),
        ("http://[fd00:ec2::254]/hook", "metadata"),
        ("http://169.254.10.1/hook", "link-local"),
        ("http://[fe80::1]/hook", "link-local"),
        ("http://[::ffff:169.254.169.254]/hook", "metadata"),
        ("http://[2002:a9fe:a9fe::1]/hook", "metadata"),  # 6to4 wrapping of the metadata IP
        ("http://[2002:7f00:1::1]/hook", "loopback"),  # 6to4 wrapping of 127.0.0.1
        ("ftp://example.com/hook", "http or https"),
        ("file:///etc/passwd", "http or https"),
        ("http://127.0.0.1:9/hook", "loopback"),
        ("http://localhost:9/hook", "loopback"),
        ("http://10.1.2.3/hook", "private"),
        ("http://user:pw@example.com/hook", "credentials"),
        ("https:///no-host", "no host"),
    ],
)
def test_unsafe_callback_urls_are_refused_at_submission(pipeline, url, words):
    response = pipeline.client.post(
        "/v1/batches",
        json={"inventory": "tiny-shop", "documents": documents(1), "callback_url": url},
        headers=pipeline.ingest,
    )
    assert words in assert_problem(response, 422)["detail"]
    assert pipeline.stored_batches() == 0


def test_private_addresses_are_allowed_only_when_configured():
    import ipaddress

    loopback = ipaddress.ip_address("127.0.0.1")
    assert address_refusal(loopback, allow_private=False)
    assert address_refusal(loopback, allow_private=True) is None
    metadata = ipaddress.ip_address("169.254.169.254")
    assert address_refusal(metadata, allow_private=True)
    assert address_refusal(ipaddress.ip_address("93.184.216.34"), allow_private=False) is None


def test_a_host_that_rebinds_to_a_private_address_is_refused():
    """Every address the name resolves to must pass, not just the first."""
    answers = iter([["93.184.216.34"], ["93.184.216.34", "10.0.0.7"]])

    def resolver(_host: str, _port: int) -> list[str]:
        return next(answers)

    checked = check_url("https://hooks.example/x", allow_private=False, resolver=resolver)
    assert [str(a) for a in checked.addresses] == ["93.184.216.34"]
    with pytest.raises(WebhookUrlRefused, match="private"):
        check_url("https://hooks.example/x", allow_private=False, resolver=resolver)


def test_delivery_rechecks_the_address(make_pipeline, receiver):
    """A URL accepted at submission is checked again when delivered: policy now refuses it."""
    lenient = make_pipeline(allow_private_webhooks=True)
    batch = lenient.submit(documents(1), callback_url=receiver.url)
    strict = make_pipeline(allow_private_webhooks=False)
    strict.worker().run_until_idle()
    webhook = strict.status(batch["id"])["webhook"]
    assert webhook["state"] == "failed"
    assert "refused" in webhook["attempts"][0]["error"]
    assert receiver.requests.qsize() == 0
