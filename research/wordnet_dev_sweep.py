"""Compare prototype recipes on held-out SemCor documents (the development set).

SemCor is split by document (service.evaluation.splits, 10% held out); the
held-out documents become the test file and the rest the training file, and
the benchmark runs once per (layers, gloss template), printing F1 of every
recipe variant on the same vectors. SemEval-2013 is never read here.

    .venv/bin/python -m research.wordnet_dev_sweep --layers 6 3,4,5,6 \
        --templates definition definition+examples

Encodings are cached ($WHICHSENSE_CACHE_DIR or ~/.cache/whichsense), so a
second run only scores.
"""

from __future__ import annotations

import argparse
import gzip
import json
import sys
from dataclasses import replace
from pathlib import Path

from research.files import file_digest
from service.config import Settings, load_settings, resolve_model_dir
from service.evaluation.benchmark import BenchmarkConfig, run_benchmark
from service.evaluation.splits import is_held_out

DEFAULT_SEMCOR = Path(__file__).resolve().parents[2] / "shared" / "data" / "semcor30.jsonl.gz"


def split_files(settings: Settings, semcor: Path, share: float) -> tuple[Path, Path]:
    """Write (training, development) files of SemCor split by document; reused if present."""
    folder = settings.cache_dir / "dev-split" / f"{file_digest(semcor)[:16]}-{share}"
    train, dev = folder / "train.jsonl.gz", folder / "dev.jsonl.gz"
    if train.is_file() and dev.is_file():
        return train, dev
    folder.mkdir(parents=True, exist_ok=True)
    with gzip.open(semcor, "rt", encoding="utf-8") as source, \
            gzip.open(train, "wt", encoding="utf-8") as train_out, \
            gzip.open(dev, "wt", encoding="utf-8") as dev_out:
        for line in source:
            doc = json.loads(line).get("doc", "")
            (dev_out if is_held_out(doc, share) else train_out).write(line)
    return train, dev


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--semcor", type=Path, default=DEFAULT_SEMCOR)
    parser.add_argument("--share", type=float, default=0.1, help="documents held out")
    parser.add_argument("--layers", nargs="+", default=["6"])
    parser.add_argument("--templates", nargs="+", default=["definition+examples"])
    parser.add_argument("--evidence-priors", nargs="*", type=float, default=[],
                        help="also score these k in n/(n+k) (with the default prior weight)")
    parser.add_argument("--prior-weights", nargs="*", type=float, default=[],
                        help="also score these frequency-prior weights")
    parser.add_argument("--json", type=Path, help="also write every result here")
    args = parser.parse_args()

    from service.engine import ContextEncoder
    from service.engine.lexicon import open_wordnet

    settings = load_settings()
    train, dev = split_files(settings, args.semcor, args.share)
    reader = open_wordnet(cache_dir=settings.cache_dir)
    results = []
    for layer_text in args.layers:
        layers = tuple(int(x) for x in layer_text.split(","))
        encoder = ContextEncoder(resolve_model_dir(settings), layers=layers, batch_size=64)
        for template in args.templates:
            # The training file is what the split left: hold out again with another salt.
            config = replace(BenchmarkConfig(), layers=layers, gloss_template=template,
                             held_out_salt="within-training")
            base = config.recipe
            extra = {f"evidence prior k={k}": replace(base, evidence_prior=k)
                     for k in args.evidence_priors}
            extra |= {f"prior weight {b}": replace(base, prior_weight=b)
                      for b in args.prior_weights}
            result = run_benchmark(train, dev, config, reader=reader, encoder=encoder,
                                   extra_recipes=extra, cache_dir=settings.cache_dir,
                                   log=lambda m: print(m, file=sys.stderr, flush=True))
            results.append(result)
            print(f"layers {layer_text:8} template {template:30} F1 {result['f1']:6.2f} "
                  f"(MFS {result['mfs_f1']:.2f}, first sense {result['first_sense_f1']:.2f}; "
                  f"nouns {result['per_pos'].get('n', 0):.2f}) {result['seconds']:.0f} s",
                  flush=True)
            for name, f1 in result["variants"].items():
                print(f"    {name:40} {f1:6.2f}", flush=True)
    if args.json:
        args.json.write_text(json.dumps(results, indent=1), encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
