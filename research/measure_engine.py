"""Measure the engine's design choices on a SemCor development slice; print the figures.

Development data: whole held-out SemCor documents (dev) and, for prototypes,
sentences from the other SemCor documents that contain the dev lemmas
(Miller et al. 1993; sense keys mapped to WordNet 3.0). Inventories are the
WordNet 3.0 senses of each lemma+pos. Encodings are cached under --cache so a
rerun of the report costs nothing.

    .venv/bin/python -m research.measure_engine encode     # slow: runs the encoder
    .venv/bin/python -m research.measure_engine report     # layer, gloss, prior, T, ...
    .venv/bin/python -m research.measure_engine rationale  # attention vs erasure agreement
    .venv/bin/python -m research.measure_engine speed      # tokens/s of encode_spans and tag()
    .venv/bin/python -m research.measure_engine semeval    # the few final checks on SemEval-2013
"""

from __future__ import annotations

import argparse
import gzip
import hashlib
import json
import random
import time
from collections import Counter, defaultdict
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from research.layers import encode_spans_by_layer, encode_texts_by_layer
from service.engine import (
    ContextEncoder,
    Disambiguator,
    Document,
    Evidence,
    InventorySettings,
    InventorySpec,
    OccurrenceFinder,
    SenseSpec,
    SpanQuery,
    TermSpec,
    confidences_and_hits,
    expected_calibration_error,
    fit_temperature,
    negative_log_likelihood,
    open_wordnet,
    share_within_documents,
)
from service.engine.prototypes import DEFAULT_PRIOR_SMOOTHING
from service.engine.rationale import (
    attention_words,
    erasure_drops,
    rollout_words,
    top_word_agreement,
)

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT.parent / "shared" / "data"
DEV_DOCS = ("semcor3.0/brown1/br-a02", "semcor3.0/brown1/br-e02", "semcor3.0/brown2/br-f13")
MAX_TRAIN_SENTENCES_PER_LEMMA = 12
LAYER_SETS = {
    "L6": (6,),
    "L5-6": (5, 6),
    "L4-6": (4, 5, 6),
    "L3-6": (3, 4, 5, 6),
    "L1-6": (1, 2, 3, 4, 5, 6),
    "L0-6": (0, 1, 2, 3, 4, 5, 6),
    "L2-4": (2, 3, 4),
}
GLOSS_TEMPLATES = {
    "gloss": "{gloss}",
    "term: gloss": "{term}: {gloss}",
    "term: gloss; examples": "{term}: {gloss}; {examples}",
}


@dataclass(frozen=True)
class Instance:
    text: str
    start: int
    end: int
    lemma: str
    pos: str
    keys: tuple[str, ...]
    doc: str


def read_sentences(path: Path):
    """(doc, text, instances) per sentence; tokens joined by spaces, '_' written as ' '."""
    with gzip.open(path, "rt", encoding="utf-8") as handle:
        for line in handle:
            obj = json.loads(line)
            offsets, position = [], 0
            for token in obj["tokens"]:
                offsets.append((position, position + len(token)))
                position += len(token) + 1
            text = " ".join(obj["tokens"]).replace("_", " ")
            instances = [
                Instance(
                    text,
                    offsets[item["start"]][0],
                    offsets[item["end"] - 1][1],
                    item["lemma"].replace("_", " "),
                    item["pos"],
                    tuple(item["sense_keys"]),
                    obj["doc"],
                )
                for item in item_list(obj)
            ]
            yield obj["doc"], text, instances


def item_list(obj):
    return obj["instances"]


def wordnet_term(wn, lemma: str, pos: str) -> TermSpec | None:
    """The WordNet 3.0 senses of lemma+pos as a TermSpec (sense id = sense key)."""
    senses = []
    seen = set()
    for synset in wn.synsets(lemma.replace(" ", "_"), pos):
        for wn_lemma in synset.lemmas():
            if wn_lemma.name().lower() != lemma.replace(" ", "_").lower():
                continue
            key = wn_lemma.key()
            if key in seen:
                continue
            seen.add(key)
            senses.append(SenseSpec(key, synset.definition(), tuple(synset.examples())))
    if not senses:
        return None
    return TermSpec(f"{lemma}#{pos}", tuple(senses), aliases=(lemma,), pos=pos)


def load_slice(wn):
    """Dev instances (polysemous lemma+pos, resolvable keys) and training evidence."""
    dev: list[Instance] = []
    train_sentences = []
    for doc, _text, instances in read_sentences(DATA / "semcor30.jsonl.gz"):
        if doc in DEV_DOCS:
            dev.extend(instances)
        else:
            train_sentences.append(instances)
    terms: dict[tuple[str, str], TermSpec] = {}
    kept = []
    for item in dev:
        key = (item.lemma, item.pos)
        if key not in terms:
            spec = wordnet_term(wn, item.lemma, item.pos)
            if spec is None or len(spec.senses) < 2:
                terms[key] = None  # type: ignore[assignment]
            else:
                terms[key] = spec
        spec = terms[key]
        if spec is None:
            continue
        ids = {s.sense_id for s in spec.senses}
        if any(k in ids for k in item.keys):
            kept.append(item)
    terms = {k: v for k, v in terms.items() if v is not None}
    rng = random.Random(13)
    rng.shuffle(train_sentences)
    per_lemma: Counter[tuple[str, str]] = Counter()
    evidence: list[Instance] = []
    for instances in train_sentences:
        wanted = [i for i in instances if (i.lemma, i.pos) in terms]
        fresh = [i for i in wanted if per_lemma[(i.lemma, i.pos)] < MAX_TRAIN_SENTENCES_PER_LEMMA]
        if not fresh:
            continue
        for item in fresh:
            per_lemma[(item.lemma, item.pos)] += 1
            spec = terms[(item.lemma, item.pos)]
            ids = {s.sense_id for s in spec.senses}
            if any(k in ids for k in item.keys):
                evidence.append(item)
    return kept, evidence, terms


def first_key(item: Instance, spec: TermSpec) -> str:
    ids = [s.sense_id for s in spec.senses]
    return next(k for k in item.keys if k in ids)


# -- encoding (cached) ----------------------------------------------------------------------


def encode_all(cache: Path) -> None:
    wn = open_wordnet()
    dev, evidence, terms = load_slice(wn)
    encoder = ContextEncoder()
    inventory = InventorySpec("semcor-dev", 1, tuple(terms.values()))
    finder = OccurrenceFinder(inventory)
    print(f"dev instances {len(dev)}, evidence {len(evidence)}, terms {len(terms)}")
    started = time.time()
    encoder.tokens_encoded = 0
    dev_vectors = encode_spans_by_layer(encoder, [(i.text, i.start, i.end) for i in dev])
    evidence_vectors = encode_spans_by_layer(encoder, [(i.text, i.start, i.end) for i in evidence])
    took = time.time() - started
    print(f"spans: {encoder.tokens_encoded} tokens in {took:.1f}s")
    example_rows, example_spans = [], []
    gloss_rows = []
    for spec in terms.values():
        for sense in spec.senses:
            gloss_rows.append((spec.term, sense.sense_id, sense.gloss, sense.examples))
            for example in sense.examples:
                found = finder.find_in_text(example, terms=(spec.term,))
                if found:
                    example_rows.append((spec.term, sense.sense_id))
                    example_spans.append((example, found[0][0], found[0][1]))
    example_vectors = encode_spans_by_layer(encoder, example_spans)
    arrays = {
        "dev": dev_vectors.astype(np.float16),
        "evidence": evidence_vectors.astype(np.float16),
        "examples": example_vectors.astype(np.float16),
    }
    for name, template in GLOSS_TEMPLATES.items():
        texts = [
            template.format(term=t.split("#")[0], gloss=g, examples="; ".join(e)).strip("; ")
            for t, _, g, e in gloss_rows
        ]
        arrays[f"gloss::{name}"] = encode_texts_by_layer(encoder, texts).astype(np.float16)
    # The term's own tokens inside "term: gloss" (contextual reading of the definition).
    spans = [(f"{t.split('#')[0]}: {g}", 0, len(t.split("#")[0])) for t, _, g, _ in gloss_rows]
    arrays["gloss::term-tokens"] = encode_spans_by_layer(encoder, spans).astype(np.float16)
    cache.mkdir(parents=True, exist_ok=True)
    np.savez_compressed(cache / "vectors.npz", **arrays)
    meta = {
        "examples": example_rows,
        "glosses": [(t, s) for t, s, _, _ in gloss_rows],
        "example_spans": example_spans,
    }
    (cache / "meta.json").write_text(json.dumps(meta))
    print(f"encoded in {time.time() - started:.1f}s total")


# -- evaluation -----------------------------------------------------------------------------


def unit(x: np.ndarray) -> np.ndarray:
    return x / np.maximum(np.linalg.norm(x, axis=-1, keepdims=True), 1e-12)


def pool(array: np.ndarray, layers: tuple[int, ...]) -> np.ndarray:
    return unit(array[:, list(layers)].astype(np.float32).mean(axis=1))


class Setup:
    """Everything read back from the cache, ready for variant evaluation."""

    def __init__(self, cache: Path):
        wn = open_wordnet()
        self.dev, self.evidence, self.terms = load_slice(wn)
        self.arrays = dict(np.load(cache / "vectors.npz"))
        meta = json.loads((cache / "meta.json").read_text())
        self.example_rows = [tuple(r) for r in meta["examples"]]
        self.gloss_rows = [tuple(r) for r in meta["glosses"]]
        self.spec = {spec.term: spec for spec in self.terms.values()}

    def term_of(self, item: Instance) -> str:
        return f"{item.lemma}#{item.pos}"


def prototypes(
    setup: Setup,
    layers: tuple[int, ...],
    gloss: str | None,
    use_examples: bool,
    prior: float | None,
    evidence_mask: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """sense key -> prototype, blended as in service.engine.prototypes.blend."""
    definition: dict[str, list[np.ndarray]] = defaultdict(list)
    if gloss is not None:
        vectors = pool(setup.arrays[f"gloss::{gloss}"], layers)
        for (_, sense), vector in zip(setup.gloss_rows, vectors, strict=True):
            definition[sense].append(vector)
    if use_examples and len(setup.example_rows):
        vectors = pool(setup.arrays["examples"], layers)
        for (_, sense), vector in zip(setup.example_rows, vectors, strict=True):
            definition[sense].append(vector)
    evidence: dict[str, list[np.ndarray]] = defaultdict(list)
    if prior is not None:
        vectors = pool(setup.arrays["evidence"], layers)
        for i, (item, vector) in enumerate(zip(setup.evidence, vectors, strict=True)):
            if evidence_mask is not None and not evidence_mask[i]:
                continue
            evidence[first_key(item, setup.spec[setup.term_of(item)])].append(vector)
    result = {}
    for sense in set(definition) | set(evidence):
        d = unit(np.sum(definition[sense], axis=0)) if definition[sense] else None
        e = unit(np.sum(evidence[sense], axis=0)) if evidence[sense] else None
        if e is None:
            result[sense] = d
        elif d is None:
            result[sense] = e
        else:
            n = len(evidence[sense])
            w = n / (n + prior) if prior else 1.0
            result[sense] = unit((1 - w) * d + w * e)
    return result


def score_rows(setup: Setup, protos: dict[str, np.ndarray], layers: tuple[int, ...]):
    """Per dev instance: similarity row, gold indices (any accepted key), doc, term."""
    vectors = pool(setup.arrays["dev"], layers)
    rows, golds, groups = [], [], []
    for item, vector in zip(setup.dev, vectors, strict=True):
        spec = setup.spec[setup.term_of(item)]
        matrix = np.stack(
            [protos.get(s.sense_id, np.zeros(vector.shape, np.float32)) for s in spec.senses]
        )
        rows.append(matrix @ vector)
        golds.append([i for i, s in enumerate(spec.senses) if s.sense_id in item.keys])
        groups.append((item.doc, spec.term))
    return rows, golds, groups


def log_priors(setup: Setup, smoothing: float | None, mask: np.ndarray | None = None):
    """Per dev instance: log p(sense) from training-slice counts, add-`smoothing`; 0 if None."""
    counts: dict[str, Counter[str]] = defaultdict(Counter)
    for i, item in enumerate(setup.evidence):
        if mask is not None and not mask[i]:
            continue
        term = setup.term_of(item)
        counts[term][first_key(item, setup.spec[term])] += 1
    priors = []
    for item in setup.dev:
        spec = setup.spec[setup.term_of(item)]
        if smoothing is None:
            priors.append(np.zeros(len(spec.senses)))
            continue
        c = np.array([counts[spec.term][s.sense_id] for s in spec.senses], float) + smoothing
        priors.append(np.log(c / c.sum()))
    return priors


def accuracy(rows, golds, priors=None, temperature: float = 0.05) -> float:
    if priors is None:
        return float(np.mean([int(np.argmax(r)) in g for r, g in zip(rows, golds, strict=True)]))
    return float(
        np.mean(
            [
                int(np.argmax(r / temperature + p)) in g
                for r, g, p in zip(rows, golds, priors, strict=True)
            ]
        )
    )


def mfs_accuracy(setup: Setup) -> float:
    counts: dict[str, Counter[str]] = defaultdict(Counter)
    for item in setup.evidence:
        term = setup.term_of(item)
        counts[term][first_key(item, setup.spec[term])] += 1
    hits = []
    for item in setup.dev:
        term = setup.term_of(item)
        guess = (
            counts[term].most_common(1)[0][0]
            if counts[term]
            else setup.spec[term].senses[0].sense_id
        )
        hits.append(guess in item.keys)
    return float(np.mean(hits))


def report(cache: Path) -> None:
    setup = Setup(cache)
    nouns = np.array([i.pos == "n" for i in setup.dev])
    prior = log_priors(setup, DEFAULT_PRIOR_SMOOTHING)
    print(f"dev: {len(setup.dev)} polysemous instances ({nouns.sum()} nouns) in {DEV_DOCS}")
    print(f"evidence: {len(setup.evidence)} instances; terms: {len(setup.terms)}")
    print(f"MFS (training slice counts, WordNet first sense fallback): {mfs_accuracy(setup):.3f}")

    def acc(layers, gloss, examples, k, priors=prior, mask=None, temperature=0.05):
        protos = prototypes(setup, layers, gloss, examples, k, mask)
        rows, golds, _ = score_rows(setup, protos, layers)
        return accuracy(rows, golds, priors, temperature)

    print("\n# layers (accuracy, argmax of cosine, no sense prior):")
    print("  layers  evidence-only(unseen senses never chosen) | gloss-only | blend k=1"
          " | blend k=1 + prior (T=0.05)")
    for name, layers in LAYER_SETS.items():
        print(
            f"  {name:6s}  {acc(layers, None, False, 0.0, None):.3f} | "
            f"{acc(layers, 'term: gloss', False, None, None):.3f} | "
            f"{acc(layers, 'term: gloss', True, 1.0, None):.3f} | "
            f"{acc(layers, 'term: gloss', True, 1.0):.3f}"
        )

    layers = LAYER_SETS["L6"]
    print("\n# gloss template (L6): gloss-only | gloss+examples | blend k=1 | blend k=1 + prior")
    for name in [*GLOSS_TEMPLATES, "term-tokens"]:
        print(
            f"  {name:24s} {acc(layers, name, False, None, None):.3f} | "
            f"{acc(layers, name, True, None, None):.3f} | "
            f"{acc(layers, name, True, 1.0, None):.3f} | {acc(layers, name, True, 1.0):.3f}"
        )
    print(f"  examples only (no gloss): {acc(layers, None, True, None, None):.3f}")

    print("\n# evidence weight k (w = n/(n+k)), 'term: gloss' + examples: no prior | prior")
    for k in (0.0, 0.5, 1.0, 2.0, 4.0, 8.0, 16.0):
        print(f"  k={k:<5} {acc(layers, 'term: gloss', True, k, None):.3f} | "
              f"{acc(layers, 'term: gloss', True, k):.3f}")
    mask = np.arange(len(setup.evidence)) % 4 == 0
    scarce_prior = log_priors(setup, DEFAULT_PRIOR_SMOOTHING, mask)
    print("  evidence scarce (1 of 4 evidence items kept): no prior | prior")
    for k in (0.0, 1.0, 4.0, 16.0):
        print(f"  k={k:<5} {acc(layers, 'term: gloss', True, k, None, mask):.3f} | "
              f"{acc(layers, 'term: gloss', True, k, scarce_prior, mask):.3f}")
    print("\n# sense prior smoothing a (blend k=1, T=0.05)")
    for smoothing in (0.25, 0.5, 1.0, 2.0, 4.0, 8.0):
        print(f"  a={smoothing:<5} "
              f"{acc(layers, 'term: gloss', True, 1.0, log_priors(setup, smoothing)):.3f}")
    print("  labels from other genres only (dev document's genre removed from the evidence),")
    print("  T=0.12: no prior | a=1 | a=4")

    def genre(doc: str) -> str:
        return doc.rsplit("/", 1)[1][:4]  # br-a press, br-e skills and hobbies, ...

    for dev_genre in sorted({genre(doc) for doc in DEV_DOCS}):
        on_dev = np.array([genre(i.doc) == dev_genre for i in setup.dev])
        other = np.array([genre(e.doc) != dev_genre for e in setup.evidence])
        rows_g, golds_g, _ = score_rows(
            setup, prototypes(setup, layers, "term: gloss", True, 1.0, other), layers
        )
        figures = []
        for smoothing in (None, 1.0, 4.0):
            priors_g = log_priors(setup, smoothing, other)
            figures.append(accuracy(
                [r for r, m in zip(rows_g, on_dev, strict=True) if m],
                [g for g, m in zip(golds_g, on_dev, strict=True) if m],
                [p for p, m in zip(priors_g, on_dev, strict=True) if m],
                0.12,
            ))
        print(f"  {dev_genre} ({on_dev.sum()} instances): "
              + " | ".join(f"{f:.3f}" for f in figures))

    protos = prototypes(setup, layers, "term: gloss", True, 1.0)
    rows, golds, groups = score_rows(setup, protos, layers)
    first_gold = [g[0] for g in golds]
    half = np.arange(len(rows)) % 2 == 0

    def part(values, keep):
        return [v for v, h in zip(values, half, strict=True) if h == keep]

    temperature = fit_temperature(part(rows, True), part(first_gold, True),
                                  log_priors=part(prior, True))
    print(f"\n# temperature (with prior): fitted on even dev instances T={temperature:.4f}")
    held = (part(rows, False), part(first_gold, False))
    for t in (0.01, 0.02, 0.03, temperature, 0.05, 0.1, 1.0):
        conf, hit = confidences_and_hits(*held, t, part(prior, False))
        print(
            f"  T={t:.4f} held-out NLL "
            f"{negative_log_likelihood(*held, t, part(prior, False)):.3f}"
            f" ECE {expected_calibration_error(conf, hit):.3f} accuracy {hit.mean():.3f}"
        )
    conf, hit = confidences_and_hits(rows, first_gold, temperature, prior)
    for threshold in (0.4, 0.5, 0.6, 0.7, 0.8):
        sent = conf < threshold
        print(
            f"  review_threshold {threshold}: {sent.mean():.2%} to review, accuracy of those"
            f" kept {hit[~sent].mean():.3f}, of those sent {hit[sent].mean():.3f}"
        )

    print("\n# abstain threshold: max cosine with the gold sense present vs removed")
    settings = (
        ("blend k=1 (glosses, examples, evidence)", rows),
        ("glosses + examples only",
         score_rows(setup, prototypes(setup, layers, "term: gloss", True, None), layers)[0]),
    )
    # A sense key's third field is its lexicographer file number (WordNet senseidx(5WN)).
    lexname = {
        s.sense_id: s.sense_id.split("%")[1].split(":")[1]
        for spec in setup.terms.values()
        for s in spec.senses
    }
    print("  (removed: the gold senses; coarse: every sense in the gold's lexicographer file,"
          " i.e. a whole meaning group missing)")
    for label, sims in settings:
        present, missing, coarse = [], [], []
        for row, gold, item in zip(sims, golds, setup.dev, strict=True):
            present.append(row.max())
            others = np.delete(row, gold)
            if len(others):
                missing.append(others.max())
            senses = setup.spec[setup.term_of(item)].senses
            groups_gold = {lexname[senses[g].sense_id] for g in gold}
            far = [v for v, s in zip(row, senses, strict=True)
                   if lexname[s.sense_id] not in groups_gold]
            if far:
                coarse.append(max(far))
        present_a, missing_a, coarse_a = np.array(present), np.array(missing), np.array(coarse)
        print(f"  {label}: present mean {present_a.mean():.3f} "
              f"p5 {np.percentile(present_a, 5):.3f}; removed mean {missing_a.mean():.3f}; "
              f"coarse-removed mean {coarse_a.mean():.3f} (n={len(coarse_a)})")
        for threshold in np.arange(0.1, 0.95, 0.05):
            kept = (present_a >= threshold).mean()
            caught = (missing_a < threshold).mean()
            caught_coarse = (coarse_a < threshold).mean()
            print(f"    t={threshold:.2f}: gold present kept {kept:.3f}, gold removed abstained "
                  f"{caught:.3f}, coarse group removed abstained {caught_coarse:.3f}")

    print("\n# document consistency (mix with the (doc, term) mean), dev documents, with prior")
    repeated = Counter(groups)
    shared = np.array([repeated[g] > 1 for g in groups])
    print(f"  instances whose term recurs in its document: {shared.mean():.1%}")
    for weight in (0.0, 0.1, 0.2, 0.3, 0.5, 0.7, 1.0):
        mixed = share_within_documents(rows, groups, weight)
        print(f"  w={weight:.1f} accuracy {accuracy(mixed, golds, prior, temperature):.3f}")


# -- rationale agreement --------------------------------------------------------------------


def rationale_agreement(cache: Path, sample: int) -> None:
    setup = Setup(cache)
    encoder = ContextEncoder()
    rng = random.Random(5)
    picked = rng.sample(setup.dev, min(sample, len(setup.dev)))
    wanted = {setup.term_of(item) for item in picked}
    inventory = InventorySpec("semcor-dev", 1, tuple(setup.spec[t] for t in sorted(wanted)))
    chosen = [i for i, item in enumerate(setup.evidence) if setup.term_of(item) in wanted]
    evidence = [
        Evidence(i, setup.term_of(setup.evidence[i]),
                 first_key(setup.evidence[i], setup.spec[setup.term_of(setup.evidence[i])]),
                 setup.evidence[i].text, setup.evidence[i].start, setup.evidence[i].end)
        for i in chosen
    ]
    vectors = pool(setup.arrays["evidence"], encoder.layers)[chosen]
    disambiguator = Disambiguator(encoder, inventory, evidence, evidence_vectors=vectors)
    encodings = encoder.encode_spans_detailed([(i.text, i.start, i.end) for i in picked])
    scores: dict[str, list[float]] = {"attention": [], "rollout": []}
    chance: list[float] = []
    shown = 0
    for item, encoding in zip(picked, encodings, strict=True):
        term = setup.term_of(item)
        sims = disambiguator.prototypes.similarities(term, encoding.vector)[0]
        prototype = disambiguator.prototypes.matrix(term)[int(np.argmax(sims))]
        erased = erasure_drops(encoder, encoding, prototype, max_words=24)
        if len(erased) < 6:
            continue
        attention, rollout = attention_words(encoding, 3), rollout_words(encoding, 3)
        scores["attention"].append(top_word_agreement(attention, erased, 3))
        scores["rollout"].append(top_word_agreement(rollout, erased, 3))
        chance.append(3 / len(erased))
        if shown < 8:
            shown += 1
            print(f"  [{item.text[item.start:item.end]}] {item.text[:90]}")
            print(f"    attention {[w.word for w in attention_words(encoding, 5)]}")
            print(f"    rollout   {[w.word for w in rollout_words(encoding, 5)]}")
            print(f"    erasure   {[w.word for w in erased[:5]]}")
    print(f"instances with >= 6 context words: {len(chance)} of {len(picked)}")
    for name, values in scores.items():
        print(f"  top-3 overlap with erasure's top 3, {name}: {np.mean(values):.3f}")
    print(f"  chance level (3 / context words): {np.mean(chance):.3f}")


# -- speed ----------------------------------------------------------------------------------


def speed(cache: Path) -> None:
    setup = Setup(cache)
    encoder = ContextEncoder()
    spans = [(i.text, i.start, i.end) for i in setup.evidence[:1500]]
    encoder.encode_spans(spans[:50])  # the first forward passes pay one-off set-up costs
    encoder.tokens_encoded = 0
    started = time.time()
    encoder.encode_spans(spans)
    took = time.time() - started
    print(f"encode_spans: {len(spans)} spans, {encoder.tokens_encoded} tokens, {took:.1f}s: "
          f"{encoder.tokens_encoded / took:.0f} tokens/s, {len(spans) / took:.0f} spans/s")
    texts = list(dict.fromkeys(i.text for i in setup.dev))[:300]
    chosen_texts = set(texts)
    wanted = sorted({setup.term_of(i) for i in setup.dev if i.text in chosen_texts})
    inventory = InventorySpec(
        "semcor-dev", 1, tuple(setup.spec[t] for t in wanted),
        # token channel only: classify_vectors below has span vectors, no window vectors
        settings=InventorySettings(sentence_weight=0.0),
    )
    started = time.time()
    disambiguator = Disambiguator(encoder, inventory)
    print(f"prototypes for {len(wanted)} terms (glosses and examples): "
          f"{time.time() - started:.1f}s")
    documents = [Document.from_text(f"d{n}", text) for n, text in enumerate(texts)]
    runs = (
        ("tag(), no rationale", False, frozenset()),
        ("tag(), attention + nearest evidence, no erasure", True, frozenset()),
        ("tag(), full rationale (erasure for review)", True, frozenset({"review"})),
    )
    for label, rationale, erasure_for in runs:
        disambiguator.erasure_for = erasure_for
        encoder.tokens_encoded = 0
        started = time.time()
        results = list(disambiguator.tag(documents, rationale=rationale))
        took = time.time() - started
        count = sum(len(r.occurrences) for r in results)
        review = sum(o.status == "review" for r in results for o in r.occurrences)
        print(f"{label}: {len(documents)} sentences, {count} occurrences ({review} review), "
              f"{took:.1f}s: {count / took:.0f} occurrences/s, "
              f"{encoder.tokens_encoded / took:.0f} tokens/s")
    started = time.time()
    queries = [
        SpanQuery(i.text, i.start, i.end, setup.term_of(i))
        for i in setup.dev
        if i.text in chosen_texts
    ]
    disambiguator.classify_spans(queries)
    print(f"classify_spans without rationale: {len(queries) / (time.time() - started):.0f} "
          f"spans/s")


def semeval_checks(cache: Path) -> None:
    """The documented final checks on SemEval-2013 Task 12 (Navigli, Jurgens & Vannella 2013):
    the defaults chosen on SemCor, consistency on/off, sense prior on/off, and MFS."""
    wn = open_wordnet()
    test: list[Instance] = []
    for _doc, _text, instances in read_sentences(DATA / "semeval2013-en.jsonl.gz"):
        test.extend(instances)
    terms: dict[tuple[str, str], TermSpec] = {}
    for item in test:
        key = (item.lemma.lower(), item.pos)
        if key not in terms:
            terms[key] = wordnet_term(wn, *key)  # type: ignore[assignment]
    terms = {k: v for k, v in terms.items() if v is not None}
    scored = [
        i for i in test if (i.lemma.lower(), i.pos) in terms
        and any(k in {s.sense_id for s in terms[(i.lemma.lower(), i.pos)].senses} for k in i.keys)
    ]
    per_lemma: Counter[tuple[str, str]] = Counter()
    evidence: list[Evidence] = []
    counts: dict[tuple[str, str], Counter[str]] = defaultdict(Counter)
    for _doc, _text, instances in read_sentences(DATA / "semcor30.jsonl.gz"):
        for item in instances:
            key = (item.lemma.lower(), item.pos)
            if key not in terms or per_lemma[key] >= MAX_TRAIN_SENTENCES_PER_LEMMA:
                continue
            ids = {s.sense_id for s in terms[key].senses}
            label = next((k for k in item.keys if k in ids), None)
            if label is None:
                continue
            per_lemma[key] += 1
            counts[key][label] += 1
            evidence.append(Evidence(len(evidence) + 1, terms[key].term, label, item.text,
                                     item.start, item.end))
    print(f"SemEval-2013: {len(scored)} of {len(test)} instances scorable; "
          f"{len(terms)} lemmas; SemCor evidence {len(evidence)}")
    encoder = ContextEncoder()
    cache.mkdir(parents=True, exist_ok=True)
    digest = hashlib.sha256(
        json.dumps([(e.text, e.start, e.end) for e in evidence]
                   + [(i.text, i.start, i.end) for i in scored]).encode()
    ).hexdigest()[:12]
    name = encoder.model_id.replace(":", "_").replace("/", "_")
    stored = cache / f"semeval-{name}-{digest}.npz"
    if stored.is_file():
        data = np.load(stored)
        evidence_vectors, test_vectors = data["evidence"], data["test"]
    else:
        started = time.time()
        evidence_vectors = encoder.encode_spans([(e.text, e.start, e.end) for e in evidence])
        test_vectors = encoder.encode_spans([(i.text, i.start, i.end) for i in scored])
        np.savez(stored, evidence=evidence_vectors, test=test_vectors)
        print(f"encoded in {time.time() - started:.0f}s")
    inventory = InventorySpec("semeval-wordnet", 1, tuple(terms.values()),
                              settings=InventorySettings(sentence_weight=0.0))
    disambiguator = Disambiguator(encoder, inventory, evidence, evidence_vectors=evidence_vectors)
    queries = [
        SpanQuery(i.text, i.start, i.end, terms[(i.lemma.lower(), i.pos)].term, document_id=i.doc)
        for i in scored
    ]

    def score(results) -> float:
        return float(np.mean([r.candidates[0].sense_id in i.keys
                              for r, i in zip(results, scored, strict=True)]))

    mfs = np.mean([
        (counts[(i.lemma.lower(), i.pos)].most_common(1)[0][0] if counts[(i.lemma.lower(), i.pos)]
         else terms[(i.lemma.lower(), i.pos)].senses[0].sense_id) in i.keys
        for i in scored
    ])
    print(f"  MFS (same SemCor slice, WordNet first sense fallback): {mfs:.3f}")
    for prior in (True, False):
        for weight in (0.0, 0.5):
            disambiguator.sense_prior = prior
            disambiguator.consistency_weight = weight
            accuracy_ = score(disambiguator.classify_vectors(queries, test_vectors))
            print(f"  engine, sense prior {'on ' if prior else 'off'}, consistency w={weight}: "
                  f"{accuracy_:.3f}")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("what", choices=["encode", "report", "rationale", "speed", "semeval"])
    parser.add_argument("--cache", type=Path, default=Path("/tmp/whichsense-measure"))
    parser.add_argument("--sample", type=int, default=200)
    args = parser.parse_args()
    if args.what == "encode":
        encode_all(args.cache)
    elif args.what == "report":
        report(args.cache)
    elif args.what == "semeval":
        semeval_checks(args.cache)
    elif args.what == "rationale":
        rationale_agreement(args.cache, args.sample)
    else:
        speed(args.cache)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
