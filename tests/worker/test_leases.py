"""Leases on the database: a stale holder never writes, heartbeats keep a lease,
expired leases are reclaimed, and SKIP LOCKED keeps PostgreSQL claimers apart."""

from __future__ import annotations

import threading
import time

import pytest
from sqlalchemy import event, func, insert, select
from sqlalchemy.exc import IntegrityError

from service.batches import processing
from service.batches.heartbeat import LeaseKeeper
from service.batches.leases import (
    LeaseLost,
    claim_chunk,
    hold_lease,
    pending_documents,
    release_chunk,
    write_document_results,
)
from service.store.database import engine_for, session_factory, write_gate
from service.store.models import BatchChunk, BatchResult
from service.tagging.engines import EngineCache
from tests.pipeline import assert_same_results, documents


def test_an_expired_lease_is_reclaimed_and_the_old_holder_writes_nothing(make_pipeline):
    pipe = make_pipeline(chunk_size=10)
    docs = documents(3)
    batch = pipe.submit(docs)
    sessions = session_factory(pipe.settings.database_url)
    with sessions.begin() as session:
        stale = claim_chunk(session, "slow-worker", lease_seconds=0.01)
    time.sleep(0.05)
    with sessions.begin() as session:
        fresh = claim_chunk(session, "other-worker", lease_seconds=60)
    assert stale is not None and fresh is not None
    assert fresh.chunk_id == stale.chunk_id and fresh.attempts == 2 and fresh.token != stale.token
    worker = pipe.worker()
    assert worker.chunks.run(stale) == "lease_lost"
    assert pipe.all_results(batch["id"]) == []
    assert worker.chunks.run(fresh) == "done"
    assert_same_results(pipe.all_results(batch["id"]), pipe.sync_results(docs))
    with sessions.begin() as session, pytest.raises(LeaseLost):
        hold_lease(session, fresh)  # done: the token no longer holds anything


def test_results_are_written_once_per_document(make_pipeline):
    pipe = make_pipeline(chunk_size=10)
    pipe.submit(documents(1))
    sessions = session_factory(pipe.settings.database_url)
    with sessions.begin() as session:
        claim = claim_chunk(session, "w", lease_seconds=60)
        assert claim is not None
        document = pending_documents(session, claim)[0]
    result = {
        "field": "text", "occurrence_index": 0, "term": "bass", "sense_id": "bass.fish",
        "status": "assigned", "confidence": 0.9,
    }  # fmt: skip
    with sessions.begin() as session:
        hold_lease(session, claim)
        assert write_document_results(session, document, [result], claim_time(session))
    with sessions.begin() as session:
        hold_lease(session, claim)
        assert not write_document_results(session, document, [result], claim_time(session))
    with pytest.raises(IntegrityError), sessions.begin() as session:
        row = {
            "batch_id": claim.batch_id, "document_position": 0,
            "document_id": document.document_id, "result": result,
        } | {k: v for k, v in result.items()}  # fmt: skip
        session.execute(insert(BatchResult), [row])
    with sessions() as session:
        assert session.scalar(select(func.count()).select_from(BatchResult)) == 1


def claim_time(session):
    from service.store.clock import database_now

    return database_now(session)


def test_heartbeats_keep_the_lease(make_pipeline):
    pipe = make_pipeline(chunk_size=10)
    pipe.submit(documents(2))
    sessions = session_factory(pipe.settings.database_url)
    with sessions.begin() as session:
        claim = claim_chunk(session, "beating", lease_seconds=1.0)
    assert claim is not None
    with LeaseKeeper(sessions, claim, lease_seconds=1.0, interval=0.1) as keeper:
        time.sleep(1.6)  # past the first expiry: only the heartbeats keep the lease
        with sessions.begin() as session:
            assert claim_chunk(session, "thief", lease_seconds=60) is None
        assert not keeper.lost.is_set()
    deadline = time.monotonic() + 10
    taken = None
    while taken is None and time.monotonic() < deadline:  # no more heartbeats: it runs out
        time.sleep(0.2)
        with sessions.begin() as session:
            taken = claim_chunk(session, "thief", lease_seconds=60)
    assert taken is not None and taken.chunk_id == claim.chunk_id


def test_a_keeper_notices_a_lost_lease(make_pipeline):
    pipe = make_pipeline(chunk_size=10)
    pipe.submit(documents(1))
    sessions = session_factory(pipe.settings.database_url)
    with sessions.begin() as session:
        claim = claim_chunk(session, "w", lease_seconds=60)
    assert claim is not None
    with LeaseKeeper(sessions, claim, lease_seconds=60, interval=0.05) as keeper:
        with sessions.begin() as session:
            assert release_chunk(session, claim, delay_seconds=0)
        assert keeper.lost.wait(5)


def test_release_on_stop_refunds_the_attempt(make_pipeline):
    pipe = make_pipeline(chunk_size=10)
    pipe.submit(documents(1))
    sessions = session_factory(pipe.settings.database_url)
    with sessions.begin() as session:
        claim = claim_chunk(session, "w", lease_seconds=60)
    assert claim is not None
    with sessions.begin() as session:
        assert release_chunk(session, claim, delay_seconds=0, refund_attempt=True)
    with sessions.begin() as session:
        chunk = session.get_one(BatchChunk, claim.chunk_id)
        assert (chunk.state, chunk.attempts, chunk.lease_token) == ("pending", 0, None)
        assert not release_chunk(session, claim, delay_seconds=0)  # not ours any more


def test_concurrent_claimers_skip_each_others_rows(make_pipeline, database_url):
    """PostgreSQL: a claimer does not wait on a row another open transaction has locked."""
    if not database_url.startswith("postgresql"):
        pytest.skip("SKIP LOCKED is PostgreSQL's; SQLite serialises claimers instead")
    pipe = make_pipeline(chunk_size=1)
    pipe.submit(documents(3))
    sessions = session_factory(pipe.settings.database_url)
    first_session = sessions()
    first = claim_chunk(first_session, "a", lease_seconds=60)  # transaction left open
    claimed: list = []

    def other() -> None:
        with sessions.begin() as session:
            claimed.append(claim_chunk(session, "b", lease_seconds=60))

    thread = threading.Thread(target=other)
    thread.start()
    thread.join(10)
    assert not thread.is_alive(), "the second claimer waited on the first one's lock"
    first_session.commit()
    first_session.close()
    assert first is not None and claimed[0] is not None
    assert claimed[0].chunk_id != first.chunk_id


def _begins_immediate(url: str) -> list[str]:
    """The write transactions (BEGIN IMMEDIATE) this process starts on the SQLite `url`."""
    begun: list[str] = []

    def record(_conn, _cursor, statement, *_args) -> None:
        if statement.startswith("BEGIN IMMEDIATE"):
            begun.append(statement)

    event.listen(engine_for(url), "before_cursor_execute", record)
    return begun


@pytest.mark.parametrize("database_url", ["sqlite"], indirect=True)
def test_the_worker_reads_its_documents_and_engine_without_the_write_lock(
    make_pipeline, monkeypatch
):
    pipe = make_pipeline(chunk_size=10)
    docs = documents(3)
    batch = pipe.submit(docs)
    gate = write_gate(engine_for(pipe.settings.database_url))
    assert gate is not None
    held: dict[str, list[bool]] = {"documents": [], "engine": []}
    read_documents = processing.pending_documents
    find_engine = EngineCache.engine

    def documents_read(session, claim):
        found = read_documents(session, claim)
        held["documents"].append(gate.locked())  # a write session would hold it by now
        return found

    def engine_found(cache, session, settings, pin, spec=None):
        found = find_engine(cache, session, settings, pin, spec)
        held["engine"].append(gate.locked())
        return found

    monkeypatch.setattr(processing, "pending_documents", documents_read)
    monkeypatch.setattr(EngineCache, "engine", engine_found)
    assert pipe.worker().run_until_idle() >= 1
    assert held == {"documents": [False], "engine": [False]}
    assert_same_results(pipe.all_results(batch["id"]), pipe.sync_results(docs))


@pytest.mark.parametrize("database_url", ["sqlite"], indirect=True)
def test_an_idle_worker_polls_without_a_write_transaction(make_pipeline):
    pipe = make_pipeline()
    worker = pipe.worker()
    begun = _begins_immediate(pipe.settings.database_url)
    assert not worker.process_one_chunk() and not worker.deliver_one_webhook()
    assert begun == []
    pipe.submit(documents(1))
    begun.clear()
    assert worker.process_one_chunk()  # claims, then writes: write transactions again
    assert begun
