"""Failing documents: a poison document fails alone after its tries, engine errors fail
at once, a document that kills its worker is given up, a batch with nothing processed fails."""

from __future__ import annotations

import time
from collections.abc import Sequence

from service.batches.leases import Claim
from service.batches.taggers import EngineTagger
from service.engine import Document, DocumentResult
from tests.pipeline import assert_same_results, documents


class PoisonTagger:
    """The real engine, except that documents whose id starts with `poison` raise."""

    def __init__(self, inner: EngineTagger, error: type[BaseException] = RuntimeError) -> None:
        self.inner = inner
        self.error = error
        self.calls = 0

    def tag(
        self, claim: Claim, documents: Sequence[Document], *, rationale: bool
    ) -> list[DocumentResult]:
        self.calls += 1
        for document in documents:
            if document.doc_id.startswith("poison"):
                raise self.error(f"cannot tag {document.doc_id}")
        return self.inner.tag(claim, documents, rationale=rationale)


def _tagger(pipe, error: type[BaseException] = RuntimeError) -> PoisonTagger:
    probe = pipe.worker()
    return PoisonTagger(EngineTagger(pipe.settings, probe.sessions), error)


def test_a_poison_document_fails_alone(make_pipeline):
    pipe = make_pipeline(chunk_size=4, max_attempts=3)
    docs = documents(6)
    docs[2] = {"id": "poison-1", "text": "The bass is poisoned."}
    batch = pipe.submit(docs)
    tagger = _tagger(pipe)
    pipe.worker(tagger=tagger).run_until_idle()
    status = pipe.status(batch["id"])
    assert status["state"] == "done"
    assert status["counts"]["processed_documents"] == 5
    assert status["counts"]["failed_documents"] == 1
    failures = pipe.client.get(f"/v1/batches/{batch['id']}/failures", headers=pipe.ingest).json()
    assert failures["failures"] == [
        {
            "document_id": "poison-1",
            "position": 2,
            "attempts": 3,
            "error": "RuntimeError: cannot tag poison-1",
        }
    ]
    healthy = [d for d in docs if d["id"] != "poison-1"]
    assert_same_results(pipe.all_results(batch["id"]), pipe.sync_results(healthy))
    summary = pipe.client.get(
        f"/v1/batches/{batch['id']}/documents/poison-1/summary", headers=pipe.ingest
    ).json()
    assert summary["state"] == "failed" and "cannot tag" in summary["error"]


def test_engine_errors_are_not_retried(make_pipeline):
    """A worker whose engine takes smaller documents than the API accepted: DocumentTooLarge."""
    pipe = make_pipeline(chunk_size=4, max_attempts=3)
    docs = [
        {"id": "short", "text": "A bass."},
        {"id": "long", "text": "The bass was played loudly all night long. " * 3},
    ]
    batch = pipe.submit(docs)
    strict = make_pipeline(chunk_size=4, max_attempts=3, max_document_bytes=60)
    strict.worker().run_until_idle()
    failures = pipe.client.get(f"/v1/batches/{batch['id']}/failures", headers=pipe.ingest).json()
    [failed] = failures["failures"]
    assert failed["document_id"] == "long" and failed["attempts"] == 1
    assert failed["error"].startswith("DocumentTooLarge")
    assert pipe.status(batch["id"])["state"] == "done"


def test_a_batch_where_nothing_could_be_processed_fails(make_pipeline):
    pipe = make_pipeline(chunk_size=4, max_attempts=2)
    batch = pipe.submit([{"id": f"poison-{n}", "text": "bass"} for n in range(3)])
    pipe.worker(tagger=_tagger(pipe)).run_until_idle()
    status = pipe.status(batch["id"])
    assert status["state"] == "failed"
    assert status["counts"]["failed_documents"] == 3
    assert "no document could be processed" in status["error"]
    assert "cannot tag poison-0" in status["error"]


class WorkerDeath(BaseException):
    """Stands in for the process dying: not an Exception, so nothing in the worker catches it."""


def test_a_document_that_kills_its_worker_is_given_up(make_pipeline):
    pipe = make_pipeline(chunk_size=3, max_attempts=3, lease_seconds=0.05)
    docs = documents(3)
    docs[1] = {"id": "poison-killer", "text": "This bass brings the worker down."}
    batch = pipe.submit(docs)
    tagger = _tagger(pipe, WorkerDeath)
    deaths = 0
    for _ in range(10):
        worker = pipe.worker(tagger=tagger)
        try:
            worked = worker.run_until_idle()
        except WorkerDeath:
            deaths += 1
            time.sleep(0.1)  # the dead worker's lease runs out
            continue
        if not worked:
            break
    # 1 whole-chunk try + 3 counted tries of the document alone, then it is given up.
    assert deaths == 4
    status = pipe.status(batch["id"])
    assert status["state"] == "done" and status["counts"]["failed_documents"] == 1
    failures = pipe.client.get(f"/v1/batches/{batch['id']}/failures", headers=pipe.ingest).json()
    [failed] = failures["failures"]
    assert failed["document_id"] == "poison-killer"
    assert "gave up after 3 attempts" in failed["error"]
    healthy = [d for d in docs if d["id"] != "poison-killer"]
    assert_same_results(pipe.all_results(batch["id"]), pipe.sync_results(healthy))


def test_stop_releases_the_chunk_between_documents(make_pipeline):
    """Stopping (SIGTERM) in one-at-a-time mode hands the chunk back, attempt refunded."""
    from service.store.database import session_scope
    from service.store.models import BatchChunk, BatchDocument

    pipe = make_pipeline(chunk_size=3, max_attempts=3)
    docs = documents(3)
    docs[0] = {"id": "poison-a", "text": "bass"}
    batch = pipe.submit(docs)
    tagger = _tagger(pipe)
    worker = pipe.worker(tagger=tagger)

    original = tagger.tag

    def tag_then_stop(claim, documents, *, rationale):  # type: ignore[no-untyped-def]
        try:
            return original(claim, documents, rationale=rationale)
        finally:
            if len(documents) == 1:
                worker.stop.set()  # SIGTERM arrives while the first document is tagged

    tagger.tag = tag_then_stop  # type: ignore[method-assign]
    assert worker.process_one_chunk()
    with session_scope(pipe.settings) as session:
        chunk = session.query(BatchChunk).filter_by(batch_id=batch["id"]).one()
        # Released, and the claim's attempt refunded: stopping is not the chunk's fault.
        assert (chunk.state, chunk.attempts, chunk.lease_token) == ("pending", 0, None)
        tries = {d.document_id: d.attempts for d in session.query(BatchDocument)}
    assert tries == {"poison-a": 1, "doc-1": 0, "doc-2": 0}
    assert pipe.status(batch["id"])["counts"]["pending_documents"] == 3
    tagger.tag = original  # type: ignore[method-assign]
    worker.stop.clear()
    worker.run_until_idle()
    assert pipe.status(batch["id"])["counts"]["processed_documents"] == 2
