"""From submission to results: the worker's output equals the synchronous endpoint's,
read back by cursor pages, filters, NDJSON streams, summaries; and cancellation."""

from __future__ import annotations

import json

from tests.pipeline import assert_same_results, documents, ndjson
from tests.problem_details import assert_problem


def test_batch_results_equal_the_synchronous_results(make_pipeline):
    pipe = make_pipeline(chunk_size=3)
    docs = documents(8)
    batch = pipe.submit(docs, rationale=True)
    assert pipe.worker().run_until_idle() >= 3
    status = pipe.status(batch["id"])
    assert status["state"] == "done"
    assert status["progress"] == 1.0
    counts = status["counts"]
    assert counts["processed_documents"] == 8 and counts["failed_documents"] == 0
    assert counts["processed_occurrences"] == counts["occurrences"]
    assert counts["assigned"] + counts["review"] + counts["abstained"] == counts["occurrences"]
    timings = status["timings"]
    assert timings["created_at"] <= timings["started_at"] <= timings["finished_at"]
    results = pipe.all_results(batch["id"])
    assert_same_results(results, pipe.sync_results(docs, rationale=True))
    assert {r["inventory_version"] for r in results} == {1}
    order = [(int(r["document_id"].split("-")[1]), r["occurrence_index"]) for r in results]
    assert order == sorted(order)  # document order, then occurrence order
    assert all(r["rationale"]["attention"]["words"] for r in results)


def test_result_filters(pipeline):
    batch = pipeline.submit(documents(8))
    pipeline.worker().run_until_idle()
    every = pipeline.all_results(batch["id"])
    fish = pipeline.all_results(batch["id"], sense="bass.fish")
    assert fish and fish == [r for r in every if r["sense_id"] == "bass.fish"]
    mouse = pipeline.all_results(batch["id"], term="mouse")
    assert mouse == [r for r in every if r["term"] == "mouse"]
    for status in ("assigned", "review", "abstained"):
        chosen = pipeline.all_results(batch["id"], status=status)
        assert chosen == [r for r in every if r["status"] == status]
    middle = sorted(r["confidence"] for r in every)[len(every) // 2]
    low = pipeline.all_results(batch["id"], max_confidence=middle)
    high = pipeline.all_results(batch["id"], min_confidence=middle)
    assert low == [r for r in every if r["confidence"] <= middle]
    assert high == [r for r in every if r["confidence"] >= middle]
    bad = pipeline.client.get(
        f"/v1/batches/{batch['id']}/results?min_confidence=2", headers=pipeline.ingest
    )
    assert_problem(bad, 422)
    forged = pipeline.client.get(
        f"/v1/batches/{batch['id']}/results?cursor=bm90LWEtY3Vyc29y", headers=pipeline.ingest
    )
    assert_problem(forged, 422)
    from service.batches.cursors import encode_cursor

    huge = encode_cursor(2**70, 1)
    overflow = pipeline.client.get(
        f"/v1/batches/{batch['id']}/results?cursor={huge}", headers=pipeline.ingest
    )
    assert_problem(overflow, 422)


def test_results_as_an_ndjson_stream(pipeline):
    batch = pipeline.submit(documents(6))
    pipeline.worker().run_until_idle()
    response = pipeline.client.get(
        f"/v1/batches/{batch['id']}/results",
        params={"term": "bass"},
        headers={**pipeline.ingest, "Accept": "application/x-ndjson"},
    )
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("application/x-ndjson")
    streamed = [json.loads(line) for line in response.text.splitlines()]
    assert streamed == pipeline.all_results(batch["id"], term="bass")


def test_summaries_count_senses_per_document(pipeline):
    docs = [
        {"id": "shop", "text": "The bass guitar and the bass amp. A mouse for the laptop."},
        {"id": "lake", "text": "We caught a bass.", "metadata": {"lang": "en"}},
    ]
    batch = pipeline.submit(docs)
    pipeline.worker().run_until_idle()
    results = pipeline.all_results(batch["id"])
    one = pipeline.client.get(
        f"/v1/batches/{batch['id']}/documents/shop/summary", headers=pipeline.ingest
    ).json()
    mine = [r for r in results if r["document_id"] == "shop"]
    assert one["state"] == "done" and one["occurrences"] == len(mine)
    for term in one["terms"]:
        of_term = [r for r in mine if r["term"] == term["term"]]
        assert term["occurrences"] == len(of_term)
        assert term["abstained"] == sum(r["status"] == "abstained" for r in of_term)
        for sense in term["senses"]:
            of_sense = [r for r in of_term if r["sense_id"] == sense["sense_id"]]
            assert sense["count"] == len(of_sense)
            assert sense["best_confidence"] == max(r["confidence"] for r in of_sense)
            assert sense["assigned"] + sense["review"] == sense["count"]
    assert one["sense_ids"] == sorted({r["sense_id"] for r in mine if r["sense_id"]})
    listing = pipeline.client.get(
        f"/v1/batches/{batch['id']}/summaries?limit=1", headers=pipeline.ingest
    ).json()
    assert [s["document_id"] for s in listing["summaries"]] == ["shop"]
    rest = pipeline.client.get(
        f"/v1/batches/{batch['id']}/summaries",
        params={"cursor": listing["next_cursor"]},
        headers=pipeline.ingest,
    ).json()
    assert [s["document_id"] for s in rest["summaries"]] == ["lake"]
    assert rest["summaries"][0]["metadata"] == {"lang": "en"}
    assert rest["next_cursor"] is None
    missing = pipeline.client.get(
        f"/v1/batches/{batch['id']}/documents/nope/summary", headers=pipeline.ingest
    )
    assert_problem(missing, 404)


def test_cancel_stops_pending_chunks_and_keeps_results(make_pipeline):
    pipe = make_pipeline(chunk_size=2)
    batch = pipe.submit(documents(6))
    worker = pipe.worker()
    assert worker.process_one_chunk()
    cancelled = pipe.client.delete(f"/v1/batches/{batch['id']}", headers=pipe.ingest)
    assert cancelled.status_code == 200, cancelled.text
    body = cancelled.json()
    assert body["state"] == "cancelled" and body["timings"]["finished_at"]
    assert body["counts"]["processed_documents"] == 2
    assert body["counts"]["cancelled_documents"] == 4
    kept = pipe.all_results(batch["id"])
    assert worker.run_until_idle() == 0
    assert pipe.all_results(batch["id"]) == kept
    assert {r["document_id"] for r in kept} == {"doc-0", "doc-1"}
    again = pipe.client.delete(f"/v1/batches/{batch['id']}", headers=pipe.ingest)
    assert again.status_code == 200
    done = pipe.submit(documents(1, prefix="other"))
    worker.run_until_idle()
    assert_problem(pipe.client.delete(f"/v1/batches/{done['id']}", headers=pipe.ingest), 409)


def test_cancelled_lease_holder_cannot_write(make_pipeline):
    """A worker busy with a chunk when the batch is cancelled writes nothing."""
    from service.batches.leases import LeaseLost, claim_chunk, hold_lease

    pipe = make_pipeline(chunk_size=10)
    batch = pipe.submit(documents(3))
    worker = pipe.worker()
    with worker.sessions.begin() as session:
        claim = claim_chunk(session, "busy", 60)
    assert claim is not None
    pipe.client.delete(f"/v1/batches/{batch['id']}", headers=pipe.ingest)
    assert worker.chunks.run(claim) == "lease_lost"
    with worker.sessions.begin() as session:
        try:
            hold_lease(session, claim)
            raise AssertionError("the lease should be gone")
        except LeaseLost:
            pass
    assert pipe.all_results(batch["id"]) == []


def test_status_of_unknown_batch_and_scopes(pipeline):
    assert_problem(pipeline.client.get("/v1/batches/nope", headers=pipeline.ingest), 404)
    batch = pipeline.submit(documents(1))
    review = {"Authorization": f"Bearer {pipeline.keys['review']}"}
    assert pipeline.client.get(f"/v1/batches/{batch['id']}", headers=review).status_code == 200
    assert_problem(pipeline.client.delete(f"/v1/batches/{batch['id']}", headers=review), 403)


def test_queue_metrics_are_exposed(pipeline):
    from prometheus_client.parser import text_string_to_metric_families

    pipeline.submit(documents(3))
    # Parsed with prometheus_client's own parser of the text exposition format.
    text = pipeline.client.get("/metrics").text
    families = {f.name: f for f in text_string_to_metric_families(text)}
    queued = [s for s in families["whichsense_batches"].samples if s.labels["state"] == "queued"]
    assert queued[0].value == 1
    chunks = {s.labels["state"]: s.value for s in families["whichsense_chunks"].samples}
    assert chunks["pending"] >= 1 and chunks["leased"] == 0


def test_ndjson_submission_round_trip(pipeline):
    docs = documents(4)
    response = pipeline.client.post(
        "/v1/batches",
        content=ndjson({"inventory": "tiny-shop", "options": {"rationale": False}}, *docs),
        headers={**pipeline.ingest, "Content-Type": "application/x-ndjson"},
    )
    assert response.status_code == 202
    pipeline.worker().run_until_idle()
    assert_same_results(pipeline.all_results(response.json()["id"]), pipeline.sync_results(docs))
