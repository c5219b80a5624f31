"""Per-document summaries: for each term, the senses found, how often, and how sure.

This is the shape a search index field wants: flat `sense_ids` and `tags` to
filter on, and per-term detail for ranking. Only occurrences that carry a sense
(assigned or review) count as a sense found; abstentions are counted apart.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class SenseTally:
    """Results of one document grouped by (term, sense, status): a GROUP BY row."""

    term: str
    sense_id: str | None
    status: str
    count: int
    best_confidence: float


def summarise(tallies: Iterable[SenseTally], tags: Mapping[str, Sequence[str]]) -> dict[str, Any]:
    """Fold one document's tallies into its summary (terms sorted, senses by count)."""
    terms: dict[str, dict[str, Any]] = {}
    for row in tallies:
        entry = terms.setdefault(
            row.term, {"term": row.term, "occurrences": 0, "abstained": 0, "senses": {}}
        )
        entry["occurrences"] += row.count
        if row.sense_id is None:
            entry["abstained"] += row.count
            continue
        sense = entry["senses"].setdefault(
            row.sense_id,
            {
                "sense_id": row.sense_id,
                "count": 0,
                "assigned": 0,
                "review": 0,
                "best_confidence": 0.0,
                "tags": list(tags.get(row.sense_id, ())),
            },
        )
        sense["count"] += row.count
        if row.status in ("assigned", "review"):
            sense[row.status] += row.count
        sense["best_confidence"] = round(max(sense["best_confidence"], row.best_confidence), 4)
    ordered = []
    for name in sorted(terms):
        entry = terms[name]
        senses = sorted(entry["senses"].values(), key=lambda s: (-s["count"], s["sense_id"]))
        ordered.append({**entry, "senses": senses})
    sense_ids = sorted({s["sense_id"] for t in ordered for s in t["senses"]})
    found_tags = sorted({tag for t in ordered for s in t["senses"] for tag in s["tags"]})
    return {
        "occurrences": sum(t["occurrences"] for t in ordered),
        "terms": ordered,
        "sense_ids": sense_ids,
        "tags": found_tags,
    }
