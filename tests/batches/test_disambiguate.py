"""POST /v1/disambiguate: the same result objects as batches, limits, and engines that
are cached per process and advanced incrementally when evidence grows."""

from __future__ import annotations

from typing import Any

from service.engine import Evidence
from service.store.database import session_scope
from service.store.evidence import add_evidence, evidence_watermark
from service.store.inventories import get_inventory
from service.tagging.engines import Pin, shared_engines
from tests.conftest import bearer
from tests.pipeline import documents
from tests.problem_details import assert_problem

RESULT_MEMBERS = {
    "document_id", "field", "occurrence_index", "start", "end", "surface", "term", "sense_id",
    "tags", "confidence", "margin", "status", "candidates", "rationale", "inventory_version",
    "missing_sense_p",
}  # fmt: skip


def test_results_follow_the_result_format(pipeline):
    docs = [
        {"id": "a", "text": "The bass was huge.", "fields": {"title": "Mouse and bass"}},
        {"id": "b", "text": "Nothing to see here."},
    ]
    response = pipeline.client.post(
        "/v1/disambiguate",
        json={"inventory": "tiny-shop", "documents": docs},
        headers=pipeline.ingest,
    )
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["inventory"] == {"name": "tiny-shop", "version": 1}
    results = body["results"]
    assert {r["document_id"] for r in results} == {"a"}
    assert [(r["field"], r["occurrence_index"]) for r in results] == [
        ("text", 0),
        ("title", 1),
        ("title", 2),
    ]
    for result in results:
        assert set(result) == RESULT_MEMBERS
        text = docs[0]["text"] if result["field"] == "text" else docs[0]["fields"]["title"]
        assert text[result["start"] : result["end"]] == result["surface"]
        assert result["status"] in ("assigned", "review", "abstained")
        assert (result["sense_id"] is None) == (result["status"] == "abstained")
        assert result["rationale"]["attention"]["method"] == "last-layer-head-average"


def test_review_results_carry_no_erasure(pipeline):
    """Erasure (one forward pass per context word) is only for callers that ask for it; the
    synchronous endpoint's review items get attention and nearest evidence, erasure null."""
    admin = bearer(pipeline.keys["admin"])
    # A fixed threshold of 1.0 sends every assigned sense to review.
    settings = {"settings": {"review_threshold": 1.0, "target_accuracy": None}}
    patched = pipeline.client.patch("/v1/inventories/tiny-shop", json=settings, headers=admin)
    assert patched.status_code == 200, patched.text
    results = pipeline.sync_results(documents(4), rationale=True)
    review = [r for r in results if r["status"] == "review"]
    assert review, [r["status"] for r in results]
    for result in review:
        assert result["rationale"]["attention"] is not None
        assert result["rationale"]["erasure"] is None


def test_a_sync_request_reads_the_inventory_version_once(pipeline, monkeypatch):
    """The route hands the spec it read to the engine cache instead of it being read again."""
    engines = shared_engines()
    reads: list[int] = []
    original = engines.spec

    def counted(*args: Any, **kwargs: Any) -> Any:
        reads.append(1)
        return original(*args, **kwargs)

    monkeypatch.setattr(engines, "spec", counted)
    assert pipeline.sync_results(documents(1))
    assert len(reads) == 1


def test_sync_limits(make_pipeline):
    pipe = make_pipeline(max_sync_documents=2, max_occurrences_per_document=2)
    too_many = pipe.client.post(
        "/v1/disambiguate",
        json={"inventory": "tiny-shop", "documents": documents(3)},
        headers=pipe.ingest,
    )
    assert assert_problem(too_many, 413)["limit"] == "max_sync_documents"
    crowded = pipe.client.post(
        "/v1/disambiguate",
        json={"inventory": "tiny-shop", "documents": [{"id": "x", "text": "bass bass bass"}]},
        headers=pipe.ingest,
    )
    assert assert_problem(crowded, 422)["limit"] == "max_occurrences_per_document"
    empty = pipe.client.post(
        "/v1/disambiguate", json={"inventory": "tiny-shop", "documents": []}, headers=pipe.ingest
    )
    assert_problem(empty, 422)
    unknown = pipe.client.post(
        "/v1/disambiguate",
        json={"inventory": "nope", "documents": documents(1)},
        headers=pipe.ingest,
    )
    assert_problem(unknown, 404)


def test_engines_are_reused_and_advanced_when_evidence_grows(pipeline):
    engines = shared_engines()
    docs = [{"id": "d", "text": "I caught a bass."}]

    def ask() -> dict:
        response = pipeline.client.post(
            "/v1/disambiguate",
            json={"inventory": "tiny-shop", "documents": docs, "options": {"rationale": False}},
            headers=pipeline.ingest,
        )
        assert response.status_code == 200, response.text
        return response.json()

    first = ask()
    builds, advances = engines.builds, engines.advances
    again = ask()
    assert (engines.builds, engines.advances) == (builds, advances)  # cached, not rebuilt
    assert again["results"] == first["results"]
    with session_scope(pipeline.settings) as session:
        add_evidence(
            session,
            pipeline.team_id,
            "tiny-shop",
            [
                Evidence(
                    0, "bass", "bass.music", f"Turn up the bass on track {n}.", 12, 16, "import"
                )
                for n in range(6)
            ],
        )
    grown = ask()
    assert grown["evidence_watermark"] > first["evidence_watermark"]
    assert (engines.builds, engines.advances) == (builds, advances + 1)  # incremental
    before = {c["sense_id"]: c["similarity"] for c in first["results"][0]["candidates"]}
    after = {c["sense_id"]: c["similarity"] for c in grown["results"][0]["candidates"]}
    assert after["bass.music"] != before["bass.music"]  # the music prototype moved
    assert after["bass.fish"] == before["bass.fish"]  # no evidence for the fish sense


def test_a_batch_pinned_before_the_evidence_grew_keeps_its_watermark(pipeline):
    """A pin older than the cached engine gets an engine of its own, never newer prototypes."""
    engines = shared_engines()
    batch = pipeline.submit(documents(2))
    pipeline.sync_results(documents(1))  # caches the engine at the batch's watermark
    with session_scope(pipeline.settings) as session:
        add_evidence(
            session,
            pipeline.team_id,
            "tiny-shop",
            [Evidence(0, "mouse", "mouse.device", "Click the mouse.", 10, 15, "import")],
        )
    pipeline.sync_results(documents(1))  # advances the cached engine to the new watermark
    with session_scope(pipeline.settings) as session:
        inventory_id = get_inventory(session, pipeline.team_id, "tiny-shop").id
        grown = evidence_watermark(session, inventory_id)
        newest = engines.engine(session, pipeline.settings, Pin(inventory_id, 1, grown))
        builds = engines.builds
        pinned = engines.engine(
            session, pipeline.settings, Pin(inventory_id, 1, batch["evidence_watermark"])
        )
    assert batch["evidence_watermark"] == 0 < grown
    assert engines.builds == builds + 1  # built afresh, not taken from the advanced engine
    assert pinned.watermark == 0 and newest.watermark == grown
    assert pinned.disambiguator.prototypes is not newest.disambiguator.prototypes
    pipeline.worker().run_until_idle()
    assert pipeline.status(batch["id"])["state"] == "done"
