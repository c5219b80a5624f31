"""The benchmark corpus: the demo documents repeated and shuffled to the size asked for,
optionally joined K of one kind at a time into longer documents."""

from __future__ import annotations

import json
import random
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from service.batches.documents import parse_document
from service.engine.types import Document, InventorySpec
from service.inventory.document import parse_inventory_document

BENCH_SEED = 17
UNLIMITED_BYTES = 1 << 30
PART_BREAK = "\n\n"  # between the parts of a joined document, as between paragraphs


@dataclass(frozen=True)
class BenchCorpus:
    """Documents as the HTTP API takes them and as the engine takes them, same order.
    `joined`: demo documents per benchmark document (1: each demo document as it is)."""

    inventory_path: Path
    inventory: InventorySpec
    raw: tuple[dict[str, Any], ...]
    documents: tuple[Document, ...]
    joined: int = 1

    @property
    def chars_per_document(self) -> float:
        """Mean characters per document, every text field counted."""
        total = sum(len(text) for document in self.documents for _, text in document.fields)
        return total / len(self.documents) if self.documents else 0.0


def _passes(source: list[dict[str, Any]], rng: random.Random) -> Iterator[dict[str, Any]]:
    """Whole shuffled passes over `source` (each pass reshuffled), ids made unique per pass."""
    passes = 0
    while True:
        order = list(source)
        rng.shuffle(order)
        for item in order:
            yield {**item, "id": f"{item['id']}~{passes}"}
        passes += 1


def join_documents(parts: list[dict[str, Any]], doc_id: str) -> dict[str, Any]:
    """One document made of `parts` (all of one kind): the first part's fields stay fields
    (a page has one title); each later part's fields become heading lines above its text,
    so every word of every part is still there."""
    first, rest = parts[0], parts[1:]
    sections = [first.get("text") or ""]
    for part in rest:
        headings = [value for value in (part.get("fields") or {}).values() if value]
        sections.append("\n".join([*headings, part.get("text") or ""]))
    joined: dict[str, Any] = {"id": doc_id, "text": PART_BREAK.join(sections)}
    if first.get("fields"):
        joined["fields"] = dict(first["fields"])
    kind = (first.get("metadata") or {}).get("kind")
    joined["metadata"] = {"kind": kind, "parts": [part["id"] for part in parts]}
    return joined


def load_corpus(directory: Path, size: int, seed: int = BENCH_SEED, join: int = 1) -> BenchCorpus:
    """`size` documents drawn from `directory`/documents.jsonl in whole shuffled passes.

    With `join` K > 1 each document is K demo documents of one kind (`metadata.kind`:
    reviews with reviews, help articles with help articles) joined in the order the passes
    draw them, so the corpus keeps the demo corpus's mix of kinds at K times the length.
    """
    if size < 1:
        raise ValueError("the benchmark needs at least one document")
    if join < 1:
        raise ValueError("documents are joined at least one at a time")
    inventory_path = directory / "inventory.json"
    inventory = parse_inventory_document(json.loads(inventory_path.read_text("utf-8")), version=1)
    source = [
        json.loads(line)
        for line in (directory / "documents.jsonl").read_text("utf-8").splitlines()
        if line.strip()
    ]
    if not source:
        raise ValueError(f"no documents in {directory / 'documents.jsonl'}")
    drawn = _passes(source, random.Random(seed))
    raw: list[dict[str, Any]] = []
    if join == 1:
        raw = [next(drawn) for _ in range(size)]
    else:
        pending: dict[Any, list[dict[str, Any]]] = {}
        while len(raw) < size:
            item = next(drawn)
            kind = (item.get("metadata") or {}).get("kind")
            group = pending.setdefault(kind, [])
            group.append(item)
            if len(group) == join:
                raw.append(join_documents(group, f"{kind}-x{join}-{len(raw)}"))
                del pending[kind]
    documents = tuple(
        parse_document(item, max_document_bytes=UNLIMITED_BYTES).to_engine() for item in raw
    )
    return BenchCorpus(inventory_path, inventory, tuple(raw), documents, join)
