"""Domain held-out check of an alignment head: ../shared/data/domain-dev (an inventory someone
else wrote), cold start (glosses and examples only) and with evidence (even ids evidence, odd
ids test). Accuracy on in-inventory lines, with and without the head.

    .venv/bin/python research/domain_head_check.py service/engine/heads/minilm-l6-semcor.npz
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

from service.engine import ContextEncoder, Disambiguator, Evidence
from service.engine.alignment import load_head
from service.engine.disambiguator import SpanQuery
from service.inventory.document import parse_inventory_document

DOMAIN = Path("../shared/data/domain-dev")


def main() -> int:
    head_path = Path(sys.argv[1])
    domain = Path(sys.argv[2]) if len(sys.argv) > 2 else DOMAIN
    inventory = parse_inventory_document(json.loads((domain / "inventory.json").read_text()))
    lines = [json.loads(x) for x in (domain / "labeled.jsonl").read_text().splitlines() if x]
    encoder = ContextEncoder(batch_size=32)
    head = load_head(head_path, encoder.model_id)

    def number(line: dict) -> int:
        return int("".join(ch for ch in line["id"] if ch.isdigit()))

    train = [x for x in lines if number(x) % 2 == 0 and x["sense"]]
    test = [x for x in lines if number(x) % 2 == 1 and x["sense"]]
    evidence = [Evidence(n + 1, x["term"], x["sense"], x["text"], x["start"], x["end"])
                for n, x in enumerate(train)]
    for name, items in (("cold start (odd ids)", ()), ("with even-id evidence", evidence)):
        for label, chosen in (("no head", None), (head.head_id, head)):
            engine = Disambiguator(encoder, inventory, items, alignment_head=chosen)
            results = engine.classify_spans([SpanQuery(x["text"], x["start"], x["end"], x["term"],
                                                       document_id=x["id"]) for x in test])
            right = sum(r.candidates[0].sense_id == x["sense"]
                        for r, x in zip(results, test, strict=True))
            print(f"{name:24} {label:20} {right / len(test):.4f} ({right}/{len(test)})",
                  flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
