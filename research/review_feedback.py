"""Does the review queue pay off? Accuracy and queue share on the demo inventory before and
after 50 queue decisions simulated from gold labels, through the service's own code path.

Labels are split by document as the demo does (hash of the document id): the even half is
stored as evidence and the temperature fitted on it; the odd half is split again by
document into a *pool* (its documents form the batch the reviewer works through) and a
*test* part (never decided; a third by default). The script:

1. submits the pool and test documents as two batches and lets a worker tag them;
2. measures accuracy on the test labels and the test batch's queue share (review +
   abstained over all occurrences);
3. claims items of the pool batch (most useful first, or another order) and decides each
   with its gold label through `record_decision` + `rescore_term`, exactly as the routes
   do, until 50 are decided (items without a gold label are skipped);
4. submits the test documents again (a fresh batch pins the grown evidence) and measures
   again; also prints how many test-batch items the re-scoring resolved in place.

    .venv/bin/python research/review_feedback.py [--decisions 50] [--order useful]
"""

from __future__ import annotations

import argparse
import hashlib
import json
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from fastapi.testclient import TestClient
from sqlalchemy import select

from service.api.app import create_app
from service.cli.demo import split_labels
from service.config import Settings
from service.engine import DEFAULT_TEMPERATURE, PrototypeBook, calibrate_book
from service.engine.types import Evidence
from service.review.decisions import record_decision, rescore_term
from service.review.queue import QueueFilter, claim_items, set_auto_resolve, sync_queue
from service.store import inventories
from service.store.database import session_scope, upgrade
from service.store.evidence import add_evidence, load_evidence
from service.store.keys import create_key
from service.store.models import BatchResult, ReviewItem
from service.store.teams import create_team
from service.tagging.engines import shared_engines
from worker.loop import Worker

CORPUS = Path(__file__).resolve().parent.parent / "demo_corpus"


def _documents() -> dict[str, dict[str, Any]]:
    with (CORPUS / "documents.jsonl").open(encoding="utf-8") as stream:
        return {doc["id"]: doc for doc in map(json.loads, stream)}


def _gold(labels: list[dict[str, Any]], docs: dict[str, dict[str, Any]]) -> dict[tuple, str]:
    """(document id, field, start) -> gold sense, located in the submitted documents."""
    found = {}
    for label in labels:
        doc = docs.get(label["document_id"])
        if doc is None:
            continue
        fields = {"text": doc.get("text", ""), **doc.get("fields", {})}
        for name, text in fields.items():
            at = text.find(label["text"])
            if at >= 0:
                found[(label["document_id"], name, at + label["start"])] = label["sense"]
                break
    return found


def _submit(client: TestClient, key: str, docs: list[dict[str, Any]], worker: Worker) -> str:
    response = client.post(
        "/v1/batches",
        json={"inventory": "lantern-lane", "documents": docs, "options": {"rationale": False}},
        headers={"Authorization": f"Bearer {key}"},
    )
    response.raise_for_status()
    worker.run_until_idle()
    return str(response.json()["id"])


def _results(settings: Settings, batch_id: str) -> Iterator[dict[str, Any]]:
    with session_scope(settings) as session:
        yield from [
            row.result
            for row in session.scalars(select(BatchResult).where(BatchResult.batch_id == batch_id))
        ]


def _measure(settings: Settings, batch_id: str, gold: dict[tuple, str]) -> dict[str, float]:
    results = list(_results(settings, batch_id))
    hits = matched = 0
    for r in results:
        want = gold.get((r["document_id"], r["field"], r["start"]))
        if want is None:
            continue
        matched += 1
        hits += r["sense_id"] == want
    queued = sum(r["status"] in ("review", "abstained") for r in results)
    return {
        "labels": matched,
        "accuracy": hits / max(matched, 1),
        "occurrences": len(results),
        "queue_share": queued / max(len(results), 1),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--decisions", type=int, default=50)
    parser.add_argument("--order", default="useful", choices=("useful", "confidence", "margin"))
    parser.add_argument(
        "--pool-share", type=float, default=2 / 3, help="share of held-out documents in the pool"
    )
    parser.add_argument(
        "--no-auto-resolve",
        action="store_true",
        help="keep re-scored items in the queue (so the pool lasts for more decisions)",
    )
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="review-feedback-"))
    settings = Settings(database_url=f"sqlite:///{folder / 'feedback.db'}")
    upgrade(settings.database_url)
    docs = _documents()
    evidence, held_out = split_labels(CORPUS / "labeled.jsonl")
    held_docs = sorted({label["document_id"] for label in held_out})
    pool_ids = {
        d for d in held_docs if hashlib.sha256(d.encode()).digest()[1] < 256 * args.pool_share
    }
    test_ids = set(held_docs) - pool_ids
    gold_pool = _gold([x for x in held_out if x["document_id"] in pool_ids], docs)
    gold_test = _gold([x for x in held_out if x["document_id"] in test_ids], docs)
    with session_scope(settings) as session:
        team = create_team(session, "lab").id
        inventory = json.loads((CORPUS / "inventory.json").read_text(encoding="utf-8"))
        inventories.import_inventory_document(
            session, team, inventory, defaults=settings.inventory_defaults()
        )
        add_evidence(
            session,
            team,
            "lantern-lane",
            (
                Evidence(0, x["term"], x["sense"], x["text"], x["start"], x["end"], "import")
                for x in evidence
            ),
        )
        keys = {s: create_key(session, team, s) for s in ("ingest", "review")}
        if args.no_auto_resolve:
            set_auto_resolve(
                session, inventories.get_inventory(session, team, "lantern-lane").id, False
            )
    with session_scope(settings) as session:
        spec = inventories.load_inventory_spec(session, team, "lantern-lane")
        inventory_id = inventories.get_inventory(session, team, "lantern-lane").id
        stored = load_evidence(session, inventory_id)
    encoder = shared_engines().encoder(settings)
    report = calibrate_book(PrototypeBook.build(encoder, spec, stored), DEFAULT_TEMPERATURE)
    with session_scope(settings) as session:
        inventories.edit_inventory(
            session,
            team,
            "lantern-lane",
            lambda d: d["settings"].update(temperature=report.temperature),
        )
    print(f"temperature fitted on {report.instances} evidence items: {report.temperature:.4f}")
    worker = Worker(settings)
    with TestClient(create_app(settings)) as client:
        ingest = keys["ingest"].token
        pool_batch = _submit(client, ingest, [docs[d] for d in sorted(pool_ids)], worker)
        test_batch = _submit(client, ingest, [docs[d] for d in sorted(test_ids)], worker)
        before = _measure(settings, test_batch, gold_test)
        pool_before = _measure(settings, pool_batch, gold_pool)
        print(f"pool: {len(pool_ids)} documents; test: {len(test_ids)} documents")
        print(
            "before:", json.dumps(before), "| pool queue share", f"{pool_before['queue_share']:.3f}"
        )
        decided = skipped = agreed = 0
        excluded: list[int] = []
        started = time.perf_counter()
        reviewer = keys["review"].key_id
        while decided < args.decisions:
            with session_scope(settings) as session:
                sync_queue(session, settings, team)
            with session_scope(settings) as session:
                items = claim_items(
                    session,
                    team,
                    reviewer,
                    QueueFilter(batch=pool_batch),
                    order=args.order,
                    exclude=excluded,
                )
                if not items:
                    break
                item = items[0]
                row = session.get(BatchResult, item.result_id)
                assert row is not None
                result = row.result
                want = gold_pool.get((result["document_id"], result["field"], result["start"]))
                if want is None:
                    excluded.append(item.id)
                    item.claimed_by = None
                    skipped += 1
                    continue
                agreed += result["sense_id"] == want
                decision = record_decision(session, item, reviewer, want)
                decision_id, item_id = decision.id, item.id
            with session_scope(settings) as session:
                rescore_term(session, settings, session.get(ReviewItem, item_id), decision_id)
            decided += 1
        seconds = time.perf_counter() - started
        test_resolved = _measure(settings, test_batch, gold_test)
        after = _measure(
            settings,
            _submit(client, ingest, [docs[d] for d in sorted(test_ids)], worker),
            gold_test,
        )
        pool_after = _measure(settings, pool_batch, gold_pool)
    print(
        f"decided {decided} pool items ({args.order} first; {skipped} unlabeled skipped) in "
        f"{seconds:.1f} s; the machine's first answer agreed on {agreed}"
    )
    print("after (a fresh batch of the test documents):", json.dumps(after))
    print(
        "test batch re-scored in place: queue share "
        f"{before['queue_share']:.3f} -> {test_resolved['queue_share']:.3f}, "
        f"accuracy {before['accuracy']:.3f} -> {test_resolved['accuracy']:.3f}"
    )
    print(
        f"pool batch queue share {pool_before['queue_share']:.3f} -> "
        f"{pool_after['queue_share']:.3f}"
    )


if __name__ == "__main__":
    main()
