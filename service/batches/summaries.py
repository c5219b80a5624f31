"""Per-document summaries: for each term, the senses found, how often, and how sure.

This is the shape a search index field wants: flat `sense_ids` and `tags` to
filter on, and per-term detail for ranking. Pipelines copy the flat fields into
an index unread, so by default only confident answers count as a sense found:
`assigned` ones and those a person `reviewed`. Occurrences the service itself
sent to review are doubtful: counted per term, and listed (marked `doubtful`,
in their own flat fields) only when the caller asks for them. Abstentions carry
no sense and are counted apart.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

CONFIDENT_STATUSES = ("assigned", "reviewed")
"""Statuses whose sense an index may publish; any other status with a sense is doubtful."""


@dataclass(frozen=True)
class SenseTally:
    """Results of one document grouped by (term, sense, status): a GROUP BY row."""

    term: str
    sense_id: str | None
    status: str
    count: int
    best_confidence: float


def _sense_entry(sense_id: str, tags: Mapping[str, Sequence[str]]) -> dict[str, Any]:
    return {
        "sense_id": sense_id,
        "count": 0,
        "assigned": 0,
        "reviewed": 0,
        "review": 0,
        "best_confidence": 0.0,
        "tags": list(tags.get(sense_id, ())),
        "doubtful": True,
    }


def summarise(
    tallies: Iterable[SenseTally],
    tags: Mapping[str, Sequence[str]],
    *,
    include_doubtful: bool = False,
) -> dict[str, Any]:
    """Fold one document's tallies into its summary (terms sorted, senses by count).

    A sense is `doubtful` when none of its occurrences is confident; such senses
    appear only with `include_doubtful`, and then in `doubtful_sense_ids` and
    `doubtful_tags`, never in `sense_ids` or `tags`.
    """
    terms: dict[str, dict[str, Any]] = {}
    for row in tallies:
        entry = terms.setdefault(
            row.term,
            {"term": row.term, "occurrences": 0, "abstained": 0, "doubtful": 0, "senses": {}},
        )
        entry["occurrences"] += row.count
        if row.sense_id is None:
            entry["abstained"] += row.count
            continue
        confident = row.status in CONFIDENT_STATUSES
        if not confident:
            entry["doubtful"] += row.count
            if not include_doubtful:
                continue
        sense = entry["senses"].setdefault(row.sense_id, _sense_entry(row.sense_id, tags))
        sense["count"] += row.count
        counter = row.status if row.status in CONFIDENT_STATUSES else "review"
        sense[counter] += row.count
        sense["doubtful"] = sense["doubtful"] and not confident
        sense["best_confidence"] = round(max(sense["best_confidence"], row.best_confidence), 4)
    ordered = []
    for name in sorted(terms):
        entry = terms[name]
        senses = sorted(entry["senses"].values(), key=lambda s: (-s["count"], s["sense_id"]))
        ordered.append({**entry, "senses": senses})
    found = [s for t in ordered for s in t["senses"]]
    sense_ids = sorted({s["sense_id"] for s in found if not s["doubtful"]})
    found_tags = sorted({tag for s in found if not s["doubtful"] for tag in s["tags"]})
    summary: dict[str, Any] = {
        "occurrences": sum(t["occurrences"] for t in ordered),
        "terms": ordered,
        "sense_ids": sense_ids,
        "tags": found_tags,
    }
    if include_doubtful:
        summary["doubtful_sense_ids"] = sorted(
            {s["sense_id"] for s in found if s["doubtful"]} - set(sense_ids)
        )
        summary["doubtful_tags"] = sorted(
            {tag for s in found if s["doubtful"] for tag in s["tags"]} - set(found_tags)
        )
    return summary
