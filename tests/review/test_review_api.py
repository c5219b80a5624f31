"""The review queue over HTTP: claims, decisions, evidence, re-scoring, undo, export, tenancy."""

from __future__ import annotations

import json
from datetime import timedelta

from sqlalchemy import select

from service.review.queue import QueueFilter, claim_items
from service.store.database import session_scope
from service.store.models import EvidenceRecord, ReviewDecision, ReviewItem
from tests.conftest import bearer, team_keys
from tests.review.conftest import gold_sense


def _claim(client, key, **body):
    response = client.post("/v1/review/claims", json=body, headers=bearer(key))
    assert response.status_code == 200, response.text
    return response.json()["items"]


def _text(queued, item):
    document = next(d for d in queued.documents if d["id"] == item["document_id"])
    return document["text"]


def test_claim_decide_becomes_evidence_and_updates_the_result(queued):
    client, key = queued.pipeline.client, queued.keys["review"]
    items = _claim(client, key, count=1)
    assert len(items) == 1
    item = items[0]
    assert item["result"]["status"] in ("review", "abstained")
    sense = gold_sense(_text(queued, item), item["term"])
    response = client.post(
        f"/v1/review/items/{item['id']}/decision", json={"sense_id": sense}, headers=bearer(key)
    )
    assert response.status_code == 201, response.text
    decision = response.json()["decision"]
    assert decision["sense_id"] == sense and decision["reviewer_key"] == key.split("_")[1]
    assert decision["inventory_version"] == 1
    with session_scope(queued.pipeline.settings) as session:
        evidence = session.get(EvidenceRecord, decision["evidence_id"])
        assert evidence is not None and evidence.source == "review"
        assert evidence.sense_key == sense
        assert evidence.text[evidence.start : evidence.end].lower().startswith(item["term"])
    results = queued.pipeline.all_results(queued.batch_id)
    reviewed = [r for r in results if r["status"] == "reviewed"]
    assert len(reviewed) == 1
    assert reviewed[0]["sense_id"] == sense
    assert reviewed[0]["machine_answer"]["status"] == item["result"]["status"]
    assert reviewed[0]["machine_answer"]["sense_id"] == item["result"]["sense_id"]
    assert reviewed[0]["review"]["decision_id"] == decision["id"]
    # deciding again is a conflict; the decision list and the JSON Lines export show it
    again = client.post(
        f"/v1/review/items/{item['id']}/decision", json={"sense_id": sense}, headers=bearer(key)
    )
    assert again.status_code == 409
    listed = client.get("/v1/review/decisions", headers=bearer(key)).json()["decisions"]
    assert [d["id"] for d in listed] == [decision["id"]]
    export = client.get(
        "/v1/review/decisions", headers={**bearer(key), "Accept": "application/x-ndjson"}
    )
    assert export.headers["content-type"].startswith("application/x-ndjson")
    lines = [json.loads(line) for line in export.text.splitlines()]
    assert lines[0]["id"] == decision["id"] and lines[0]["sense_id"] == sense


def test_decision_rescores_the_terms_pending_items(queued):
    client, key = queued.pipeline.client, queued.keys["review"]
    first = _claim(client, key, count=1, term="bass")[0]
    with session_scope(queued.pipeline.settings) as session:
        before = {
            i.id: i.confidence
            for i in session.scalars(select(ReviewItem).where(ReviewItem.term == "bass"))
            if i.id != first["id"]
        }
    response = client.post(
        f"/v1/review/items/{first['id']}/decision",
        json={"sense_id": gold_sense(_text(queued, first), "bass")},
        headers=bearer(key),
    )
    assert response.status_code == 201
    assert response.json()["rescored"] == len(before)
    with session_scope(queued.pipeline.settings) as session:
        after = {
            i.id: i.confidence
            for i in session.scalars(select(ReviewItem).where(ReviewItem.term == "bass"))
            if i.id != first["id"]
        }
    assert after.keys() == before.keys()
    assert any(abs(after[i] - before[i]) > 1e-4 for i in before), "nothing was re-scored"


def test_wrong_sense_is_422_and_stores_nothing(queued):
    client, key = queued.pipeline.client, queued.keys["review"]
    item = _claim(client, key, term="bass")[0]
    response = client.post(
        f"/v1/review/items/{item['id']}/decision",
        json={"sense_id": "mouse.animal"},
        headers=bearer(key),
    )
    assert response.status_code == 422
    assert response.headers["content-type"] == "application/problem+json"
    with session_scope(queued.pipeline.settings) as session:
        assert session.scalars(select(ReviewDecision)).first() is None
        assert (
            session.scalars(select(EvidenceRecord).where(EvidenceRecord.source == "review")).first()
            is None
        )


def test_two_reviewers_never_hold_the_same_item(queued, team_id):
    client = queued.pipeline.client
    second = team_keys(queued.pipeline.settings, team_id)["review"]
    mine = _claim(client, queued.keys["review"], count=4)
    theirs = _claim(client, second, count=4)
    assert len(mine) == 4 and len(theirs) == 4
    assert not {i["id"] for i in mine} & {i["id"] for i in theirs}
    # claiming again returns my own live claims first, never theirs
    again = _claim(client, queued.keys["review"], count=4)
    assert {i["id"] for i in again} == {i["id"] for i in mine}
    # their live claim keeps me from deciding their item
    blocked = client.post(
        f"/v1/review/items/{theirs[0]['id']}/decision",
        json={"sense_id": None},
        headers=bearer(queued.keys["review"]),
    )
    assert blocked.status_code == 409


def test_expired_claims_return_to_the_queue(queued, team_id):
    client = queued.pipeline.client
    _claim(client, queued.keys["review"], count=1)  # makes the items
    with session_scope(queued.pipeline.settings) as session:
        held = claim_items(session, team_id, "first", QueueFilter(), count=50)
        assert held
        for item in held:
            item.claim_expires_at = item.claim_expires_at - timedelta(seconds=3600)
    with session_scope(queued.pipeline.settings) as session:
        taken = claim_items(session, team_id, "second", QueueFilter(), count=50)
        assert {i.id for i in taken} >= {i.id for i in held}


def test_undo_takes_back_evidence_and_restores_the_result(queued):
    client, key = queued.pipeline.client, queued.keys["review"]
    item = _claim(client, key)[0]
    sense = gold_sense(_text(queued, item), item["term"])
    decided = client.post(
        f"/v1/review/items/{item['id']}/decision", json={"sense_id": sense}, headers=bearer(key)
    ).json()["decision"]
    undone = client.post("/v1/review/undo", headers=bearer(key))
    assert undone.status_code == 200, undone.text
    assert undone.json()["decision"]["id"] == decided["id"]
    assert undone.json()["decision"]["undone_at"] is not None
    with session_scope(queued.pipeline.settings) as session:
        assert session.get(EvidenceRecord, decided["evidence_id"]) is None
        assert session.get(ReviewItem, item["id"]).state == "pending"
    results = queued.pipeline.all_results(queued.batch_id)
    assert not [r for r in results if r["status"] == "reviewed"]
    assert not [r for r in results if "machine_answer" in r]
    assert client.post("/v1/review/undo", headers=bearer(key)).status_code == 404


def test_none_of_these_is_recorded_without_evidence(queued):
    client, key = queued.pipeline.client, queued.keys["review"]
    item = _claim(client, key)[0]
    response = client.post(
        f"/v1/review/items/{item['id']}/decision", json={"sense_id": None}, headers=bearer(key)
    )
    assert response.status_code == 201
    decision = response.json()["decision"]
    assert decision["none_of_these"] and decision["evidence_id"] is None
    with session_scope(queued.pipeline.settings) as session:
        assert session.get(ReviewItem, item["id"]).state == "missing"


def test_scopes_and_other_teams(queued, settings):
    from service.store.teams import create_team

    client = queued.pipeline.client
    assert client.post("/v1/review/claims", json={}).status_code == 401
    ingest = client.post("/v1/review/claims", json={}, headers=bearer(queued.keys["ingest"]))
    assert ingest.status_code == 403
    mine = _claim(client, queued.keys["admin"])[0]
    with session_scope(settings) as session:
        other_team = create_team(session, "other").id
    other = team_keys(settings, other_team)["review"]
    assert _claim(client, other, count=5) == []
    for response in (
        client.get(f"/v1/review/items/{mine['id']}", headers=bearer(other)),
        client.post(
            f"/v1/review/items/{mine['id']}/decision",
            json={"sense_id": None},
            headers=bearer(other),
        ),
        client.delete(f"/v1/review/items/{mine['id']}/claim", headers=bearer(other)),
    ):
        assert response.status_code == 404
    assert client.get("/v1/review/decisions", headers=bearer(other)).json()["decisions"] == []


def test_review_routes_are_in_the_openapi_document(client):
    paths = client.get("/openapi.json").json()["paths"]
    for path in (
        "/v1/review/claims",
        "/v1/review/items/{item_id}",
        "/v1/review/items/{item_id}/decision",
        "/v1/review/items/{item_id}/claim",
        "/v1/review/undo",
        "/v1/review/decisions",
        "/v1/review/settings/{inventory}",
    ):
        assert path in paths
    assert not [p for p in paths if p.startswith("/review")]


def test_reviewed_results_are_announced_by_webhook(make_pipeline, receiver):
    from tests.review.conftest import queue_documents

    pipe = make_pipeline(allow_private_webhooks=True)
    batch = pipe.submit(queue_documents()[:4], callback_url=receiver.url)
    pipe.worker().run_until_idle()
    _, first = receiver.requests.get(timeout=10)
    assert json.loads(first)["event"] == "batch.finished"
    key = pipe.keys["review"]
    items = _claim(pipe.client, key, count=2)
    for item in items:
        response = pipe.client.post(
            f"/v1/review/items/{item['id']}/decision", json={"sense_id": None}, headers=bearer(key)
        )
        assert response.status_code == 201
    pipe.worker().run_until_idle()
    _, second = receiver.requests.get(timeout=10)
    body = json.loads(second)
    assert body["event"] == "batch.reviewed" and body["batch_id"] == batch["id"]
    assert body["counts"]["reviewed"] == 2
    assert receiver.requests.empty()  # both decisions went out in one notice


def test_auto_resolve_is_a_per_inventory_setting(queued):
    client = queued.pipeline.client
    admin, review = bearer(queued.keys["admin"]), bearer(queued.keys["review"])
    assert client.get("/v1/review/settings/tiny-shop", headers=review).json()["auto_resolve"]
    refused = client.put(
        "/v1/review/settings/tiny-shop", json={"auto_resolve": False}, headers=review
    )
    assert refused.status_code == 403
    changed = client.put(
        "/v1/review/settings/tiny-shop", json={"auto_resolve": False}, headers=admin
    )
    assert changed.status_code == 200 and changed.json() == {
        "inventory": "tiny-shop",
        "auto_resolve": False,
    }
    assert (
        client.put(
            "/v1/review/settings/nope", json={"auto_resolve": True}, headers=admin
        ).status_code
        == 404
    )
    assert client.put("/v1/review/settings/tiny-shop", json={}, headers=admin).status_code == 422


def _lower_threshold(client, admin, value):
    response = client.patch(
        "/v1/inventories/tiny-shop", json={"settings": {"review_threshold": value}}, headers=admin
    )
    assert response.status_code == 200, response.text


def test_items_made_confident_leave_the_queue_and_come_back_on_undo(queued):
    client = queued.pipeline.client
    admin, key = bearer(queued.keys["admin"]), queued.keys["review"]
    first = _claim(client, key, term="bass")[0]
    _lower_threshold(client, admin, 0.5)  # the re-scoring now judges against 0.5
    response = client.post(
        f"/v1/review/items/{first['id']}/decision",
        json={"sense_id": gold_sense(_text(queued, first), "bass")},
        headers=bearer(key),
    )
    resolved = response.json()["resolved"]
    assert resolved, "no item left the queue"
    with session_scope(queued.pipeline.settings) as session:
        for item_id in resolved:
            item = session.get(ReviewItem, item_id)
            assert item.state == "resolved" and item.confidence >= 0.5
    results = queued.pipeline.all_results(queued.batch_id)
    rescored = [r for r in results if r.get("rescored")]
    assert len(rescored) == len(resolved)
    assert all(r["status"] == "assigned" and "machine_answer" in r for r in rescored)
    _lower_threshold(client, admin, 0.99)  # so the re-scoring after the undo resolves nothing
    assert client.post("/v1/review/undo", headers=bearer(key)).status_code == 200
    with session_scope(queued.pipeline.settings) as session:
        assert {session.get(ReviewItem, i).state for i in resolved} == {"pending"}
    assert not [r for r in queued.pipeline.all_results(queued.batch_id) if r.get("rescored")]


def test_with_auto_resolve_off_items_stay_in_the_queue(queued):
    client = queued.pipeline.client
    admin, key = bearer(queued.keys["admin"]), queued.keys["review"]
    client.put("/v1/review/settings/tiny-shop", json={"auto_resolve": False}, headers=admin)
    first = _claim(client, key, term="bass")[0]
    _lower_threshold(client, admin, 0.5)
    response = client.post(
        f"/v1/review/items/{first['id']}/decision",
        json={"sense_id": gold_sense(_text(queued, first), "bass")},
        headers=bearer(key),
    )
    assert response.status_code == 201
    assert response.json()["resolved"] == [] and response.json()["rescored"] > 0


def test_hostile_identifiers_are_4xx(queued):
    client, key = queued.pipeline.client, bearer(queued.keys["review"])
    for response in (
        client.get("/v1/review/items/99999999999999999999", headers=key),
        client.get("/v1/review/items/0", headers=key),
        client.post("/v1/review/claims", json={"term": "ba\u0000ss"}, headers=key),
        client.post("/v1/review/claims", json={"exclude": [2**40]}, headers=key),
        client.post("/v1/review/claims", json={"count": 0}, headers=key),
        client.post("/v1/review/items/1/decision", json={"sense_id": "x\u0000"}, headers=key),
        client.post("/v1/review/items/1/decision", content=b"{", headers=key),
        client.get("/v1/review/decisions?after=-1", headers=key),
    ):
        assert 400 <= response.status_code < 500, response.text
        assert response.headers["content-type"] == "application/problem+json"


def test_items_past_the_retagged_documents_are_scored_as_a_batch_scores_them(
    queued, monkeypatch
):
    """From stored vectors, a decision's re-scoring gives what a batch would serve
    (hubness penalty, sentence channel, the fitted temperature), document consistency
    aside: the answer of one occurrence tagged alone."""
    from service.engine import SpanQuery
    from service.review import decisions
    from service.store.evidence import evidence_watermark
    from service.store.models import BatchResult, Inventory
    from service.tagging.engines import Pin, shared_engines

    monkeypatch.setattr(decisions, "RESCORE_DOCUMENTS", 0)  # every item from its vectors
    client, key = queued.pipeline.client, queued.keys["review"]
    first = _claim(client, key, count=1, term="bass")[0]
    response = client.post(
        f"/v1/review/items/{first['id']}/decision",
        json={"sense_id": gold_sense(_text(queued, first), "bass")},
        headers=bearer(key),
    )
    assert response.status_code == 201 and response.json()["rescored"] > 0
    settings = queued.pipeline.settings
    with session_scope(settings) as session:
        pending = list(session.scalars(
            select(ReviewItem).where(ReviewItem.term == "bass", ReviewItem.state == "pending")
        ))
        assert pending and all(item.sentence_vector is not None for item in pending)
        inventory = session.get(Inventory, pending[0].inventory_id)
        pin = Pin(inventory.id, inventory.version, evidence_watermark(session, inventory.id))
        engine = shared_engines().engine(session, settings, pin).disambiguator
        assert engine.prototypes.sentences  # the channel the old re-scoring left out
        texts = {d["id"]: d["text"] for d in queued.documents}
        queries = []
        for number, item in enumerate(pending):
            result = session.get(BatchResult, item.result_id).result
            queries.append(SpanQuery(texts[item.document_id], result["start"], result["end"],
                                     "bass", document_id=str(number)))
        served = engine.classify_spans(queries)
    for item, answer in zip(pending, served, strict=True):
        assert abs(item.confidence - answer.confidence) < 1e-3, (item.id, answer.confidence)


def test_items_kept_without_a_sentence_vector_are_left_as_they_were(queued, monkeypatch):
    """Items queued before window sentence vectors were kept (migration 0006) cannot be
    scored as a batch scores them while the sentence channel is on: left unchanged."""
    from service.review import decisions

    monkeypatch.setattr(decisions, "RESCORE_DOCUMENTS", 0)
    client, key = queued.pipeline.client, queued.keys["review"]
    first = _claim(client, key, count=1, term="bass")[0]
    with session_scope(queued.pipeline.settings) as session:
        before = {}
        for item in session.scalars(select(ReviewItem).where(ReviewItem.term == "bass")):
            item.sentence_vector = None
            before[item.id] = item.confidence
    response = client.post(
        f"/v1/review/items/{first['id']}/decision",
        json={"sense_id": gold_sense(_text(queued, first), "bass")},
        headers=bearer(key),
    )
    assert response.status_code == 201
    assert response.json()["rescored"] == 0 and response.json()["resolved"] == []
    with session_scope(queued.pipeline.settings) as session:
        for item in session.scalars(select(ReviewItem).where(ReviewItem.term == "bass")):
            assert item.confidence == before[item.id]
