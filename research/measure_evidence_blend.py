"""How much labeled evidence should move a prototype, measured on a team-style inventory.

Splits the demo's labeled occurrences by document into evidence and scoring halves
(the same split `whichsense demo` uses), then, *inside the evidence half only*,
splits again by document: one part becomes evidence, the other is scored. The
held-out half of the demo is never read here, so the choice stays honest.
Prints accuracy for each evidence weight k (prototype = definition mixed with
the evidence mean at weight n/(n+k)) with the sense prior on and off.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
from pathlib import Path

os.environ.setdefault("HF_HUB_OFFLINE", "1")

from service.cli.demo import split_labels
from service.engine import ContextEncoder, Disambiguator, PrototypeBook, SpanQuery
from service.engine.types import Evidence
from service.inventory.document import parse_inventory_document


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--corpus", type=Path, default=Path("demo_corpus"))
    parser.add_argument("--weights", default="0.25,1,4,16,64")
    parser.add_argument(
        "--consistency",
        action="store_true",
        help="instead: document consistency on/off, labels of one document sharing evidence",
    )
    args = parser.parse_args()
    spec = parse_inventory_document(
        json.loads((args.corpus / "inventory.json").read_text(encoding="utf-8"))
    )
    evidence_half, _ = split_labels(args.corpus / "labeled.jsonl")
    train, score = [], []
    for label in evidence_half:
        digest = hashlib.sha256(("inner:" + label["document_id"]).encode()).digest()
        (train if digest[0] % 2 == 0 else score).append(label)
    evidence = [
        Evidence(i + 1, x["term"], x["sense"], x["text"], x["start"], x["end"], "import")
        for i, x in enumerate(train)
    ]
    queries = [
        SpanQuery(x["text"], x["start"], x["end"], x["term"], document_id=x["id"]) for x in score
    ]
    encoder = ContextEncoder()
    vectors = encoder.encode_spans([(e.text, e.start, e.end) for e in evidence])
    print(f"evidence {len(evidence)}, scored {len(queries)}")
    if args.consistency:
        _compare_consistency(encoder, spec, evidence, vectors, score)
        return
    base = PrototypeBook.build(encoder, spec)
    for prior in (False, True):
        d = Disambiguator(encoder, spec, prototypes=base, sense_prior=prior)
        results = d.classify_spans(queries)
        hits = sum(r.sense_id == x["sense"] for r, x in zip(results, score, strict=True))
        print(f"no evidence            prior={prior!s:5}  accuracy {hits / len(score):.3f}")
    for weight in [float(w) for w in args.weights.split(",")]:
        book = PrototypeBook.build(
            encoder, spec, evidence, evidence_vectors=vectors, evidence_prior=weight
        )
        for prior in (False, True):
            d = Disambiguator(encoder, spec, prototypes=book, sense_prior=prior)
            results = d.classify_spans(queries)
            hits = sum(r.sense_id == x["sense"] for r, x in zip(results, score, strict=True))
            print(f"evidence k={weight:<8g}  prior={prior!s:5}  accuracy {hits / len(score):.3f}")


def _compare_consistency(encoder, spec, evidence, vectors, score) -> None:  # type: ignore[no-untyped-def]
    """Accuracy with and without one-sense-per-discourse sharing within each document."""
    from service.engine import DEFAULT_CONSISTENCY_WEIGHT

    queries = [
        SpanQuery(x["text"], x["start"], x["end"], x["term"], document_id=x["document_id"])
        for x in score
    ]
    book = PrototypeBook.build(encoder, spec, evidence, evidence_vectors=vectors)
    for weight in (0.0, DEFAULT_CONSISTENCY_WEIGHT):
        d = Disambiguator(encoder, spec, prototypes=book, consistency_weight=weight)
        results = d.classify_spans(queries)
        hits = sum(r.sense_id == x["sense"] for r, x in zip(results, score, strict=True))
        print(f"consistency weight {weight:<4g} accuracy {hits / len(score):.3f}")


if __name__ == "__main__":
    main()
