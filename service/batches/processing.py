"""Processing one leased chunk, so that no crash loses or repeats a result.

First try (the chunk's first claim): tag all its documents in one engine call
and write every result, the documents' and the chunk's new states in one
transaction under the lease. If that engine call raises, or the chunk was
claimed before (its worker died or some document failed), the documents are
taken one at a time: each try is counted before it starts, each document's
results are committed on their own, and a document that fails is retried
later with backoff until WHICHSENSE_MAX_ATTEMPTS tries, then recorded as failed
with its error. Engine errors (EngineError: too large, bad inventory) are not
retried. A poison document thus fails alone and never fails its batch.

Stopping (SIGTERM): a whole-chunk call is finished and written; in one-at-a-
time mode the chunk is released between documents, its attempt refunded.
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal, Protocol

from sqlalchemy.orm import Session, sessionmaker

from service.batches.documents import stored_document
from service.batches.heartbeat import LeaseKeeper
from service.batches.leases import (
    Claim,
    LeaseLost,
    PendingDocument,
    complete_chunk,
    hold_lease,
    pending_documents,
    record_document_error,
    release_chunk,
    start_document_attempt,
    write_document_results,
)
from service.batches.taggers import Tagger
from service.config import Settings
from service.engine import EngineError
from service.store.clock import database_now
from service.store.database import read_only

log = logging.getLogger(__name__)

Outcome = Literal["done", "retry", "lease_lost", "released"]


@dataclass(frozen=True)
class RetryPolicy:
    """Backoff before a chunk with failed documents is tried again: base * 2^(tries-1)."""

    base_seconds: float = 5.0
    max_seconds: float = 300.0

    def delay(self, attempts: int) -> float:
        return min(self.max_seconds, self.base_seconds * 2 ** max(0, attempts - 1))


class Meter(Protocol):
    """Where processing reports what it did (the worker process counts it in Prometheus)."""

    def chunk(self, outcome: str) -> None: ...
    def document(self, outcome: str) -> None: ...
    def results(self, count: int) -> None: ...
    def tag_seconds(self, seconds: float) -> None: ...


class NoMeter:
    """A Meter that keeps nothing."""

    def chunk(self, outcome: str) -> None:
        pass

    def document(self, outcome: str) -> None:
        pass

    def results(self, count: int) -> None:
        pass

    def tag_seconds(self, seconds: float) -> None:
        pass


def _describe(exc: BaseException) -> str:
    return f"{type(exc).__name__}: {exc}"[:4000]


class ChunkProcessor:
    """Runs one claim to an outcome; see the module docstring."""

    def __init__(
        self,
        settings: Settings,
        sessions: sessionmaker[Session],
        tagger: Tagger,
        *,
        stop: threading.Event,
        retry: RetryPolicy,
        heartbeat_seconds: float | None = None,
        meter: Meter | None = None,
    ) -> None:
        self.settings = settings
        self.sessions = sessions
        self.reads = read_only(sessions)
        self.tagger = tagger
        self.stop = stop
        self.retry = retry
        self.heartbeat_seconds = heartbeat_seconds or max(0.2, settings.lease_seconds / 3)
        self.meter: Meter = meter or NoMeter()

    def run(self, claim: Claim) -> Outcome:
        keeper = LeaseKeeper(
            self.sessions,
            claim,
            lease_seconds=self.settings.lease_seconds,
            interval=self.heartbeat_seconds,
        )
        try:
            with keeper:
                outcome = self._run(claim, keeper)
        except LeaseLost as exc:
            log.warning("%s; its results were not written", exc)
            outcome = "lease_lost"
        self.meter.chunk(outcome)
        return outcome

    def _run(self, claim: Claim, keeper: LeaseKeeper) -> Outcome:
        with self.reads() as session:  # no write lock while reading: the lease guards them
            documents = pending_documents(session, claim)
            session.rollback()
        if claim.attempts == 1 and documents:
            try:
                tagged = self._tag(claim, documents)
            except Exception as exc:
                log.warning(
                    "chunk %s of batch %s failed as a whole (%s); trying its documents one by one",
                    claim.chunk_index,
                    claim.batch_id,
                    _describe(exc),
                )
            else:
                if keeper.lost.is_set():
                    raise LeaseLost(f"chunk {claim.chunk_id} of batch {claim.batch_id} expired")
                return self._write_all(claim, documents, tagged)
        return self._one_by_one(claim, documents, keeper)

    def _tag(
        self, claim: Claim, documents: Sequence[PendingDocument]
    ) -> list[list[dict[str, Any]]]:
        started = time.perf_counter()
        results = self.tagger.tag(
            claim,
            [stored_document(d.document_id, d.fields) for d in documents],
            rationale=bool(claim.options.get("rationale", True)),
        )
        self.meter.tag_seconds(time.perf_counter() - started)
        if [r.document_id for r in results] != [d.document_id for d in documents]:
            raise RuntimeError("the engine returned results for other documents than asked")
        return [[o.to_json() for o in r.occurrences] for r in results]

    def _write_all(
        self,
        claim: Claim,
        documents: Sequence[PendingDocument],
        tagged: list[list[dict[str, Any]]],
    ) -> Outcome:
        with self.sessions.begin() as session:
            batch, chunk = hold_lease(session, claim)
            now = database_now(session)
            written = 0
            for document, results in zip(documents, tagged, strict=True):
                if write_document_results(session, document, results, now):
                    written += len(results)
                    self.meter.document("done")
            complete_chunk(session, batch, chunk)
        self.meter.results(written)
        return "done"

    def _one_by_one(
        self, claim: Claim, documents: Sequence[PendingDocument], keeper: LeaseKeeper
    ) -> Outcome:
        max_attempts = self.settings.max_attempts
        for document in documents:
            if keeper.lost.is_set():
                raise LeaseLost(f"chunk {claim.chunk_id} of batch {claim.batch_id} expired")
            if self.stop.is_set():
                with self.sessions.begin() as session:
                    release_chunk(session, claim, delay_seconds=0, refund_attempt=True)
                return "released"
            with self.sessions.begin() as session:
                hold_lease(session, claim)
                started = start_document_attempt(
                    session, document.row_id, max_attempts, database_now(session)
                )
            if started is None:
                continue
            try:
                results = self._tag(claim, [started])[0]
            except Exception as exc:
                self._record_error(claim, started, exc)
                continue
            with self.sessions.begin() as session:
                hold_lease(session, claim)
                if write_document_results(session, started, results, database_now(session)):
                    self.meter.document("done")
                    self.meter.results(len(results))
        with self.sessions.begin() as session:
            batch, chunk = hold_lease(session, claim)
            if complete_chunk(session, batch, chunk):
                return "done"
            delay = self.retry.delay(claim.attempts)
            release_chunk(session, claim, delay_seconds=delay, error="documents left to retry")
        return "retry"

    def _record_error(self, claim: Claim, document: PendingDocument, exc: Exception) -> None:
        permanent = isinstance(exc, EngineError)
        log.warning(
            "document %r of batch %s failed (try %d): %s",
            document.document_id,
            claim.batch_id,
            document.attempts,
            _describe(exc),
        )
        with self.sessions.begin() as session:
            hold_lease(session, claim)
            failed = record_document_error(
                session,
                document.row_id,
                _describe(exc),
                permanent=permanent,
                max_attempts=self.settings.max_attempts,
                now=database_now(session),
            )
        self.meter.document("failed" if failed else "error")
