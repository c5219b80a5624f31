"""The status document of a batch, shared by the API's batch status and the webhook body.

Links are built from the batch's URL, which the caller names: the API from its
routes, the webhook from the URL stored at submission. No route path is spelled here."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import asdict, dataclass
from datetime import datetime
from typing import Any

from service.store.clock import as_utc_or_none
from service.store.models import Batch, WebhookAttempt


@dataclass(frozen=True)
class BatchCounts:
    """Documents by state and results by status, counted from the rows themselves."""

    documents: int
    processed_documents: int
    failed_documents: int
    cancelled_documents: int
    pending_documents: int
    occurrences: int
    processed_occurrences: int
    assigned: int
    review: int
    abstained: int
    reviewed: int = 0  # results a person decided in the review queue

    @property
    def progress(self) -> float:
        """Share of documents that reached an end (done or failed); 1.0 for an empty batch."""
        if self.documents == 0:
            return 1.0
        return round((self.processed_documents + self.failed_documents) / self.documents, 4)


def _time(value: datetime | None) -> str | None:
    moment = as_utc_or_none(value)
    return moment.isoformat().replace("+00:00", "Z") if moment is not None else None


def batch_links(root: str) -> dict[str, str]:
    """The links of a batch whose own URL is `root`."""
    return {
        "self": root,
        "results": f"{root}/results",
        "summaries": f"{root}/summaries",
        "failures": f"{root}/failures",
    }


def status_document(
    batch: Batch, counts: BatchCounts, attempts: Sequence[WebhookAttempt] = (), *, url: str
) -> dict[str, Any]:
    """The batch as `GET` shows it; `url` is the batch's own URL (its links start there)."""
    started, finished = as_utc_or_none(batch.started_at), as_utc_or_none(batch.finished_at)
    webhook = None
    if batch.callback_url:
        webhook = {
            "url": batch.callback_url,
            "state": batch.webhook_state,
            "attempts": [
                {
                    "attempt": a.attempt,
                    "attempted_at": _time(a.attempted_at),
                    "status_code": a.status_code,
                    "error": a.error,
                    "duration_seconds": round(a.duration_seconds, 4),
                }
                for a in attempts
            ],
        }
    return {
        "id": batch.id,
        "state": batch.state,
        "inventory": {"name": batch.inventory_name, "version": batch.inventory_version},
        "evidence_watermark": batch.evidence_watermark,
        "options": batch.options,
        "counts": asdict(counts),
        "progress": counts.progress,
        "timings": {
            "created_at": _time(batch.created_at),
            "started_at": _time(started),
            "finished_at": _time(finished),
            "run_seconds": (
                round((finished - started).total_seconds(), 3) if started and finished else None
            ),
        },
        "error": batch.error,
        "purged_at": _time(batch.purged_at),
        "webhook": webhook,
        "links": batch_links(url),
    }


def webhook_body(batch: Batch, counts: BatchCounts) -> dict[str, Any]:
    """What the callback URL receives when the batch ends."""
    links = batch_links(batch.base_url)
    return {
        "event": batch.webhook_event or "batch.finished",
        "batch_id": batch.id,
        "state": batch.state,
        "inventory": {"name": batch.inventory_name, "version": batch.inventory_version},
        "counts": asdict(counts),
        "finished_at": _time(batch.finished_at),
        "status_url": links["self"],
        "results_url": links["results"],
    }
