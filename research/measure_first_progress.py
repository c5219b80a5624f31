"""Why the demo's progress bar sat at zero: building the batch's engine against tagging a chunk.

Builds the engine the demo's batch is pinned to (the demo inventory with the
evidence half of its labels: every gloss, example and evidence item through
the encoder), then tags the first document and the first chunk (16 documents,
the default chunk size) with rationale, as a worker does. Prints seconds for
each; compare them within one run (the host is shared, absolute times drift).
"""

from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

os.environ.setdefault("HF_HUB_OFFLINE", "1")

from service.cli.demo import split_labels
from service.engine import ContextEncoder, Disambiguator, Document
from service.engine.types import Evidence
from service.inventory.document import parse_inventory_document


def _document(row: dict) -> Document:
    return Document(row["id"], (("text", row["text"]), *row.get("fields", {}).items()))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--corpus", type=Path, default=Path("demo_corpus"))
    parser.add_argument("--threads", type=int, default=1, help="encoder threads")
    parser.add_argument("--chunk", type=int, default=16, help="documents in the first chunk")
    args = parser.parse_args()

    started = time.perf_counter()
    encoder = ContextEncoder(num_threads=args.threads)
    loaded = time.perf_counter()
    inventory = json.loads((args.corpus / "inventory.json").read_text(encoding="utf-8"))
    spec = parse_inventory_document(inventory, version=1)
    labels, _ = split_labels(args.corpus / "labeled.jsonl")
    evidence = [
        Evidence(i, e["term"], e["sense"], e["text"], e["start"], e["end"])
        for i, e in enumerate(labels)
    ]
    disambiguator = Disambiguator(encoder, spec, evidence)
    built = time.perf_counter()
    with (args.corpus / "documents.jsonl").open(encoding="utf-8") as stream:
        rows = [json.loads(line) for line, _ in zip(stream, range(args.chunk), strict=False)]
    print(f"model load: {loaded - started:.1f} s")
    print(f"engine build ({len(evidence)} evidence + glosses, examples): {built - loaded:.1f} s")
    for size in (1, args.chunk):
        begin = time.perf_counter()
        results = list(disambiguator.tag([_document(r) for r in rows[:size]], rationale=True))
        occurrences = sum(len(r.occurrences) for r in results)
        print(
            f"tag the first {size} documents ({occurrences} occurrences, rationale): "
            f"{time.perf_counter() - begin:.1f} s"
        )


if __name__ == "__main__":
    main()
