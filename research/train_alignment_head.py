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
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
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
    # The prototype objective's evidence: per gloss row, the sum and count of the training
    # occurrences labeled with that sense (raw unit vectors), and each occurrence's own row.
    sense_sums: np.ndarray | None = None  # (m, dim)
    sense_counts: np.ndarray | None = None  # (m,)
    own_rows: np.ndarray | None = None  # (n,) gloss row of each occurrence's labeled sense


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


# Candidate rows of one batch: (rows, padded candidate index, context map, gloss map,
# random generator) -> (batch, width, dim) unit vectors the occurrences are scored against.
Candidates = Callable[[np.ndarray, torch.Tensor, torch.Tensor, torch.Tensor,
                       np.random.Generator], torch.Tensor]


def _fit(
    data: TrainingSet,
    candidates: Candidates,
    *,
    epochs: int,
    batch_size: int,
    learning_rate: float,
    weight_decay: float,
    tau: float,
    seed: int,
    log: bool,
) -> tuple[np.ndarray, np.ndarray, list[float]]:
    """The training loop both objectives share: cross-entropy over cosines / tau between
    each aligned occurrence and its candidates' rows, weight decay towards identity."""
    torch.manual_seed(seed)
    generator = np.random.default_rng(seed)
    dim = data.contexts.shape[1]
    context_weight = torch.zeros((dim, dim), requires_grad=True)
    gloss_weight = torch.zeros((dim, dim), requires_grad=True)
    optimiser = torch.optim.AdamW([context_weight, gloss_weight], lr=learning_rate,
                                  weight_decay=0.0)
    contexts = torch.as_tensor(data.contexts, dtype=torch.float32)
    gold = torch.as_tensor(data.gold, dtype=torch.long)
    losses = []
    for epoch in range(epochs):
        order = generator.permutation(len(data.candidates))
        total, batches = 0.0, 0
        for lo in range(0, len(order), batch_size):
            rows = order[lo : lo + batch_size]
            index, mask = _padded([data.candidates[i] for i in rows])
            x = _align(contexts[rows], context_weight)
            targets = candidates(rows, index, context_weight, gloss_weight, generator)
            logits = torch.einsum("bd,bkd->bk", x, targets) / tau
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
    """(context weight, gloss weight, mean loss per epoch): occurrences against their
    lemma's aligned glosses."""
    glosses = torch.as_tensor(data.glosses, dtype=torch.float32)

    def candidates(rows: np.ndarray, index: torch.Tensor, context_weight: torch.Tensor,
                   gloss_weight: torch.Tensor, generator: np.random.Generator) -> torch.Tensor:
        return _align(glosses[index], gloss_weight)

    return _fit(data, candidates, epochs=epochs, batch_size=batch_size,
                learning_rate=learning_rate, weight_decay=weight_decay, tau=tau, seed=seed,
                log=log)


def train_prototype_head(
    data: TrainingSet,
    *,
    epochs: int = 3,
    batch_size: int = 512,
    learning_rate: float = 1e-3,
    weight_decay: float = 1e-4,
    tau: float = 0.05,
    evidence_prior: float = 4.0,
    gloss_only_share: float = 0.3,
    seed: int = 13,
    log: bool = False,
) -> tuple[np.ndarray, np.ndarray, list[float]]:
    """Like `train_head`, but against the engine's own prototypes: each candidate sense is
    normalise((1 - w) gloss(g) + w context(c)), c the mean of the sense's other training
    occurrences (leave-one-out), w = n / (n + evidence_prior) as the engine blends; a share
    of candidate senses is shown without evidence (gloss only), as unlabeled senses are."""
    if data.sense_sums is None or data.sense_counts is None or data.own_rows is None:
        raise ValueError("the prototype objective needs sense sums (with_sense_sums)")
    contexts = torch.as_tensor(data.contexts, dtype=torch.float32)
    glosses = torch.as_tensor(data.glosses, dtype=torch.float32)
    sums = torch.as_tensor(data.sense_sums, dtype=torch.float32)
    counts = torch.as_tensor(data.sense_counts, dtype=torch.float32)
    own = torch.as_tensor(data.own_rows, dtype=torch.long)

    def candidates(rows: np.ndarray, index: torch.Tensor, context_weight: torch.Tensor,
                   gloss_weight: torch.Tensor, generator: np.random.Generator) -> torch.Tensor:
        x_raw = contexts[rows]
        is_own = (index == own[rows][:, None]).unsqueeze(-1)  # (b, width, 1)
        n = counts[index] - is_own.squeeze(-1).float()
        drop = torch.as_tensor(generator.random(tuple(n.shape)) < gloss_only_share)
        n = torch.where(drop, torch.zeros_like(n), n)
        centroid = (sums[index] - is_own * x_raw[:, None, :]) / n.clamp(min=1.0).unsqueeze(-1)
        w = (n / (n + evidence_prior)).unsqueeze(-1)
        mixed = (1 - w) * _align(glosses[index], gloss_weight) + w * _align(centroid,
                                                                             context_weight)
        return torch.nn.functional.normalize(mixed, dim=-1)

    return _fit(data, candidates, epochs=epochs, batch_size=batch_size,
                learning_rate=learning_rate, weight_decay=weight_decay, tau=tau, seed=seed,
                log=log)


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
    return with_sense_sums(TrainingSet(np.asarray(vectors, np.float32)[kept], glosses,
                                       candidates, np.array(gold)))


def with_sense_sums(data: TrainingSet) -> TrainingSet:
    """`data` with the prototype objective's per-sense sums and counts filled in."""
    own = np.array([c[g] for c, g in zip(data.candidates, data.gold, strict=True)], np.int64)
    sums = np.zeros(data.glosses.shape, np.float64)
    np.add.at(sums, own, data.contexts)
    counts = np.bincount(own, minlength=len(data.glosses)).astype(np.float32)
    return replace(data, sense_sums=sums.astype(np.float32), sense_counts=counts,
                   own_rows=own)


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
    parser.add_argument("--objective", choices=("gloss", "prototype"), default="gloss",
                        help="gloss: occurrence vs its lemma's glosses (v1); prototype: vs "
                        "the engine's blended prototypes, evidence left out in turn")
    parser.add_argument("--gloss-only-share", type=float, default=0.3)
    parser.add_argument("--head-version", type=int, default=HEAD_VERSION)
    parser.add_argument("--head-id", default=HEAD_ID)
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
    common = {"epochs": args.epochs, "tau": args.tau, "weight_decay": args.weight_decay,
              "learning_rate": args.learning_rate, "log": True}
    if args.objective == "prototype":
        context, gloss, losses = train_prototype_head(
            data, gloss_only_share=args.gloss_only_share, **common)
    else:
        context, gloss, losses = train_head(data, **common)
    dtype = np.float32 if args.float32 else np.float16
    head = AlignmentHead(
        head_id=args.head_id, version=args.head_version, encoder=encoder_family(raw.model_id),
        context_weight=context.astype(dtype), gloss_weight=gloss.astype(dtype),
        training={"data": args.semcor.name, "data_sha256": file_digest(args.semcor),
                  "code_commit": _git_commit(), "split": "SemCor minus is_held_out(doc, 0.1)",
                  "occurrences": len(data.candidates), "glosses": len(data.glosses),
                  "epochs": args.epochs, "tau": args.tau, "weight_decay": args.weight_decay,
                  "learning_rate": args.learning_rate, "min_count": args.min_count,
                  "pos": args.pos, "objective": args.objective,
                  "gloss_only_share": args.gloss_only_share,
                  "losses": [round(x, 4) for x in losses]})
    args.out.parent.mkdir(parents=True, exist_ok=True)
    head.save(args.out)
    print(f"wrote {args.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
