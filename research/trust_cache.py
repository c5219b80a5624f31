"""Encode one held-out inventory and its labeled occurrences once, for the trust sweeps.

Writes an .npz with the vectors the engine itself builds (PrototypeBook items:
glosses and examples) and one span vector per labeled occurrence, so every
sweep in research/trust_sweep.py runs on cached vectors without re-encoding.
"""

from __future__ import annotations

import argparse
import json
import os
import pickle
from pathlib import Path

os.environ.setdefault("HF_HUB_OFFLINE", "1")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("inventory", type=Path)
    parser.add_argument("labeled", type=Path)
    parser.add_argument("output", type=Path)
    args = parser.parse_args()
    from service.engine import ContextEncoder, PrototypeBook, default_model_path
    from service.inventory.document import parse_inventory_document

    spec = parse_inventory_document(json.loads(args.inventory.read_text(encoding="utf-8")))
    encoder = ContextEncoder(default_model_path())
    book = PrototypeBook.build(encoder, spec)
    rows = [json.loads(line) for line in args.labeled.read_text(encoding="utf-8").splitlines()
            if line.strip()]
    vectors = encoder.encode_spans([(r["text"], r["start"], r["end"]) for r in rows])
    book._lock = None  # type: ignore[assignment]  # locks do not pickle; restored on load
    with args.output.open("wb") as handle:
        pickle.dump({"spec": spec, "book": book, "rows": rows, "vectors": vectors}, handle)
    print(f"{len(rows)} occurrences, {len(spec.terms)} terms -> {args.output}")


if __name__ == "__main__":
    main()
