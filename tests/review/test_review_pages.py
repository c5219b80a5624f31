"""The review pages without a browser: sign-in, cookies, CSRF, expiry, new senses, quality."""

from __future__ import annotations

import re
from datetime import timedelta
from typing import Any

from sqlalchemy import func, select

from service.review.quality import machine_agreed
from service.store.database import session_scope
from service.store.models import (
    EvidenceRecord,
    Inventory,
    ReviewDecision,
    ReviewItem,
    WebSession,
)
from tests.conftest import bearer

CSRF = re.compile(r'name="csrf" value="([^"]+)"')


def sign_in(client: Any, key: str) -> str:
    """Sign in through the form; returns the page's CSRF token."""
    page = client.get("/review/sign-in")
    token = CSRF.search(page.text).group(1)
    response = client.post(
        "/review/sign-in", data={"csrf": token, "api_key": key}, follow_redirects=False
    )
    assert response.status_code == 303, response.text
    queue = client.get("/review")
    assert queue.status_code == 200
    return CSRF.search(queue.text).group(1)


def test_pages_need_a_session(client):
    for path in ("/review", "/review/items/1", "/review/senses", "/review/quality"):
        response = client.get(path, follow_redirects=False)
        assert response.status_code == 303
        assert response.headers["location"] == "/review/sign-in"


def test_sign_in_refuses_bad_keys_and_sets_a_strict_cookie(client, api_keys):
    page = client.get("/review/sign-in")
    assert page.status_code == 200 and 'for="api_key"' in page.text
    token = CSRF.search(page.text).group(1)
    unknown = client.post("/review/sign-in", data={"csrf": token, "api_key": "ws_x_y"})
    assert unknown.status_code == 401
    ingest = client.post("/review/sign-in", data={"csrf": token, "api_key": api_keys["ingest"]})
    assert ingest.status_code == 403
    no_token = client.post("/review/sign-in", data={"api_key": api_keys["review"]})
    assert no_token.status_code == 403
    ok = client.post(
        "/review/sign-in",
        data={"csrf": token, "api_key": api_keys["review"]},
        follow_redirects=False,
    )
    assert ok.status_code == 303
    cookie = next(
        v for k, v in ok.headers.multi_items() if k == "set-cookie" and "whichsense_review=" in v
    )
    assert "HttpOnly" in cookie and "SameSite=strict" in cookie.replace("Strict", "strict")
    assert "Path=/review" in cookie and "Secure" not in cookie
    page = client.get("/review")
    assert "default-src 'none'" in page.headers["content-security-policy"]


def test_cookie_is_secure_over_tls(settings, api_keys):
    from fastapi.testclient import TestClient

    from service.api.app import create_app

    with TestClient(create_app(settings), base_url="https://testserver") as tls:
        token = CSRF.search(tls.get("/review/sign-in").text).group(1)
        ok = tls.post(
            "/review/sign-in",
            data={"csrf": token, "api_key": api_keys["admin"]},
            follow_redirects=False,
        )
        assert "Secure" in ok.headers["set-cookie"]


def test_tampered_expired_and_signed_out_sessions_are_refused(client, api_keys, settings):
    csrf = sign_in(client, api_keys["review"])
    good = client.cookies.get("whichsense_review")
    client.cookies.set("whichsense_review", good[:-2] + ("00" if good[-2:] != "00" else "11"))
    assert client.get("/review", follow_redirects=False).status_code == 303
    client.cookies.set("whichsense_review", good)
    assert client.get("/review").status_code == 200
    with session_scope(settings) as session:
        row = session.scalars(select(WebSession)).one()
        row.expires_at = row.expires_at - timedelta(hours=9)
    assert client.get("/review", follow_redirects=False).status_code == 303
    with session_scope(settings) as session:
        row = session.scalars(select(WebSession)).one()
        row.expires_at = row.expires_at + timedelta(hours=9)
    assert client.get("/review").status_code == 200
    assert client.post("/review/sign-out", data={}).status_code == 403  # no CSRF token
    out = client.post("/review/sign-out", data={"csrf": csrf}, follow_redirects=False)
    assert out.status_code == 303
    client.cookies.set("whichsense_review", good)  # an old copy of the cookie
    assert client.get("/review", follow_redirects=False).status_code == 303


def test_decide_form_needs_the_csrf_token(queued):
    client = queued.pipeline.client
    csrf = sign_in(client, queued.keys["review"])
    started = client.post("/review/next", data={"csrf": csrf}, follow_redirects=False)
    item_url = started.headers["location"]
    item_id = int(item_url.split("/review/items/")[1].split("?")[0])
    refused = client.post(f"/review/items/{item_id}/decide", data={"sense": "none"})
    assert refused.status_code == 403
    with session_scope(queued.pipeline.settings) as session:
        assert session.scalar(select(func.count()).select_from(ReviewDecision)) == 0
    done = client.post(
        f"/review/items/{item_id}/decide",
        data={"sense": "none", "csrf": csrf},
        follow_redirects=False,
    )
    assert done.status_code == 303 and "/review/items/" in done.headers["location"]
    with session_scope(queued.pipeline.settings) as session:
        assert session.scalar(select(func.count()).select_from(ReviewDecision)) == 1


def test_new_sense_from_a_cluster_of_none_of_these(queued):
    client = queued.pipeline.client
    api = bearer(queued.keys["admin"])
    items = client.post(
        "/v1/review/claims", json={"count": 20, "term": "bass"}, headers=api
    ).json()["items"]
    for item in items:
        response = client.post(
            f"/v1/review/items/{item['id']}/decision", json={"sense_id": None}, headers=api
        )
        assert response.status_code == 201
    csrf = sign_in(client, queued.keys["admin"])
    page = client.get("/review/senses")
    assert page.status_code == 200
    forms = re.findall(r'name="items" value="([0-9,]+)"', page.text)
    assert forms, "no cluster was shown"
    members = [int(i) for i in forms[0].split(",")]
    assert len(members) >= 2
    created = client.post(
        "/review/senses",
        data={
            "csrf": csrf,
            "inventory": "tiny-shop",
            "term": "bass",
            "items": forms[0],
            "sense_id": "bass.voice",
            "gloss": "the lowest adult male singing voice",
        },
        follow_redirects=False,
    )
    assert created.status_code == 303, created.text
    with session_scope(queued.pipeline.settings) as session:
        inventory = session.scalars(select(Inventory)).one()
        assert inventory.version == 2
        decided = list(
            session.scalars(select(ReviewDecision).where(ReviewDecision.sense_id == "bass.voice"))
        )
        assert sorted(d.item_id for d in decided) == sorted(members)
        assert all(d.inventory_version == 2 for d in decided)
        evidence = session.scalar(
            select(func.count())
            .select_from(EvidenceRecord)
            .where(EvidenceRecord.sense_key == "bass.voice")
        )
        assert evidence == len(members)
        assert {session.get(ReviewItem, i).state for i in members} == {"decided"}
    sense = client.get("/v1/inventories/tiny-shop/senses/bass.voice", headers=api)
    assert sense.status_code == 200
    # a review-scope session sees the groups but may not edit the inventory
    review_client_csrf = sign_in(client, queued.keys["review"])
    refused = client.post(
        "/review/senses",
        data={
            "csrf": review_client_csrf,
            "inventory": "tiny-shop",
            "term": "bass",
            "items": "1",
            "sense_id": "bass.other",
            "gloss": "x",
        },
    )
    assert refused.status_code == 403


def test_quality_page_reports_agreement(queued):
    client = queued.pipeline.client
    api = bearer(queued.keys["review"])
    items = client.post("/v1/review/claims", json={"count": 4}, headers=api).json()["items"]
    for item in items:
        machine = item["result"]["sense_id"]
        client.post(
            f"/v1/review/items/{item['id']}/decision", json={"sense_id": machine}, headers=api
        )
    sign_in(client, queued.keys["review"])
    page = client.get("/review/quality")
    assert page.status_code == 200
    with session_scope(queued.pipeline.settings) as session:
        decisions = list(session.scalars(select(ReviewDecision)))
        agreed = sum(machine_agreed(d) for d in decisions)
    assert f"({agreed} of {len(decisions)})" in page.text
    assert page.text.count("<svg") >= 2 and "<polyline" in page.text


def test_another_teams_items_are_not_found_on_the_pages(queued, settings):
    """A reviewer of another team signed in to the pages: team A's item is 404 to read,
    decide or skip, its queue shows none of team A's work, and no row changes."""
    from service.store.teams import create_team
    from tests.conftest import team_keys

    client = queued.pipeline.client
    claimed = client.post(
        "/v1/review/claims", json={"count": 1}, headers=bearer(queued.keys["review"])
    )
    item_id = claimed.json()["items"][0]["id"]
    with session_scope(settings) as session:
        other_team = create_team(session, "other").id
    csrf = sign_in(client, team_keys(settings, other_team)["review"])
    with session_scope(settings) as session:
        before = session.get(ReviewItem, item_id)
        state_before = (before.state, before.claimed_by)
    page = client.get(f"/review/items/{item_id}")
    assert page.status_code == 404
    for action in ("decide", "skip"):
        response = client.post(
            f"/review/items/{item_id}/{action}",
            data={"csrf": csrf, "sense": "bass.fish"},
            follow_redirects=False,
        )
        assert response.status_code == 404, action
    queue = client.get("/review")
    assert queue.status_code == 200
    assert queued.batch_id not in queue.text and "tiny-shop" not in queue.text
    assert client.post("/review/undo", data={"csrf": csrf}).status_code == 404
    with session_scope(settings) as session:
        after = session.get(ReviewItem, item_id)
        assert (after.state, after.claimed_by) == state_before
        assert session.scalar(select(func.count()).select_from(ReviewDecision)) == 0
