"""Queue gauges computed from the database when Prometheus scrapes the API.

The API process holds no queue state of its own, so instead of gauges it keeps
up to date, a collector counts rows at scrape time: batches by state, chunks by
state (with expired leases apart: a sign of dead workers), due webhooks, and
the age of the oldest due chunk (how far behind the workers are).
"""

from __future__ import annotations

import logging
from collections.abc import Iterator

from prometheus_client import CollectorRegistry, Counter
from prometheus_client.core import GaugeMetricFamily
from prometheus_client.registry import Collector
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from service.api.metrics import REGISTRY
from service.store.clock import as_utc, database_now
from service.store.models import BATCH_STATES, Batch, BatchChunk

log = logging.getLogger(__name__)

SUBMITTED = Counter(
    "whichsense_batches_submitted_total",
    "Batches accepted by this API process, by body format.",
    ["format"],
    registry=REGISTRY,
)


class QueueCollector(Collector):
    """Counts queue rows in the app's database at each scrape."""

    def __init__(self, sessions: sessionmaker[Session]) -> None:
        self.sessions = sessions

    def describe(self) -> Iterator[GaugeMetricFamily]:
        """The families without values, so registering never touches the database."""
        return iter(self._families())

    def _families(self) -> tuple[GaugeMetricFamily, ...]:
        batches = GaugeMetricFamily(
            "whichsense_batches", "Batches in the database, by state.", labels=["state"]
        )
        chunks = GaugeMetricFamily(
            "whichsense_chunks",
            "Chunks of unfinished batches, by state (leased_expired: its worker stopped "
            "heartbeating).",
            labels=["state"],
        )
        webhooks = GaugeMetricFamily(
            "whichsense_webhooks_pending", "Batch webhooks not yet delivered or given up."
        )
        lag = GaugeMetricFamily(
            "whichsense_queue_oldest_due_seconds",
            "Age of the oldest chunk that is due and not leased (0 when none).",
        )
        return batches, chunks, webhooks, lag

    def collect(self) -> Iterator[GaugeMetricFamily]:
        batches, chunks, webhooks, lag = self._families()
        try:
            with self.sessions() as session:
                now = database_now(session)
                by_state = dict(
                    session.execute(select(Batch.state, func.count()).group_by(Batch.state)).all()
                )
                chunk_counts = {
                    name: session.scalar(select(func.count()).select_from(BatchChunk).where(*where))
                    or 0
                    for name, where in (
                        ("pending", (BatchChunk.state == "pending",)),
                        ("leased", (BatchChunk.state == "leased", BatchChunk.available_at > now)),
                        (
                            "leased_expired",
                            (BatchChunk.state == "leased", BatchChunk.available_at <= now),
                        ),
                    )
                }
                pending_webhooks = session.scalar(
                    select(func.count()).select_from(Batch).where(Batch.webhook_state == "pending")
                )
                oldest = session.scalar(
                    select(func.min(BatchChunk.available_at)).where(
                        BatchChunk.state == "pending", BatchChunk.available_at <= now
                    )
                )
                session.rollback()
        except Exception as exc:  # a scrape must never fail because the database is down
            log.warning("queue metrics unavailable: %s", exc)
            return
        for state in BATCH_STATES:
            batches.add_metric([state], float(by_state.get(state, 0)))
        for name, value in chunk_counts.items():
            chunks.add_metric([name], float(value))
        webhooks.add_metric([], float(pending_webhooks or 0))
        lag.add_metric([], max(0.0, (now - as_utc(oldest)).total_seconds()) if oldest else 0.0)
        yield batches
        yield chunks
        yield webhooks
        yield lag


def queue_registry(sessions: sessionmaker[Session]) -> CollectorRegistry:
    """A registry holding the queue gauges of one app's database (one per app, so two
    apps in a process never report each other's queue)."""
    registry = CollectorRegistry(auto_describe=True)
    registry.register(QueueCollector(sessions))
    return registry
