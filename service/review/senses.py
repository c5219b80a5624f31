"""New senses from what reviewers could not place: per term, the occurrences decided
"none of these" and the pending abstained ones are clustered on their context vectors
(agglomerative, average linkage, cosine distance); a curator names a cluster and it
becomes a sense in one step (a new inventory version, its members its evidence)."""

from __future__ import annotations

import re
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from service.review.decisions import record_decision
from service.review.queue import vector_from_bytes
from service.review.ranking import central_order, cluster_labels
from service.store.errors import Conflict, NotFound
from service.store.inventories import edit_inventory, find_term
from service.store.models import Inventory, ReviewDecision, ReviewItem

MIN_CLUSTER = 2
CENTRAL_SHOWN = 3
SENSE_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._:-]{0,199}$")


@dataclass(frozen=True)
class Cluster:
    inventory: str
    term: str
    item_ids: tuple[int, ...]  # most central first


def candidate_items(session: Session, team_id: int, inventory_id: int) -> list[ReviewItem]:
    return list(
        session.scalars(
            select(ReviewItem)
            .where(
                ReviewItem.team_id == team_id,
                ReviewItem.inventory_id == inventory_id,
                or_(
                    ReviewItem.state == "missing",
                    (ReviewItem.state == "pending") & (ReviewItem.machine_status == "abstained"),
                ),
            )
            .order_by(ReviewItem.id)
        )
    )


def find_clusters(session: Session, team_id: int, inventory: Inventory) -> list[Cluster]:
    """Clusters of at least MIN_CLUSTER items per term, largest first."""
    by_term: dict[str, list[ReviewItem]] = defaultdict(list)
    for item in candidate_items(session, team_id, inventory.id):
        by_term[item.term].append(item)
    clusters = []
    for term, items in by_term.items():
        if len(items) < MIN_CLUSTER:
            continue
        vectors = np.stack([vector_from_bytes(item.vector) for item in items])
        labels = cluster_labels(vectors)
        for label in sorted(set(labels.tolist())):
            members = [i for i, value in enumerate(labels) if value == label]
            if len(members) < MIN_CLUSTER:
                continue
            order = central_order(vectors[members])
            clusters.append(
                Cluster(inventory.name, term, tuple(items[members[i]].id for i in order))
            )
    clusters.sort(key=lambda c: (-len(c.item_ids), c.term, c.item_ids))
    return clusters


def create_sense(
    session: Session,
    team_id: int,
    key_id: str,
    inventory: Inventory,
    term: str,
    sense_id: str,
    gloss: str,
    item_ids: Sequence[int],
) -> list[ReviewDecision]:
    """Add the sense to the term (a new inventory version) and decide every member with it."""
    if not SENSE_ID.match(sense_id):
        raise ValueError("a sense id is 1-200 letters, digits, '.', '_', ':' or '-'")
    if not gloss.strip():
        raise ValueError("type a gloss for the new sense")
    items = [session.get(ReviewItem, item_id) for item_id in item_ids]
    for item_id, item in zip(item_ids, items, strict=True):
        if item is None or item.team_id != team_id or item.inventory_id != inventory.id:
            raise NotFound(f"review item {item_id} does not exist")
        if item.term != term:
            raise Conflict(f"review item {item_id} is an occurrence of '{item.term}'")

    def change(document: dict) -> None:  # type: ignore[type-arg]
        entry = find_term(document, term)
        entry["senses"].append({"id": sense_id, "gloss": gloss.strip(), "examples": [], "tags": []})

    edit_inventory(session, team_id, inventory.name, change, key_id=key_id)
    session.flush()
    return [
        record_decision(session, item, key_id, sense_id, curator=True)
        for item in items
        if item is not None
    ]
