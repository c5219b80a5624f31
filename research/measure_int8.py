"""Dynamic int8 encoder vs float32: speed of the bare forward pass and accuracy change.

Speed: CPU seconds of the bench's ceiling run (forward + attention over the engine's
windows of the demo corpus), one thread, so the host's load hardly moves it.
Accuracy, through the engine users run (Disambiguator.classify_spans):
- SemEval-2013 Task 12 slice (Navigli, Jurgens & Vannella 2013; first four documents,
  WordNet 3.0 senses, prototypes from glosses, examples and a SemCor 3.0 slice of six
  sentences per lemma, Miller et al. 1993), the same slice as
  tests/engine/test_semeval_slice.py;
- the demo corpus's 784 labeled occurrences (glosses and examples only).

    .venv/bin/python research/measure_int8.py --data ../../shared/data
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from service.bench import inprocess  # noqa: E402
from service.bench.corpus import load_corpus  # noqa: E402
from service.engine import open_wordnet  # noqa: E402
from service.engine.disambiguator import Disambiguator, SpanQuery  # noqa: E402
from service.engine.encoder import ContextEncoder  # noqa: E402
from service.inventory.document import parse_inventory_document  # noqa: E402
from tests.engine.test_semeval_slice import semeval_slice  # noqa: E402


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--data", type=Path, default=ROOT.parent / "shared" / "data")
    args = parser.parse_args()
    wordnet = open_wordnet()
    sliced = semeval_slice(args.data / "semeval2013-en.jsonl.gz",
                           args.data / "semcor30.jsonl.gz", wordnet)
    inventory, evidence, queries, gold = (sliced.inventory, sliced.evidence, sliced.queries,
                                          sliced.gold)
    demo = parse_inventory_document(
        json.loads((ROOT / "demo_corpus" / "inventory.json").read_text()), version=1)
    labeled = [json.loads(line) for line in
               (ROOT / "demo_corpus" / "labeled.jsonl").read_text().splitlines() if line.strip()]
    demo_queries = [SpanQuery(x["text"], x["start"], x["end"], x["term"],
                              document_id=x["document_id"]) for x in labeled]
    corpus = load_corpus(ROOT / "demo_corpus", 300)
    figures = {}
    for quantize in (False, True):
        encoder = ContextEncoder(num_threads=1, quantize=quantize)
        engine = Disambiguator(encoder, corpus.inventory)
        texts, _ = inprocess.engine_windows(engine, corpus.documents)
        inprocess.ceiling_seconds(encoder, texts[:64])  # warm
        _, cpu = inprocess.ceiling_seconds(encoder, texts)
        started = time.process_time()
        results = Disambiguator(encoder, inventory, evidence).classify_spans(queries)
        semeval = sum(r.candidates[0].sense_id in g for r, g in zip(results, gold, strict=True))
        demo_results = Disambiguator(encoder, demo).classify_spans(demo_queries)
        demo_hits = sum(r.sense_id == x["sense"] for r, x in zip(demo_results, labeled,
                                                                  strict=True))
        figures["int8" if quantize else "float32"] = {
            "ceiling_windows": len(texts), "ceiling_cpu_s": round(cpu, 2),
            "semeval_slice_accuracy": round(semeval / len(queries), 4),
            "semeval_slice_instances": len(queries),
            "demo_labeled_accuracy": round(demo_hits / len(labeled), 4),
            "accuracy_cpu_s": round(time.process_time() - started, 1),
        }
        print(json.dumps(figures), flush=True)
    fp, q8 = figures["float32"], figures["int8"]
    print(f"int8 speed-up (ceiling CPU time): {fp['ceiling_cpu_s'] / q8['ceiling_cpu_s']:.2f}x; "
          f"SemEval slice {fp['semeval_slice_accuracy']:.4f} -> {q8['semeval_slice_accuracy']:.4f};"
          f" demo labeled {fp['demo_labeled_accuracy']:.4f} -> {q8['demo_labeled_accuracy']:.4f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
