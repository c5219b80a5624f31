"""Submitting batches: both body formats, pinning, idempotency, and every refusal
storing nothing."""

from __future__ import annotations

import pytest
from sqlalchemy import func, select

from service.engine import Evidence, OccurrenceFinder
from service.store.database import engine_for, session_scope, write_gate
from service.store.evidence import add_evidence
from service.store.inventories import edit_inventory
from service.store.models import Batch, BatchChunk, BatchDocument
from tests.pipeline import documents, ndjson
from tests.problem_details import assert_problem

NDJSON = {"Content-Type": "application/x-ndjson"}


def _stored(settings) -> tuple[int, int, int]:
    with session_scope(settings) as session:
        return tuple(
            int(session.scalar(select(func.count()).select_from(model)) or 0)
            for model in (Batch, BatchDocument, BatchChunk)
        )


def test_json_submission_is_queued_pinned_and_chunked(make_pipeline):
    pipe = make_pipeline(chunk_size=4)
    response = pipe.client.post(
        "/v1/batches",
        json={"inventory": "tiny-shop", "documents": documents(10)},
        headers=pipe.ingest,
    )
    assert response.status_code == 202, response.text
    body = response.json()
    assert response.headers["location"] == f"/v1/batches/{body['id']}"
    assert body["state"] == "queued"
    assert body["inventory"] == {"name": "tiny-shop", "version": 1}
    assert body["evidence_watermark"] == 0
    assert body["counts"]["documents"] == 10
    assert body["counts"]["occurrences"] > 10  # two sentences, each with an occurrence or two
    assert body["progress"] == 0.0
    assert _stored(pipe.settings) == (1, 10, 3)  # ceil(10 / 4) chunks


def test_batch_pins_inventory_version_and_evidence_watermark(pipeline):
    with session_scope(pipeline.settings) as session:
        add_evidence(
            session,
            pipeline.team_id,
            "tiny-shop",
            [Evidence(0, "bass", "bass.fish", "We caught a bass.", 12, 16, "import")],
        )
    first = pipeline.submit(documents(1))
    edited = pipeline.client.patch(
        "/v1/inventories/tiny-shop",
        json={"description": "edited"},
        headers={"Authorization": f"Bearer {pipeline.keys['admin']}"},
    )
    assert edited.status_code == 200, edited.text
    second = pipeline.submit(documents(1))
    assert first["inventory"]["version"] == 1 and second["inventory"]["version"] == 2
    assert first["evidence_watermark"] >= 1
    assert second["evidence_watermark"] == first["evidence_watermark"]


def test_ndjson_with_header_line_and_with_query_parameter(pipeline):
    docs = documents(3)
    with_header = pipeline.client.post(
        "/v1/batches",
        content=ndjson({"inventory": "tiny-shop", "options": {"rationale": False}}, *docs),
        headers={**pipeline.ingest, **NDJSON},
    )
    assert with_header.status_code == 202, with_header.text
    assert with_header.json()["options"] == {"rationale": False}
    assert with_header.json()["counts"]["documents"] == 3
    with_query = pipeline.client.post(
        "/v1/batches?inventory=tiny-shop",
        content=b"\r\n".join(ndjson(d).rstrip(b"\n") for d in docs) + b"\n\n",
        headers={**pipeline.ingest, **NDJSON},
    )
    assert with_query.status_code == 202, with_query.text
    assert with_query.json()["counts"]["documents"] == 3


def test_ndjson_streamed_in_small_pieces(pipeline):
    """The body arrives in 7-byte pieces: lines are reassembled across pieces."""
    body = ndjson({"inventory": "tiny-shop"}, *documents(5))

    def pieces():
        for start in range(0, len(body), 7):
            yield body[start : start + 7]

    response = pipeline.client.post(
        "/v1/batches", content=pieces(), headers={**pipeline.ingest, **NDJSON}
    )
    assert response.status_code == 202, response.text
    assert response.json()["counts"]["documents"] == 5


def test_same_idempotency_key_same_body_returns_the_same_batch(pipeline):
    headers = {**pipeline.ingest, **NDJSON, "Idempotency-Key": "upload-42"}
    body = ndjson({"inventory": "tiny-shop"}, *documents(2))
    first = pipeline.client.post("/v1/batches", content=body, headers=headers)
    again = pipeline.client.post("/v1/batches", content=body, headers=headers)
    assert first.status_code == 202 and again.status_code == 200, again.text
    assert again.json()["id"] == first.json()["id"]
    assert again.headers["location"] == first.headers["location"]
    assert _stored(pipeline.settings)[0] == 1
    changed = ndjson({"inventory": "tiny-shop"}, *documents(3))
    clash = pipeline.client.post("/v1/batches", content=changed, headers=headers)
    assert assert_problem(clash, 409)["batch_id"] == first.json()["id"]
    assert _stored(pipeline.settings) == (1, 2, 1)


def test_idempotency_keys_belong_to_the_api_key(pipeline):
    body = {"inventory": "tiny-shop", "documents": documents(1)}
    mine = pipeline.client.post(
        "/v1/batches", json=body, headers={**pipeline.ingest, "Idempotency-Key": "k"}
    )
    theirs = pipeline.client.post(
        "/v1/batches",
        json=body,
        headers={"Authorization": f"Bearer {pipeline.keys['admin']}", "Idempotency-Key": "k"},
    )
    assert mine.status_code == theirs.status_code == 202
    assert mine.json()["id"] != theirs.json()["id"]


@pytest.mark.parametrize(
    ("body", "status", "line", "words"),
    [
        (
            b'{"inventory": "tiny-shop"}\n{"id": "a", "text": "bass"}\n{"id": "b", "text": \n',
            400,
            3,
            "not valid JSON",
        ),
        (b'{"inventory": "tiny-shop"}\n{"id": "a", "text": "caf\xe9 bass"}\n', 400, 2, "not UTF-8"),
        (
            b'{"inventory": "tiny-shop"}\n{"id": "a", "text": "x"}\n{"id": "a", "text": "y"}\n',
            422,
            3,
            "already used at line 2",
        ),
        (b'{"inventory": "tiny-shop"}\n{"id": "a", "txt": "x"}\n', 422, 2, "unknown member"),
        (b'{"id": "a", "text": "no header"}\n', 422, 1, "header"),
        (b'{"inventory": "tiny-shop"}\n{"id": "a"}\n', 422, 2, "needs 'text'"),
    ],
)
def test_bad_ndjson_names_its_line_and_stores_nothing(pipeline, body, status, line, words):
    response = pipeline.client.post(
        "/v1/batches", content=body, headers={**pipeline.ingest, **NDJSON}
    )
    problem = assert_problem(response, status)
    assert problem["line"] == line
    assert words in problem["detail"]
    assert _stored(pipeline.settings) == (0, 0, 0)


def test_bad_json_bodies(pipeline):
    post = pipeline.client.post
    headers = {**pipeline.ingest, "Content-Type": "application/json"}
    assert_problem(
        post("/v1/batches", content=b'{"inventory": "tiny-shop", "documents": [', headers=headers),
        400,
    )
    raw = b'{"inventory": "tiny-shop", "documents": [{"id": "a", "text": "\xff"}]}'
    assert (
        "UTF-8" in assert_problem(post("/v1/batches", content=raw, headers=headers), 400)["detail"]
    )
    empty = post("/v1/batches", json={"inventory": "tiny-shop", "documents": []}, headers=headers)
    assert "empty" in assert_problem(empty, 422)["detail"]
    duplicate = post(
        "/v1/batches",
        json={"inventory": "tiny-shop", "documents": [{"id": "x", "text": "a"}] * 2},
        headers=headers,
    )
    problem = assert_problem(duplicate, 422)
    assert problem["index"] == 1 and problem["pointer"] == "/documents/1"
    assert problem["first"] == {"index": 0, "pointer": "/documents/0"}
    unknown = post(
        "/v1/batches", json={"inventory": "no-such", "documents": documents(1)}, headers=headers
    )
    assert "no-such" in assert_problem(unknown, 404)["detail"]
    text = post(
        "/v1/batches",
        content=b"hello",
        headers={**headers, "Content-Type": "text/plain"},
    )
    assert_problem(text, 415)
    bad_option = post(
        "/v1/batches",
        json={"inventory": "tiny-shop", "documents": documents(1), "options": {"fast": True}},
        headers=headers,
    )
    assert "fast" in assert_problem(bad_option, 422)["detail"]
    surrogate = b'{"inventory": "tiny-shop", "documents": [{"id": "s", "text": "bass \\ud800"}]}'
    problem = assert_problem(post("/v1/batches", content=surrogate, headers=headers), 422)
    assert "surrogate" in problem["detail"]
    assert _stored(pipeline.settings) == (0, 0, 0)


def test_empty_ndjson_body_is_refused(pipeline):
    for body in (b"", b'{"inventory": "tiny-shop"}\n\n'):
        response = pipeline.client.post(
            "/v1/batches", content=body, headers={**pipeline.ingest, **NDJSON}
        )
        assert_problem(response, 422)
    assert _stored(pipeline.settings) == (0, 0, 0)


def test_submission_needs_an_ingest_key(pipeline):
    body = {"inventory": "tiny-shop", "documents": documents(1)}
    assert_problem(pipeline.client.post("/v1/batches", json=body), 401)
    review = {"Authorization": f"Bearer {pipeline.keys['review']}"}
    assert_problem(pipeline.client.post("/v1/batches", json=body, headers=review), 403)


@pytest.mark.parametrize(
    ("overrides", "body", "status", "limit"),
    [
        ({"max_documents_per_batch": 3}, {"documents": 4}, 413, "max_documents_per_batch"),
        ({"max_document_bytes": 40}, {"text": "bass " * 9}, 413, "max_document_bytes"),
        (
            {"max_occurrences_per_document": 2},
            {"text": "bass mouse bass"},
            422,
            "max_occurrences_per_document",
        ),
        ({"max_request_bytes": 300}, {"documents": 8}, 413, "max_request_bytes"),
    ],
)
@pytest.mark.parametrize("form", ["json", "ndjson"])
def test_every_limit_is_named_and_nothing_is_stored(
    make_pipeline, overrides, body, status, limit, form
):
    pipe = make_pipeline(**overrides)
    docs = documents(body.get("documents", 2))
    if "text" in body:
        docs[-1]["text"] = body["text"]
    if form == "json":
        response = pipe.client.post(
            "/v1/batches", json={"inventory": "tiny-shop", "documents": docs}, headers=pipe.ingest
        )
    else:
        response = pipe.client.post(
            "/v1/batches",
            content=ndjson({"inventory": "tiny-shop"}, *docs),
            headers={**pipe.ingest, **NDJSON},
        )
    problem = assert_problem(response, status)
    assert problem["limit"] == limit
    assert _stored(pipe.settings) == (0, 0, 0)


def _document_counts(settings, batch_id: str) -> list[int]:
    with session_scope(settings) as session:
        return list(
            session.scalars(
                select(BatchDocument.occurrence_count)
                .where(BatchDocument.batch_id == batch_id)
                .order_by(BatchDocument.position)
            )
        )


def _watch_counting(monkeypatch, settings, also=None) -> list[bool]:
    """Record, at each occurrence count, whether this process's SQLite write gate is held."""
    gate = write_gate(engine_for(settings.database_url))
    assert gate is not None
    held: list[bool] = []
    find = OccurrenceFinder.find

    def watched(finder, document):
        held.append(gate.locked())
        if also is not None:
            also(len(held))
        return find(finder, document)

    monkeypatch.setattr(OccurrenceFinder, "find", watched)
    return held


@pytest.mark.parametrize("database_url", ["sqlite"], indirect=True)
def test_on_sqlite_documents_are_counted_before_the_write_lock_is_taken(pipeline, monkeypatch):
    docs = documents(5)
    held = _watch_counting(monkeypatch, pipeline.settings)
    as_json = pipeline.submit(docs)
    as_ndjson = pipeline.client.post(
        "/v1/batches",
        content=ndjson({"inventory": "tiny-shop"}, *docs),
        headers={**pipeline.ingest, **NDJSON, "Idempotency-Key": "counted-first"},
    )
    assert as_ndjson.status_code == 202, as_ndjson.text
    assert len(held) == 2 * len(docs) and not any(held)
    first = _document_counts(pipeline.settings, as_json["id"])
    assert first == _document_counts(pipeline.settings, as_ndjson.json()["id"])
    assert sum(first) == as_json["counts"]["occurrences"] and min(first) >= 1


@pytest.mark.parametrize("database_url", ["sqlite"], indirect=True)
def test_on_sqlite_a_new_inventory_version_while_counting_means_a_recount(pipeline, monkeypatch):
    docs = documents(4)
    before = _document_counts(pipeline.settings, pipeline.submit(docs)["id"])

    def drop_mouse(document):
        document["terms"] = [t for t in document["terms"] if t["term"] != "mouse"]

    def edit_once(calls: int) -> None:
        if calls == 1:  # the submission is being counted with version 1
            with session_scope(pipeline.settings) as session:
                edit_inventory(session, pipeline.team_id, "tiny-shop", drop_mouse)

    held = _watch_counting(monkeypatch, pipeline.settings, also=edit_once)
    batch = pipeline.submit(docs)
    assert batch["inventory"]["version"] == 2
    assert not any(held[: len(docs)]) and all(held[len(docs) :])  # counted, then recounted
    monkeypatch.undo()
    after = _document_counts(pipeline.settings, batch["id"])
    assert after == _document_counts(pipeline.settings, pipeline.submit(docs)["id"])
    assert sum(after) < sum(before)  # "mouse" no longer counts
