"""The worker's job loop: deliver due webhooks, claim a chunk, process it, repeat; now
and then purge batches past their team's retention.

When there is nothing to do it sleeps `poll_seconds` (with jitter, so many
workers do not poll in step). A database error never ends the loop: it is
logged and the loop backs off, so a worker rides out a database restart.
"""

from __future__ import annotations

import logging
import os
import random
import secrets
import socket
import threading
import time
from dataclasses import dataclass, field

from sqlalchemy.orm import Session, sessionmaker

from service.batches.leases import claim_next
from service.batches.processing import ChunkProcessor, RetryPolicy
from service.batches.repository import purge_expired
from service.batches.taggers import EngineTagger, Tagger
from service.batches.webhooks.sending import WebhookPolicy, deliver_next
from service.config import Settings
from service.store.clock import database_now
from service.store.database import session_factory
from worker import metrics

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class WorkerPolicy:
    """Timings that are the worker's own (leases, tries and chunk size are in Settings)."""

    poll_seconds: float = 1.0
    heartbeat_seconds: float | None = None  # default: a third of the lease
    retry: RetryPolicy = field(default_factory=RetryPolicy)
    webhooks: WebhookPolicy = field(default_factory=WebhookPolicy)
    retention_check_seconds: float = 300.0


def default_name() -> str:
    return f"{socket.gethostname()}:{os.getpid()}:{secrets.token_hex(3)}"


class Worker:
    """One worker: call `run()` in a thread or process; set `stop` to end it cleanly."""

    def __init__(
        self,
        settings: Settings,
        *,
        name: str | None = None,
        tagger: Tagger | None = None,
        policy: WorkerPolicy | None = None,
        stop: threading.Event | None = None,
        sessions: sessionmaker[Session] | None = None,
    ) -> None:
        self.settings = settings
        self.name = name or default_name()
        self.sessions = sessions or session_factory(settings.database_url)
        self.tagger = tagger or EngineTagger(settings, self.sessions)
        self.policy = policy or WorkerPolicy()
        self.stop = stop or threading.Event()
        self._retention_due = 0.0
        self.chunks = ChunkProcessor(
            settings,
            self.sessions,
            self.tagger,
            stop=self.stop,
            retry=self.policy.retry,
            heartbeat_seconds=self.policy.heartbeat_seconds,
            meter=metrics.PrometheusMeter(),
        )

    def run(self) -> None:
        log.info("worker %s started", self.name)
        failures = 0
        while not self.stop.is_set():
            try:
                busy = self.run_once()
                failures = 0
            except Exception:
                failures += 1
                log.exception("worker %s: loop error (%d in a row)", self.name, failures)
                busy = False
            if not busy:
                pause = self.policy.poll_seconds * (1 + min(failures, 5))
                self.stop.wait(pause * random.uniform(0.8, 1.2))
        log.info("worker %s stopped", self.name)

    def run_once(self) -> bool:
        """Deliver one due webhook and process one chunk; True if there was anything to do."""
        self.purge_expired_batches()
        delivered = self.deliver_one_webhook()
        if self.stop.is_set():
            return delivered
        return self.process_one_chunk() or delivered

    def purge_expired_batches(self, *, force: bool = False) -> int:
        """Every `retention_check_seconds`, delete the documents and results of finished
        batches past their team's retention (counts stay; each purge is audited)."""
        now = time.monotonic()
        if not force and now < self._retention_due:
            return 0
        self._retention_due = now + self.policy.retention_check_seconds
        total = 0
        while True:
            with self.sessions.begin() as session:
                purged = purge_expired(session, database_now(session))
            total += purged
            if purged == 0 or self.stop.is_set():
                break
        if total:
            log.info("purged %d batches past their team's retention", total)
        return total

    def run_until_idle(self, max_rounds: int = 10_000) -> int:
        """Work until nothing is due (for tests and one-shot runs); rounds that did work."""
        rounds = 0
        while rounds < max_rounds and not self.stop.is_set() and self.run_once():
            rounds += 1
        return rounds

    def process_one_chunk(self) -> bool:
        claim = claim_next(self.sessions, self.name, self.settings.lease_seconds)
        if claim is None:
            return False
        outcome = self.chunks.run(claim)
        log.info(
            "chunk %d of batch %s (try %d): %s",
            claim.chunk_index,
            claim.batch_id,
            claim.attempts,
            outcome,
        )
        return True

    def deliver_one_webhook(self) -> bool:
        done = deliver_next(
            self.sessions,
            self.policy.webhooks,
            timeout=self.settings.webhook_timeout_seconds,
            allow_private=self.settings.allow_private_webhooks,
        )
        if done is None:
            return False
        due, outcome = done
        metrics.WEBHOOKS.labels(outcome).inc()
        log.info("webhook for batch %s, try %d: %s", due.batch_id, due.attempt, outcome)
        return True
