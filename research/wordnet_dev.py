"""Score the shipped engine on the SemCor development split (the selection set).

SemCor is split by document (service/evaluation/splits.is_held_out(doc, 0.1):
35 documents); the engine is built exactly as `whichsense benchmark wordnet`
builds it (service/evaluation/benchmark.score_engine) from the other
documents. F1 is read on the first 1,500 dev instances (file order; the
benchmark's calibration set, so their glosses are cached), with the temperature
fitted on the same instances (one scalar; it matters only with the sense prior).
SemEval-2013 is never read here. Vectors come from the
benchmark's cache, so a run only builds prototypes and scores.

    .venv/bin/python research/wordnet_dev.py --head service/engine/heads/minilm-l6-semcor.npz
    .venv/bin/python research/wordnet_dev.py --sentence-weight 0 --sentence-weight 1

With a sentence weight above 0 every instance's window sentence vector is encoded
once (and cached) for the sentence channel.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

from service.config import load_settings
from service.engine import ContextEncoder
from service.engine.alignment import load_head
from service.engine.lexicon import open_wordnet
from service.evaluation.baselines import most_frequent_sense, training_sense_counts
from service.evaluation.benchmark import (
    EngineOptions,
    encode_instance_windows,
    encode_instances,
    f1_table,
    flatten,
    score_engine,
    window_lookup,
)
from service.evaluation.splits import is_held_out
from service.evaluation.vector_store import CachingEncoder
from service.wordnet.corpus import CorpusStats, read_corpus

CALIBRATION = 1500


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--semcor", type=Path, default=Path("../shared/data/semcor30.jsonl.gz"))
    parser.add_argument("--head", type=Path, action="append", default=[],
                        help="score with this head too (repeatable); without: no head")
    parser.add_argument("--pos", default="nvar", help="parts of speech of dev instances")
    parser.add_argument("--no-prior", action="store_true")
    parser.add_argument("--max-dev", type=int, help="first N dev instances")
    parser.add_argument("--sentence-weight", type=float, action="append", default=[],
                        help="the sentence channel's weight (repeatable; default 0)")
    args = parser.parse_args()

    settings = load_settings()
    reader = open_wordnet(cache_dir=settings.cache_dir)
    sentences = list(read_corpus(args.semcor, reader, CorpusStats()))
    instances = flatten(sentences)
    raw = ContextEncoder(batch_size=64)
    vectors, _ = encode_instances(raw, instances, settings.cache_dir)
    dev_mask = np.array([is_held_out(i.doc, 0.1) for i in instances])
    held = np.flatnonzero(dev_mask)
    cal_idx = held[:CALIBRATION]
    dev_idx = [n for n in cal_idx if instances[n].pos in args.pos][: args.max_dev]
    train_idx = np.flatnonzero(~dev_mask)
    fit_idx = train_idx

    def pick(index: np.ndarray | list[int]) -> tuple[list, np.ndarray]:
        return [instances[n] for n in index], vectors[np.asarray(index, int)]

    dev = pick(dev_idx)
    counts = training_sense_counts([s for s in sentences if not is_held_out(s.doc, 0.1)])
    mfs = {n: k for n, i in enumerate(dev[0])
           if (k := most_frequent_sense(reader, counts, i.lemma, i.pos)) is not None}
    items = CachingEncoder(raw, settings.cache_dir)
    heads = [None, *(load_head(path, raw.model_id) for path in args.head)]
    weights = args.sentence_weight or [0.0]
    windows = None
    if any(weight > 0 for weight in weights):
        windows = window_lookup(instances,
                                encode_instance_windows(raw, instances, settings.cache_dir))
    out = {"n": len(dev_idx), "mfs": f1_table(dev[0], mfs)}
    for head, weight in [(head, weight) for head in heads for weight in weights]:
        prior = "" if args.no_prior else EngineOptions.sense_prior_pos
        options = EngineOptions(sense_prior_pos=prior, head=head, sentence_weight=weight)
        run = score_engine(items, reader, pick(fit_idx), pick(cal_idx), pick(train_idx), dev,
                           options, windows)
        table = f1_table(dev[0], run["decisions"].best())
        name = "no head" if head is None else f"{head.head_id}.v{head.version}"
        name += f", sentence weight {weight:g}"
        out[name] = {"table": table, "temperature": run["temperature"]}
        print(name, {p: round(100 * v["f1"], 2) for p, v in table.items()},
              "T", round(run["temperature"], 4), file=sys.stderr, flush=True)
    print("MFS", {p: round(100 * v["f1"], 2) for p, v in out["mfs"].items()}, file=sys.stderr)
    print(json.dumps(out, sort_keys=True, default=str))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
