"""What a reviewer sees of one item: the context with the occurrence and its rationale words,
and each candidate sense with gloss, current probability and nearest labeled evidence.
Plain values for the pages and the API; the templates do all escaping."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from service.config import Settings
from service.review.decisions import answers_from_vectors, current_spec
from service.review.queue import field_text, vector_from_bytes
from service.store.clock import as_utc_or_none
from service.store.evidence import evidence_watermark
from service.store.models import (
    BatchDocument,
    BatchResult,
    EvidenceRecord,
    Inventory,
    ReviewItem,
)
from service.tagging.engines import Pin, shared_engines

CONTEXT_CHARS = 600  # shown on each side of the occurrence in long fields
SNIPPET_CHARS = 90
SHADE_LEVELS = 4


def item_json(session: Session, item: ReviewItem) -> dict[str, Any]:
    inventory = session.get(Inventory, item.inventory_id)
    result = session.get(BatchResult, item.result_id)
    expires = as_utc_or_none(item.claim_expires_at)
    return {
        "id": item.id,
        "inventory": inventory.name if inventory else None,
        "term": item.term,
        "batch_id": item.batch_id,
        "document_id": item.document_id,
        "state": item.state,
        "machine_status": item.machine_status,
        "confidence": round(item.confidence, 4),
        "margin": round(item.margin, 4),
        "usefulness": round(item.usefulness, 4),
        "claimed_by": item.claimed_by,
        "claim_expires_at": expires.isoformat().replace("+00:00", "Z") if expires else None,
        "result": result.result if result else None,
    }


@dataclass(frozen=True)
class Segment:
    text: str
    kind: str  # "plain", "term" or "word"
    level: int = 0  # 1..SHADE_LEVELS for words
    weight: float = 0.0


@dataclass(frozen=True)
class CandidateView:
    number: int
    sense_id: str
    gloss: str
    probability: float
    machine_probability: float | None
    evidence_before: str
    evidence_term: str
    evidence_after: str
    evidence_kind: str
    evidence_similarity: float | None


@dataclass(frozen=True)
class ItemView:
    item: ReviewItem
    inventory: str
    result: dict[str, Any]
    field: str
    views: dict[str, list[Segment]]  # "attention" / "rollout"
    words: dict[str, list[tuple[str, float]]]
    erasure: list[tuple[str, float]]
    candidates: list[CandidateView]
    machine_sense: str | None
    machine_confidence: float
    machine_status: str


def shade_level(weight: float, strongest: float) -> int:
    """1..SHADE_LEVELS by the weight's share of the strongest word's weight."""
    if strongest <= 0:
        return 1
    return max(1, min(SHADE_LEVELS, math.ceil(SHADE_LEVELS * weight / strongest)))


def segments(
    text: str, start: int, end: int, words: list[dict[str, Any]], context: int = CONTEXT_CHARS
) -> list[Segment]:
    """The text around [start, end) cut into plain, term and weighted-word pieces."""
    lo, hi = max(0, start - context), min(len(text), end + context)
    marks: list[tuple[int, int, str, float]] = [(start, end, "term", 0.0)]
    strongest = max((float(w.get("weight", 0.0)) for w in words), default=0.0)
    for word in words:
        a, b = int(word.get("start", -1)), int(word.get("end", -1))
        if lo <= a < b <= hi:
            marks.append((a, b, "word", float(word.get("weight", 0.0))))
    marks.sort()
    pieces: list[Segment] = []
    position = lo
    if lo > 0:
        pieces.append(Segment("… ", "plain"))
    for a, b, kind, weight in marks:
        if a < position:
            continue  # overlaps the previous mark
        if a > position:
            pieces.append(Segment(text[position:a], "plain"))
        level = shade_level(weight, strongest) if kind == "word" else 0
        pieces.append(Segment(text[a:b], kind, level, weight))
        position = b
    pieces.append(Segment(text[position:hi], "plain"))
    if hi < len(text):
        pieces.append(Segment(" …", "plain"))
    return pieces


def snippet(text: str, start: int, end: int, width: int = SNIPPET_CHARS) -> tuple[str, str, str]:
    before = text[max(0, start - width) : start]
    after = text[end : end + width]
    return (
        ("…" if start > width else "") + before,
        text[start:end],
        after + ("…" if end + width < len(text) else ""),
    )


def item_view(session: Session, settings: Settings, item: ReviewItem) -> ItemView:
    inventory = session.get(Inventory, item.inventory_id)
    row = session.get(BatchResult, item.result_id)
    assert inventory is not None and row is not None
    result = row.result
    machine = result.get("machine_answer") or result
    document = (
        session.query(BatchDocument)
        .filter_by(batch_id=row.batch_id, document_id=row.document_id)
        .one()
    )
    text = field_text(document.fields, row.field)
    start, end = int(result["start"]), int(result["end"])
    rationale = result.get("rationale") or {}
    views, words = {}, {}
    for name in ("attention", "rollout"):
        listed = (rationale.get(name) or {}).get("words") or []
        views[name] = segments(text, start, end, listed)
        words[name] = [(str(w["word"]), float(w["weight"])) for w in listed]
    erasure = [
        (str(w["word"]), float(w["drop"]))
        for w in ((rationale.get("erasure") or {}).get("words") or [])
    ]
    spec = current_spec(session, inventory)
    try:
        senses = spec.term(item.term).senses
    except KeyError:
        senses = ()
    machine_probability = {
        c["sense_id"]: float(c["probability"]) for c in machine.get("candidates") or []
    }
    probabilities: dict[str, float] = {}
    nearest: dict[str, tuple[int, float]] = {}
    vector = vector_from_bytes(item.vector)
    engine = shared_engines().engine(
        session,
        settings,
        Pin(inventory.id, inventory.version, evidence_watermark(session, inventory.id)),
    )
    book = engine.disambiguator.prototypes
    if item.term in book.terms():
        with engine.lock:  # the senses ranked as a batch would rank them
            answer = answers_from_vectors(engine.disambiguator, item.term, [item]).get(item.id)
            evidence = book.evidence_items(item.term)
        if answer is not None:
            probabilities = {c.sense_id: c.probability for c in answer.candidates}
        aligned = engine.disambiguator.align(vector[None, :])[0]  # the book's space
        for evidence_id, sense_id, evidence_vector in evidence:
            score = float(np.dot(evidence_vector, aligned))
            if sense_id not in nearest or score > nearest[sense_id][1]:
                nearest[sense_id] = (evidence_id, score)
    candidates = []
    ordered = sorted(senses, key=lambda s: -probabilities.get(s.sense_id, 0.0))
    for number, sense in enumerate(ordered, start=1):
        before = term_text = after = ""
        kind = "none"
        similarity_score: float | None = None
        if sense.sense_id in nearest:
            record = session.get(EvidenceRecord, nearest[sense.sense_id][0])
            if record is not None:
                before, term_text, after = snippet(record.text, record.start, record.end)
                kind, similarity_score = "evidence", nearest[sense.sense_id][1]
        elif sense.examples:
            before, kind = sense.examples[0], "example"
        candidates.append(
            CandidateView(
                number=number,
                sense_id=sense.sense_id,
                gloss=sense.gloss,
                probability=probabilities.get(sense.sense_id, 0.0),
                machine_probability=machine_probability.get(sense.sense_id),
                evidence_before=before,
                evidence_term=term_text,
                evidence_after=after,
                evidence_kind=kind,
                evidence_similarity=similarity_score,
            )
        )
    return ItemView(
        item=item,
        inventory=inventory.name,
        result=result,
        field=row.field,
        views=views,
        words=words,
        erasure=erasure,
        candidates=candidates,
        machine_sense=machine.get("sense_id"),
        machine_confidence=float(machine.get("confidence") or 0.0),
        machine_status=str(machine.get("status")),
    )
