"""Train the alignment head (service/engine/alignment.py) on cached SemCor features.

The encoder stays frozen: every SemCor occurrence is encoded once (the
benchmark's cache), every candidate gloss once (the engine's gloss template,
through the benchmark's item cache), and the head learns from those arrays in
minutes on a CPU. Objective: for each occurrence of a polysemous lemma, a
softmax over the cosines between the aligned occurrence and the aligned glosses
of its lemma's senses (temperature `tau`), cross-entropy against the labeled
sense: a bi-encoder in the spirit of Blevins & Zettlemoyer (2020), with the
encoder frozen and a residual linear map on each side, weight decay pulling the
maps towards identity.

Only SemCor documents outside the development split (service/evaluation/splits,
10 % held out by document) are read, so the development figures stay honest.

    .venv/bin/python research/train_alignment_head.py \
        --out service/engine/heads/minilm-l6-semcor.npz
"""

from __future__ import annotations

import argparse
import subprocess
import sys
from collections.abc import Sequence
from dataclasses import dataclass
from itertools import islice
from pathlib import Path

import numpy as np
import torch

from service.config import load_settings
from service.engine.alignment import AlignmentHead, encoder_family

HEAD_ID = "minilm-l6-semcor"
HEAD_VERSION = 1


@dataclass
class TrainingSet:
    """Occurrence vectors, each with the rows of its candidate glosses and the gold one."""

    contexts: np.ndarray  # (n, dim) unit vectors
    glosses: np.ndarray  # (m, dim) unit vectors
    candidates: list[np.ndarray]  # per occurrence: indices into glosses
    gold: np.ndarray  # (n,) position of the labeled sense within its candidates


def _padded(candidates: Sequence[np.ndarray]) -> tuple[torch.Tensor, torch.Tensor]:
    width = max(len(c) for c in candidates)
    index = torch.zeros((len(candidates), width), dtype=torch.long)
    mask = torch.zeros((len(candidates), width), dtype=torch.bool)
    for row, c in enumerate(candidates):
        index[row, : len(c)] = torch.as_tensor(c, dtype=torch.long)
        mask[row, : len(c)] = True
    return index, mask


def _align(vectors: torch.Tensor, weight: torch.Tensor) -> torch.Tensor:
    return torch.nn.functional.normalize(vectors + vectors @ weight, dim=-1)


def train_head(
    data: TrainingSet,
    *,
    epochs: int = 3,
    batch_size: int = 512,
    learning_rate: float = 1e-3,
    weight_decay: float = 1e-4,
    tau: float = 0.05,
    seed: int = 13,
    log: bool = False,
) -> tuple[np.ndarray, np.ndarray, list[float]]:
    """(context weight, gloss weight, mean loss per epoch)."""
    torch.manual_seed(seed)
    generator = np.random.default_rng(seed)
    dim = data.contexts.shape[1]
    context_weight = torch.zeros((dim, dim), requires_grad=True)
    gloss_weight = torch.zeros((dim, dim), requires_grad=True)
    optimiser = torch.optim.AdamW([context_weight, gloss_weight], lr=learning_rate,
                                  weight_decay=0.0)
    contexts = torch.as_tensor(data.contexts, dtype=torch.float32)
    glosses = torch.as_tensor(data.glosses, dtype=torch.float32)
    gold = torch.as_tensor(data.gold, dtype=torch.long)
    losses = []
    for epoch in range(epochs):
        order = generator.permutation(len(data.candidates))
        total, batches = 0.0, 0
        for lo in range(0, len(order), batch_size):
            rows = order[lo : lo + batch_size]
            index, mask = _padded([data.candidates[i] for i in rows])
            x = _align(contexts[rows], context_weight)
            g = _align(glosses[index], gloss_weight)  # (b, width, dim)
            logits = torch.einsum("bd,bkd->bk", x, g) / tau
            logits = logits.masked_fill(~mask, -1e9)
            loss = torch.nn.functional.cross_entropy(logits, gold[rows])
            penalty = weight_decay * (context_weight.pow(2).sum() + gloss_weight.pow(2).sum())
            optimiser.zero_grad()
            (loss + penalty).backward()
            optimiser.step()
            total += float(loss.detach())
            batches += 1
        losses.append(total / max(batches, 1))
        if log:
            print(f"epoch {epoch + 1}: loss {losses[-1]:.4f}", file=sys.stderr, flush=True)
    return context_weight.detach().numpy(), gloss_weight.detach().numpy(), losses


def build_training_set(
    instances: Sequence,  # service.evaluation.benchmark.Instance
    vectors: np.ndarray,
    reader,  # WordNetCorpusReader
    encoder,  # anything with encode_glosses (a CachingEncoder over the engine's encoder)
    min_count: int = 1,
) -> TrainingSet:
    """Polysemous-lemma occurrences of `instances` and their candidates' gloss vectors,
    glosses written as the engine writes a WordNet sense's gloss (service/wordnet/inventory)."""
    from collections import Counter

    from service.wordnet.inventory import sense_spec
    from service.wordnet.senses import index_form, senses_of, surface_form

    counts = Counter((i.lemma, i.pos) for i in instances)
    keys: dict[str, int] = {}
    gloss_inputs: list[tuple[str, str, tuple[str, ...]]] = []
    kept, candidates, gold = [], [], []
    for n, instance in enumerate(instances):
        if counts[(instance.lemma, instance.pos)] < min_count:
            continue
        senses = senses_of(reader, instance.lemma, instance.pos)
        names = [sense.key() for sense in senses]
        if len(names) < 2 or instance.gold[0] not in names:
            continue
        term = surface_form(index_form(instance.lemma))
        for sense, key in zip(senses, names, strict=True):
            if key not in keys:
                keys[key] = len(gloss_inputs)
                spec = sense_spec(sense)
                gloss_inputs.append((term, spec.gloss, spec.examples))
        kept.append(n)
        candidates.append(np.array([keys[k] for k in names]))
        gold.append(names.index(instance.gold[0]))
    glosses = np.asarray(encoder.encode_glosses(gloss_inputs), np.float32)
    return TrainingSet(np.asarray(vectors, np.float32)[kept], glosses, candidates,
                       np.array(gold))


def _git_commit() -> str:
    try:
        return subprocess.run(["git", "rev-parse", "HEAD"], capture_output=True, text=True,
                              check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def main(argv: Sequence[str] | None = None) -> int:
    from research.files import file_digest
    from service.engine import ContextEncoder
    from service.engine.lexicon import open_wordnet
    from service.evaluation.benchmark import encode_instances, flatten
    from service.evaluation.splits import is_held_out
    from service.evaluation.vector_store import CachingEncoder
    from service.wordnet.corpus import CorpusStats, read_corpus

    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--semcor", type=Path, default=Path("../shared/data/semcor30.jsonl.gz"))
    parser.add_argument("--out", type=Path, required=True)
    parser.add_argument("--epochs", type=int, default=3)
    parser.add_argument("--tau", type=float, default=0.05)
    parser.add_argument("--weight-decay", type=float, default=1e-4)
    parser.add_argument("--learning-rate", type=float, default=1e-3)
    parser.add_argument("--pos", default="nv", help="parts of speech trained on")
    parser.add_argument("--min-count", type=int, default=10,
                        help="lemmas seen fewer times in training are left out")
    parser.add_argument("--train-sentences", type=int, help="read the first N sentences only")
    parser.add_argument("--float32", action="store_true", help="store float32 weights")
    args = parser.parse_args(argv)

    settings = load_settings()
    reader = open_wordnet(cache_dir=settings.cache_dir)
    sentences = list(islice(read_corpus(args.semcor, reader, CorpusStats()),
                            args.train_sentences))
    instances = flatten(sentences)
    raw = ContextEncoder(batch_size=64)
    # the benchmark's cached SemCor vectors
    vectors, _ = encode_instances(raw, instances, settings.cache_dir)
    keep = [n for n, i in enumerate(instances)
            if not is_held_out(i.doc, 0.1) and i.pos in args.pos]
    items = CachingEncoder(raw, settings.cache_dir)
    data = build_training_set([instances[n] for n in keep], vectors[keep], reader, items,
                              args.min_count)
    items.save()
    print(f"{len(data.candidates)} occurrences, {len(data.glosses)} glosses", file=sys.stderr)
    context, gloss, losses = train_head(data, epochs=args.epochs, tau=args.tau,
                                        weight_decay=args.weight_decay,
                                        learning_rate=args.learning_rate, log=True)
    dtype = np.float32 if args.float32 else np.float16
    head = AlignmentHead(
        head_id=HEAD_ID, version=HEAD_VERSION, encoder=encoder_family(raw.model_id),
        context_weight=context.astype(dtype), gloss_weight=gloss.astype(dtype),
        training={"data": args.semcor.name, "data_sha256": file_digest(args.semcor),
                  "code_commit": _git_commit(), "split": "SemCor minus is_held_out(doc, 0.1)",
                  "occurrences": len(data.candidates), "glosses": len(data.glosses),
                  "epochs": args.epochs, "tau": args.tau, "weight_decay": args.weight_decay,
                  "learning_rate": args.learning_rate, "min_count": args.min_count,
                  "pos": args.pos,
                  "losses": [round(x, 4) for x in losses]})
    args.out.parent.mkdir(parents=True, exist_ok=True)
    head.save(args.out)
    print(f"wrote {args.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
