"""Prometheus metrics of the worker (served by `whichsense worker --metrics-port`, or by
the API's /metrics when the worker is embedded)."""

from __future__ import annotations

from prometheus_client import CollectorRegistry, Counter, Histogram

REGISTRY = CollectorRegistry(auto_describe=True)
CHUNKS = Counter(
    "whichsense_worker_chunks_total",
    "Chunks this process finished with, by outcome (done, retry, lease_lost, released).",
    ["outcome"],
    registry=REGISTRY,
)
DOCUMENTS = Counter(
    "whichsense_worker_documents_total",
    "Documents this process finished with, by outcome (done, failed, error).",
    ["outcome"],
    registry=REGISTRY,
)
RESULTS = Counter(
    "whichsense_worker_results_total", "Occurrence results written.", registry=REGISTRY
)
TAG_SECONDS = Histogram(
    "whichsense_worker_tag_seconds",
    "Time to tag one chunk (or one document, when isolating a failure).",
    registry=REGISTRY,
    buckets=(0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60, 120),
)
WEBHOOKS = Counter(
    "whichsense_worker_webhooks_total",
    "Webhook delivery attempts, by outcome (delivered, retry, failed).",
    ["outcome"],
    registry=REGISTRY,
)
ALL = (CHUNKS, DOCUMENTS, RESULTS, TAG_SECONDS, WEBHOOKS)


class PrometheusMeter:
    """The batch wing's processing Meter, counted in this process's registry."""

    def chunk(self, outcome: str) -> None:
        CHUNKS.labels(outcome).inc()

    def document(self, outcome: str) -> None:
        DOCUMENTS.labels(outcome).inc()

    def results(self, count: int) -> None:
        RESULTS.inc(count)

    def tag_seconds(self, seconds: float) -> None:
        TAG_SECONDS.observe(seconds)
