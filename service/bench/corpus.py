"""The benchmark corpus: the demo documents repeated and shuffled to the size asked for."""

from __future__ import annotations

import json
import random
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from service.batches.documents import parse_document
from service.engine.types import Document, InventorySpec
from service.inventory.document import parse_inventory_document

BENCH_SEED = 17
UNLIMITED_BYTES = 1 << 30


@dataclass(frozen=True)
class BenchCorpus:
    """Documents as the HTTP API takes them and as the engine takes them, same order."""

    inventory_path: Path
    inventory: InventorySpec
    raw: tuple[dict[str, Any], ...]
    documents: tuple[Document, ...]


def load_corpus(directory: Path, size: int, seed: int = BENCH_SEED) -> BenchCorpus:
    """`size` documents drawn from `directory`/documents.jsonl: whole shuffled passes over
    the demo documents (each pass reshuffled), ids made unique per pass."""
    if size < 1:
        raise ValueError("the benchmark needs at least one document")
    inventory_path = directory / "inventory.json"
    inventory = parse_inventory_document(json.loads(inventory_path.read_text("utf-8")), version=1)
    source = [
        json.loads(line)
        for line in (directory / "documents.jsonl").read_text("utf-8").splitlines()
        if line.strip()
    ]
    if not source:
        raise ValueError(f"no documents in {directory / 'documents.jsonl'}")
    rng = random.Random(seed)
    raw: list[dict[str, Any]] = []
    passes = 0
    while len(raw) < size:
        order = list(source)
        rng.shuffle(order)
        for item in order[: size - len(raw)]:
            raw.append({**item, "id": f"{item['id']}~{passes}"})
        passes += 1
    documents = tuple(
        parse_document(item, max_document_bytes=UNLIMITED_BYTES).to_engine() for item in raw
    )
    return BenchCorpus(inventory_path, inventory, tuple(raw), documents)
