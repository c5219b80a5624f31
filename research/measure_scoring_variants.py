"""Compare ways of scoring an occurrence against a sense's gloss, examples and evidence.

Two development sets, both encoded once and cached (only the scoring varies):

- demo: the demo's evidence half only (the held-out half is never read), split
  again by document with several salts; one part is evidence, the other scored.
- semcor: the SemCor development slice of research/measure_engine.py (run its
  `encode` first; the cache is read from --semcor-cache).

Prints accuracy without and with the sense prior (with the prior, T is fitted on
the scored rows themselves, so that column is optimistic; it only says whether
the prior can help at all).

    .venv/bin/python -m research.measure_scoring_variants
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import pickle
from collections import defaultdict
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from service.engine import fit_temperature, share_within_documents

os.environ.setdefault("HF_HUB_OFFLINE", "1")  # before the encoder loads transformers
ROOT = Path(__file__).resolve().parent.parent

DEMO_SALTS = ("inner:", "inner-1:", "inner-2:", "inner-3:", "inner-4:")


def unit(x: np.ndarray) -> np.ndarray:
    return x / np.maximum(np.linalg.norm(x, axis=-1, keepdims=True), 1e-12)


@dataclass
class TermData:
    senses: list[str]
    gloss: dict[str, np.ndarray] = field(default_factory=dict)
    examples: dict[str, list[np.ndarray]] = field(default_factory=lambda: defaultdict(list))
    evidence: dict[str, list[np.ndarray]] = field(default_factory=lambda: defaultdict(list))


@dataclass
class Query:
    term: str
    vector: np.ndarray
    gold: list[int]
    group: tuple[str, str]


# -- scoring variants ------------------------------------------------------------------------

Scorer = Callable[[TermData, np.ndarray], np.ndarray]  # (queries, dim) -> (queries, senses)


def blend_scorer(k: float) -> Scorer:
    """The current engine: unit((1-w) definition + w evidence), w = n/(n+k)."""

    def score(t: TermData, q: np.ndarray) -> np.ndarray:
        rows = []
        for s in t.senses:
            parts = ([t.gloss[s]] if s in t.gloss else []) + t.examples[s]
            d = unit(np.sum(parts, axis=0)) if parts else None
            e = unit(np.sum(t.evidence[s], axis=0)) if t.evidence[s] else None
            if e is None:
                p = d if d is not None else np.zeros(q.shape[1])
            elif d is None:
                p = e
            else:
                n = len(t.evidence[s])
                w = n / (n + k) if k else 1.0
                p = unit((1 - w) * d + w * e)
            rows.append(p)
        return q @ np.stack(rows).T

    return score


def split_scorer(alpha: float, center: str, fill: str, top: int = 0) -> Scorer:
    """alpha * cos(q, gloss) + (1 - alpha) * contextual score.

    contextual score: cos(q - mu, centroid - mu) (centroid of examples + evidence; or
    the mean of the `top` nearest items when top > 0); mu = the term's centre
    ('none', 'items': mean of all contextual items, 'senses': mean of sense centroids).
    fill: contextual score of a sense with no contextual item ('zero', 'mean': the mean
    of the other senses' contextual scores, 'gloss': its gloss score).
    """

    def score(t: TermData, q: np.ndarray) -> np.ndarray:
        items = {s: t.examples[s] + t.evidence[s] for s in t.senses}
        with_items = [s for s in t.senses if items[s]]
        mu = np.zeros(q.shape[1])
        if center == "items" and with_items:
            mu = np.mean([v for s in with_items for v in items[s]], axis=0)
        elif center == "senses" and len(with_items) >= 2:
            mu = np.mean([unit(np.mean(items[s], axis=0)) for s in with_items], axis=0)
        qc = unit(q - mu)
        gloss = np.stack([t.gloss.get(s, np.zeros(q.shape[1])) for s in t.senses])
        g = q @ gloss.T
        c = np.full((len(q), len(t.senses)), np.nan)
        for j, s in enumerate(t.senses):
            if not items[s]:
                continue
            if top:
                sims = qc @ unit(np.stack(items[s]) - mu).T
                m = min(top, sims.shape[1])
                c[:, j] = -np.sort(-sims, axis=1)[:, :m].mean(axis=1)
            else:
                c[:, j] = qc @ unit(np.mean(items[s], axis=0) - mu)
        if not with_items:
            return g
        missing = np.isnan(c)
        if missing.any():
            if fill == "zero":
                c[missing] = 0.0
            elif fill == "mean":
                means = np.nanmean(c, axis=1, keepdims=True)
                c = np.where(missing, means, c)
            else:
                c = np.where(missing, g, c)
        if not any(s in t.gloss for s in t.senses):
            return c
        return alpha * g + (1 - alpha) * c

    return score


# -- evaluation ------------------------------------------------------------------------------


def score_all(terms: dict[str, TermData], queries: list[Query], scorer: Scorer) -> list:
    by_term: dict[str, list[int]] = defaultdict(list)
    for i, query in enumerate(queries):
        by_term[query.term].append(i)
    rows: list = [None] * len(queries)
    for term, idx in by_term.items():
        block = scorer(terms[term], np.stack([queries[i].vector for i in idx]))
        for i, row in zip(idx, block, strict=True):
            rows[i] = np.asarray(row, np.float64)
    return rows


def priors_for(terms: dict[str, TermData], queries: list[Query], a: float = 4.0) -> list:
    out = []
    for query in queries:
        t = terms[query.term]
        counts = np.array([len(t.evidence[s]) for s in t.senses], float) + a
        out.append(np.log(counts / counts.sum()))
    return out


def evaluate(terms, queries, scorer, consistency: float = 0.0) -> tuple[float, float, float]:
    rows = score_all(terms, queries, scorer)
    if consistency > 0:
        rows = share_within_documents(rows, [q.group for q in queries], consistency)
    plain = np.mean([int(np.argmax(r)) in q.gold for r, q in zip(rows, queries, strict=True)])
    priors = priors_for(terms, queries)
    multi = [(r, q, p) for r, q, p in zip(rows, queries, priors, strict=True) if len(r) > 1]
    temp = fit_temperature(
        [r for r, _, _ in multi],
        [q.gold[0] for _, q, _ in multi],
        log_priors=[p for *_, p in multi],
    )
    with_prior = np.mean(
        [
            int(np.argmax(r / temp + p)) in q.gold
            for r, q, p in zip(rows, queries, priors, strict=True)
        ]
    )
    return float(plain), float(with_prior), temp


# -- data ------------------------------------------------------------------------------------


def demo_data(corpus: Path, cache: Path):
    """Encoded demo inventory and evidence half, cached."""
    stored = cache / "demo.pkl"
    if stored.exists():
        return pickle.loads(stored.read_bytes())
    from service.cli.demo import split_labels
    from service.engine import ContextEncoder, PrototypeBook
    from service.inventory.document import parse_inventory_document

    spec = parse_inventory_document(json.loads((corpus / "inventory.json").read_text("utf-8")))
    evidence_half, _ = split_labels(corpus / "labeled.jsonl")
    encoder = ContextEncoder()
    book = PrototypeBook.build(encoder, spec)
    terms = {}
    for ts in spec.terms:
        data = TermData([s.sense_id for s in ts.senses])
        items = book._items[ts.term]
        for kind, sense, vector in zip(items.kinds, items.sense_ids, items.vectors, strict=True):
            if kind == "gloss":
                data.gloss[sense] = vector.astype(np.float64)
            else:
                data.examples[sense].append(vector.astype(np.float64))
        terms[ts.term] = data
    vectors = encoder.encode_spans([(x["text"], x["start"], x["end"]) for x in evidence_half])
    labels = [
        (x["document_id"], x["id"], x["term"], x["sense"], v.astype(np.float64))
        for x, v in zip(evidence_half, vectors, strict=True)
    ]
    cache.mkdir(parents=True, exist_ok=True)
    stored.write_bytes(pickle.dumps((terms, labels)))
    return terms, labels


def demo_splits(terms, labels):
    for salt in DEMO_SALTS:
        split = {t: TermData(d.senses, d.gloss, d.examples) for t, d in terms.items()}
        queries = []
        for doc, label_id, term, sense, vector in labels:
            digest = hashlib.sha256((salt + doc).encode()).digest()
            if digest[0] % 2 == 0:
                split[term].evidence[sense].append(vector)
            else:
                gold = [split[term].senses.index(sense)]
                queries.append(Query(term, vector, gold, (label_id, term)))
        yield split, queries


def semcor_data(cache: Path):
    from research import measure_engine as me

    setup = me.Setup(cache)
    layers = (6,)
    terms = {}
    for spec in setup.terms.values():
        terms[spec.term] = TermData([s.sense_id for s in spec.senses])
    gloss = me.pool(setup.arrays["gloss::term: gloss"], layers)
    for (term, sense), v in zip(setup.gloss_rows, gloss, strict=True):
        terms[term].gloss[sense] = v.astype(np.float64)
    examples = me.pool(setup.arrays["examples"], layers)
    for (term, sense), v in zip(setup.example_rows, examples, strict=True):
        terms[term].examples[sense].append(v.astype(np.float64))
    evidence = me.pool(setup.arrays["evidence"], layers)
    for item, v in zip(setup.evidence, evidence, strict=True):
        term = setup.term_of(item)
        terms[term].evidence[me.first_key(item, setup.spec[term])].append(v.astype(np.float64))
    dev = me.pool(setup.arrays["dev"], layers)
    queries = []
    for item, v in zip(setup.dev, dev, strict=True):
        term = setup.term_of(item)
        senses = terms[term].senses
        gold = [i for i, s in enumerate(senses) if s in item.keys]
        queries.append(Query(term, v.astype(np.float64), gold, (item.doc, term)))
    return terms, queries


VARIANTS: dict[str, Scorer] = {
    "blend k=1 (before)": blend_scorer(1.0),
    "blend k=2": blend_scorer(2.0),
    "blend k=3": blend_scorer(3.0),
    "blend k=4": blend_scorer(4.0),
    "blend k=8": blend_scorer(8.0),
    "blend k=16": blend_scorer(16.0),
    "split a=0.5 center=none fill=gloss": split_scorer(0.5, "none", "gloss"),
    "split a=0.5 center=none fill=mean": split_scorer(0.5, "none", "mean"),
    "split a=0.3 center=none fill=mean": split_scorer(0.3, "none", "mean"),
    "split a=0.5 center=items fill=zero": split_scorer(0.5, "items", "zero"),
    "split a=0.5 center=senses fill=zero": split_scorer(0.5, "senses", "zero"),
    "split a=0.5 center=senses fill=mean": split_scorer(0.5, "senses", "mean"),
    "split a=0.3 center=senses fill=mean": split_scorer(0.3, "senses", "mean"),
    "split a=0.7 center=senses fill=mean": split_scorer(0.7, "senses", "mean"),
    "split a=0.2 center=senses fill=mean": split_scorer(0.2, "senses", "mean"),
    "split a=0.1 center=senses fill=mean": split_scorer(0.1, "senses", "mean"),
    "split a=0.3 center=senses fill=zero": split_scorer(0.3, "senses", "zero"),
    "split a=0.3 center=items fill=zero": split_scorer(0.3, "items", "zero"),
    "split a=0.5 center=none fill=mean top1": split_scorer(0.5, "none", "mean", top=1),
    "split a=0.5 center=none fill=mean top3": split_scorer(0.5, "none", "mean", top=3),
    "split a=0.5 center=senses fill=mean top3": split_scorer(0.5, "senses", "mean", top=3),
}


def temperature_and_abstain(terms, queries, scorer: Scorer, consistency: float) -> None:
    """Fit T on the even dev instances (rows as assign() sees them: after document
    consistency, no prior), judge it on the odd ones; then the abstain sweep:
    share kept when the gold sense is listed, share abstained when it is removed."""
    from service.engine import confidences_and_hits, expected_calibration_error
    from service.engine import negative_log_likelihood as nll

    rows = score_all(terms, queries, scorer)
    if consistency > 0:
        rows = share_within_documents(rows, [q.group for q in queries], consistency)
    multi = [(r, q.gold[0]) for r, q in zip(rows, queries, strict=True) if len(r) > 1]
    even, odd = multi[0::2], multi[1::2]
    temp = fit_temperature([r for r, _ in even], [g for _, g in even])
    print(f"T fitted on even half: {temp:.4f}")
    for t in (0.03, 0.05, 0.07, temp, 0.1, 0.15):
        conf, hit = confidences_and_hits([r for r, _ in odd], [g for _, g in odd], t)
        print(
            f"  T={t:.4f} odd NLL {nll([r for r, _ in odd], [g for _, g in odd], t):.3f} "
            f"ECE {expected_calibration_error(conf, hit):.3f} acc {hit.mean():.3f}"
        )
    for threshold in (0.10, 0.15, 0.20, 0.25, 0.30, 0.40):
        kept = np.mean([r.max() >= threshold for r in rows])
        removed = [np.delete(r, q.gold) for r, q in zip(rows, queries, strict=True)]
        abstained = np.mean([r.max() < threshold for r in removed if len(r)])
        print(
            f"  abstain {threshold:.2f}: present kept {kept:.3f}, removed abstained {abstained:.3f}"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--corpus", type=Path, default=ROOT / "demo_corpus")
    parser.add_argument("--cache", type=Path, default=Path("/tmp/whichsense-scoring"))
    parser.add_argument("--semcor-cache", type=Path, default=Path("/tmp/whichsense-measure"))
    parser.add_argument("--only", default="", help="comma-separated variant names")
    parser.add_argument("--skip-semcor", action="store_true")
    parser.add_argument("--calibrate", default="", help="variant: fit T and sweep abstain on dev")
    args = parser.parse_args()
    variants = VARIANTS
    if args.only:
        variants = {k: v for k, v in VARIANTS.items() if k in args.only.split(",")}
    if args.calibrate:
        sterms, squeries = semcor_data(args.semcor_cache)
        temperature_and_abstain(sterms, squeries, VARIANTS[args.calibrate], 0.5)
        return
    terms, labels = demo_data(args.corpus, args.cache)
    splits = list(demo_splits(terms, labels))
    no_evidence = [
        ({t: TermData(d.senses, d.gloss, d.examples) for t, d in s.items()}, q) for s, q in splits
    ]
    print(
        f"demo: {len(labels)} labels in the evidence half, {len(DEMO_SALTS)} inner splits, "
        f"scored per split {[len(q) for _, q in splits]}"
    )
    print(f"{'variant':42} demo no-ev   demo evidence (prior off)   demo ev+prior")
    for name, scorer in variants.items():
        base = [evaluate(t, q, scorer)[0] for t, q in no_evidence]
        res = [evaluate(t, q, scorer) for t, q in splits]
        plain = np.array([r[0] for r in res])
        prior = np.array([r[1] for r in res])
        delta = plain - np.array(base)
        print(
            f"{name:42} {np.mean(base):.3f}       {plain.mean():.3f} ± {plain.std():.3f} "
            f"[{' '.join(f'{x:+.3f}' for x in delta)}]   {prior.mean():.3f}",
            flush=True,
        )
    if args.skip_semcor:
        return
    sterms, squeries = semcor_data(args.semcor_cache)
    print(f"semcor dev: {len(squeries)} instances")
    print(f"{'variant':42} dev w=0  dev+prior(T)        dev w=0.5")
    for name, scorer in variants.items():
        plain, prior, temp = evaluate(sterms, squeries, scorer)
        cons = evaluate(sterms, squeries, scorer, consistency=0.5)[0]
        print(f"{name:42} {plain:.3f}    {prior:.3f} (T={temp:.3f})   {cons:.3f}", flush=True)


if __name__ == "__main__":
    main()
