"""The WordNet benchmark: train on one sense-annotated file, disambiguate another.

It measures the shipped engine: the `Disambiguator` that `tag`, the API and the
worker run, built through its public constructor (`make_engine`). The lemmas
of the test file become WordNet inventories (one per part of speech, every
sense of each lemma, service/wordnet/inventory.py), the training file's
instances of those lemmas become their evidence, and every test instance is
decided by the engine from its span vector, with document consistency and the
engine's sense prior. The temperature is fitted on training documents held out
from the evidence (splits.py), as `whichsense calibrate` fits an inventory's.
Figures: the unified framework's F1 (scoring.py), next to the training file's
most frequent sense, WordNet's first sense (baselines.py) and the twin scorer
the benchmark measured before (service/wordnet/prototypes.py), all on the same
data; the test set then gives ECE and the coverage/accuracy trade-off.

Any file of the format works. Encoded occurrences, glosses and examples are
cached on disk, keyed by the exact spans or texts and the encoder's model id.
"""

from __future__ import annotations

import hashlib
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from itertools import islice
from pathlib import Path
from typing import Any

import numpy as np
from nltk.corpus.reader.wordnet import WordNetCorpusReader

from service.engine.alignment import AlignmentHead
from service.engine.assignment import DEFAULT_TEMPERATURE
from service.engine.calibration import (
    confidences_and_hits,
    expected_calibration_error,
    fit_temperature,
    reliability_bins,
)
from service.engine.consistency import DEFAULT_CONSISTENCY_WEIGHT
from service.engine.disambiguator import Disambiguator, SpanQuery
from service.engine.types import Evidence, InventorySettings, InventorySpec, PartOfSpeech
from service.evaluation.baselines import first_sense, most_frequent_sense, training_sense_counts
from service.evaluation.encoding_cache import cached_array
from service.evaluation.metrics import coverage_curve, threshold_for_accuracy
from service.evaluation.scoring import score, score_by_group
from service.evaluation.splits import development_split
from service.evaluation.vector_store import CachingEncoder
from service.wordnet.corpus import CorpusSentence, CorpusStats, read_corpus
from service.wordnet.glosses import DEFAULT_GLOSS_TEMPLATE, gloss_text
from service.wordnet.inventory import build_wordnet_inventory
from service.wordnet.prototypes import CorpusSenseVectors, PrototypeRecipe, SenseScorer
from service.wordnet.senses import (
    POS_ORDER,
    index_form,
    resolve_sense_key,
    senses_of,
    surface_form,
)

Log = Callable[[str], None]
SPAN_RECIPE = "wordnet-corpus-spans/1"
WINDOW_RECIPE = "wordnet-corpus-windows/1"
# Window sentence vectors of instances, for the sentence channel: instances -> (n, dim).
Windows = Callable[[Sequence["Instance"]], np.ndarray]
GLOSS_RECIPE = "wordnet-gloss-texts/1"


@dataclass(frozen=True)
class EngineOptions:
    """How the benchmark sets up the shipped engine (all of it engine features)."""

    # The engine's evidence-count prior (Disambiguator sense_prior), for the parts of speech
    # listed: on SemCor dev it lifts verbs, adjectives and adverbs and costs nouns
    # (docs/measurements.md).
    sense_prior_pos: str = "var"
    head: AlignmentHead | None = None  # an alignment head (service/engine/alignment.py)
    consistency_weight: float = DEFAULT_CONSISTENCY_WEIGHT
    # Evidence weight k in n/(n+k) (Disambiguator evidence_prior): WordNet senses carry many
    # SemCor labels, and k=4 won on SemCor dev; curated domain inventories keep the engine's
    # default (docs/measurements.md, "Trust").
    evidence_prior: float = 4.0
    # The sentence channel's weight (InventorySettings.sentence_weight) of the WordNet
    # inventories: 0, chosen on SemCor dev, where weights 0.5-1 gained under half a point
    # (within noise) and 2 lost (docs/measurements.md, "Sentence channel"); domain
    # inventories keep the default.
    sentence_weight: float = 0.0

    def to_json(self) -> dict[str, Any]:
        return {"sense_prior_pos": self.sense_prior_pos,
                "alignment_head": None if self.head is None else
                f"{self.head.head_id}.v{self.head.version}",
                "consistency_weight": self.consistency_weight,
                "evidence_prior": self.evidence_prior,
                "sentence_weight": self.sentence_weight}


@dataclass(frozen=True)
class BenchmarkConfig:
    layers: tuple[int, ...] = (6,)  # the last layer: best on held-out SemCor
    engine: EngineOptions = field(default_factory=lambda: EngineOptions())
    held_out_share: float = 0.1  # training documents held out to fit the temperature
    held_out_salt: str = ""  # set when the training file is itself what a split left
    calibration_instances: int = 1500  # at most this many held-out instances are scored
    target_accuracies: tuple[float, ...] = (0.9, 0.95)
    batch_size: int = 64

    def to_json(self) -> dict[str, Any]:
        return {"layers": list(self.layers), "engine": self.engine.to_json(),
                "held_out_share": self.held_out_share,
                "calibration_instances": self.calibration_instances,
                "held_out_salt": self.held_out_salt}


@dataclass(frozen=True)
class Instance:
    """One annotated occurrence, flattened out of its sentence."""

    instance_id: str
    doc: str
    text: str
    start: int
    end: int
    lemma: str
    pos: PartOfSpeech
    gold: tuple[str, ...]


def flatten(sentences: Sequence[CorpusSentence]) -> list[Instance]:
    return [
        Instance(i.instance_id, s.doc, s.text, i.start, i.end, i.lemma, i.pos, i.sense_keys)
        for s in sentences
        for i in s.instances
    ]


def _digest(lines: Sequence[str]) -> str:
    digest = hashlib.sha256()
    for line in lines:
        digest.update(line.encode("utf-8"))
        digest.update(b"\n")
    return digest.hexdigest()


def encode_instances(
    encoder: Any, instances: Sequence[Instance], cache_dir: Path | None
) -> tuple[np.ndarray, bool]:
    """Unit vectors of every instance in context (through the engine's encoder), cached
    under `cache_dir` (None: not cached)."""
    spans = [(i.text, i.start, i.end) for i in instances]
    if not spans:
        return np.zeros((0, encoder.dimension), np.float32), False

    def compute() -> np.ndarray:
        return np.asarray(encoder.encode_spans(spans), np.float32)

    if cache_dir is None:
        return compute(), False
    parts = {"spans": _digest([f"{s}:{e}:{t}" for t, s, e in spans]),
             "model": encoder.model_id, "recipe": SPAN_RECIPE}
    return cached_array(parts, compute, cache_dir)


def encode_instance_windows(
    encoder: Any, instances: Sequence[Instance], cache_dir: Path | None
) -> np.ndarray:
    """Window sentence vectors of every instance (the sentence channel's input, through
    the engine's encoder), cached under `cache_dir` (None: not cached)."""
    spans = [(i.text, i.start, i.end) for i in instances]
    if not spans:
        return np.zeros((0, encoder.dimension), np.float32)

    def compute() -> np.ndarray:
        return np.asarray(encoder.encode_spans_with_windows(spans)[1], np.float32)

    if cache_dir is None:
        return compute()
    parts = {"spans": _digest([f"{s}:{e}:{t}" for t, s, e in spans]),
             "model": encoder.model_id, "recipe": WINDOW_RECIPE}
    return cached_array(parts, compute, cache_dir)[0]


def window_lookup(instances: Sequence[Instance], vectors: np.ndarray) -> Windows:
    """A `Windows` function over instances encoded together (by span: one span, one window)."""
    row = {(i.text, i.start, i.end): n for n, i in enumerate(instances)}
    return lambda wanted: vectors[[row[(i.text, i.start, i.end)] for i in wanted]]


def candidate_keys(reader: WordNetCorpusReader, instance: Instance) -> list[str]:
    return [sense.key() for sense in senses_of(reader, instance.lemma, instance.pos)]


class GlossTable:
    """Gloss vectors of WordNet senses, encoded in one batch per call and cached on disk."""

    def __init__(self, encoder: Any, reader: WordNetCorpusReader, template: str,
                 cache_dir: Path | None):
        self.encoder = encoder
        self.reader = reader
        self.template = template
        self.cache_dir = cache_dir
        self.rows: dict[str, np.ndarray] = {}

    def ensure(self, keys: Sequence[str]) -> None:
        missing = sorted({key for key in keys if key not in self.rows})
        if not missing:
            return
        senses = [resolve_sense_key(self.reader, key) for key in missing]
        texts = [gloss_text(sense, self.template) for sense in senses if sense is not None]
        if len(texts) != len(missing):
            raise ValueError("a candidate sense key does not resolve in this WordNet")

        def compute() -> np.ndarray:
            return np.asarray(self.encoder.encode_texts(texts), np.float32)

        if self.cache_dir is not None:
            parts = {"texts": _digest(texts), "model": self.encoder.model_id,
                     "recipe": GLOSS_RECIPE}
            vectors, _ = cached_array(parts, compute, self.cache_dir)
        else:
            vectors = compute()
        self.rows.update(zip(missing, vectors, strict=True))

    def matrix(self, keys: Sequence[str]) -> np.ndarray:
        return np.stack([self.rows[key] for key in keys])


@dataclass
class Decisions:
    """Per instance: its candidate keys and their scores (empty when WordNet has none)."""

    candidates: list[list[str]]
    scores: list[np.ndarray]

    def best(self) -> dict[int, str]:
        return {i: keys[int(np.argmax(s))] for i, (keys, s) in
                enumerate(zip(self.candidates, self.scores, strict=True)) if keys}


def decide(
    vectors: np.ndarray,
    candidates: list[list[str]],
    glosses: GlossTable,
    corpus: CorpusSenseVectors | None,
    recipe: PrototypeRecipe,
) -> Decisions:
    scorer = SenseScorer(glosses.rows.__getitem__, corpus, recipe)
    scores = [scorer.scores(vector, keys) if keys else np.zeros(0)
              for keys, vector in zip(candidates, vectors, strict=True)]
    return Decisions(candidates, scores)


def f1_table(instances: Sequence[Instance], predicted: dict[int, str]) -> dict[str, Any]:
    gold = {i.instance_id: set(i.gold) for i in instances}
    answers = {instances[n].instance_id: key for n, key in predicted.items()}
    pos = {i.instance_id: i.pos for i in instances}
    overall = score(gold, answers)
    return {"all": overall.to_json(),
            **{p: s.to_json() for p, s in score_by_group(gold, answers, pos).items()}}


# -- the shipped engine --------------------------------------------------------------------


def make_engine(
    encoder: Any, inventory: InventorySpec, evidence: Sequence[Evidence],
    evidence_vectors: np.ndarray, options: EngineOptions,
    evidence_sentences: np.ndarray | None = None,
) -> Disambiguator:
    """The one place the benchmark builds the engine: the same public constructor `tag`, the
    API and the worker use (the engine factory of service/tagging can replace this line)."""
    prior = any(term.pos is not None and term.pos in options.sense_prior_pos
                for term in inventory.terms)
    return Disambiguator(encoder, inventory, evidence, evidence_vectors=evidence_vectors,
                         evidence_sentences=evidence_sentences, sense_prior=prior,
                         evidence_prior=options.evidence_prior,
                         alignment_head=options.head,
                         consistency_weight=options.consistency_weight)


def _term(lemma: str) -> str:
    return surface_form(index_form(lemma))


@dataclass
class EngineDecisions:
    """Per instance: candidate keys in inventory order, the engine's similarity row (after
    document consistency, plus the sentence channel when it is on), its log prior row,
    probabilities, and the sense it chose."""

    candidates: list[list[str]]
    similarities: list[np.ndarray]
    log_priors: list[np.ndarray]
    probabilities: list[np.ndarray]

    def best(self) -> dict[int, str]:
        return {i: keys[int(np.argmax(p))] for i, (keys, p) in
                enumerate(zip(self.candidates, self.probabilities, strict=True)) if keys}


def engine_decisions(
    encoder: Any,
    reader: WordNetCorpusReader,
    train: Sequence[Instance],
    train_vectors: np.ndarray,
    test: Sequence[Instance],
    test_vectors: np.ndarray,
    options: EngineOptions,
    temperature: float | None = None,
    windows: Windows | None = None,
) -> EngineDecisions:
    """Build the shipped engine for the lemmas of `test` (one WordNet inventory per part of
    speech, every sense of each lemma, training instances of those lemmas as evidence) and
    decide every test instance with it, from span vectors precomputed by `encoder` (and,
    with the sentence channel on, window sentence vectors from `windows`)."""
    settings = InventorySettings(abstain_threshold=0.0, temperature=temperature,
                                 sentence_weight=options.sentence_weight)
    if options.sentence_weight > 0 and windows is None:
        raise ValueError("the sentence channel needs the instances' window sentence vectors")
    n = len(test)
    decisions = EngineDecisions([[] for _ in range(n)], [np.zeros(0)] * n, [np.zeros(0)] * n,
                                [np.zeros(0)] * n)
    for pos in POS_ORDER:
        wanted = [i for i, instance in enumerate(test) if instance.pos == pos]
        if not wanted:
            continue
        inventory, _missing = build_wordnet_inventory(
            reader, f"wordnet-{pos}", [test[i].lemma for i in wanted], pos=pos,
            settings=settings)
        if not inventory.terms:
            continue
        senses = {spec.term: {s.sense_id for s in spec.senses} for spec in inventory.terms}
        chosen = [j for j, item in enumerate(train) if item.pos == pos
                  and item.gold[0] in senses.get(_term(item.lemma), ())]
        evidence = [Evidence(j + 1, _term(train[j].lemma), train[j].gold[0], train[j].text,
                             train[j].start, train[j].end) for j in chosen]
        channel = windows if options.sentence_weight > 0 else None
        engine = make_engine(
            encoder, inventory, evidence, train_vectors[chosen], options,
            None if channel is None else channel([train[j] for j in chosen]))
        answered = [i for i in wanted if _term(test[i].lemma) in senses]
        queries = [SpanQuery(test[i].text, test[i].start, test[i].end, _term(test[i].lemma),
                             document_id=test[i].doc) for i in answered]
        vectors = test_vectors[answered]
        rows = engine.similarities(queries, engine.align(vectors))
        sentences = None if channel is None else channel([test[i] for i in answered])
        results = engine.classify_vectors(queries, vectors, sentences)
        if sentences is not None:  # the temperature is fitted on what the softmax adds up
            aligned = engine.align(sentences)
            rows = [row + engine.prototypes.sentence_channel(query.term, window)[0]
                    for query, row, window in zip(queries, rows, aligned, strict=True)]
        for i, query, row, result in zip(answered, queries, rows, results, strict=True):
            keys = list(engine.prototypes.senses(query.term))
            by_id = {c.sense_id: c.probability for c in result.candidates}
            decisions.candidates[i] = keys
            decisions.similarities[i] = np.asarray(row, np.float64)
            decisions.log_priors[i] = (engine.prototypes.log_prior(query.term)
                                       if engine.sense_prior else np.zeros(len(keys)))
            decisions.probabilities[i] = np.array([by_id[k] for k in keys])
    if isinstance(encoder, CachingEncoder):
        encoder.save()
    return decisions


def fit_engine_temperature(
    decisions: EngineDecisions, instances: Sequence[Instance]
) -> tuple[float, list[np.ndarray], list[int], list[np.ndarray]]:
    """Temperature scaling on the engine's own rows (similarities and log prior) of labeled
    instances, as `whichsense calibrate` does on an inventory's evidence."""
    rows, gold, priors = [], [], []
    for keys, row, prior, instance in zip(decisions.candidates, decisions.similarities,
                                          decisions.log_priors, instances, strict=True):
        right = [j for j, key in enumerate(keys) if key in instance.gold]
        if len(keys) > 1 and right:
            rows.append(row)
            gold.append(right[0])
            priors.append(prior)
    if not rows:
        return DEFAULT_TEMPERATURE, rows, gold, priors
    return fit_temperature(rows, gold, log_priors=priors), rows, gold, priors


def score_engine(
    encoder: Any,
    reader: WordNetCorpusReader,
    fit: tuple[Sequence[Instance], np.ndarray],
    held: tuple[Sequence[Instance], np.ndarray],
    train: tuple[Sequence[Instance], np.ndarray],
    test: tuple[Sequence[Instance], np.ndarray],
    options: EngineOptions,
    windows: Windows | None = None,
) -> dict[str, Any]:
    """Fit the temperature on `held` with an engine built from `fit`, then decide `test`
    with an engine built from all of `train` at that temperature."""
    held_decisions = engine_decisions(encoder, reader, *fit, *held, options, windows=windows)
    temperature, rows, gold, priors = fit_engine_temperature(held_decisions, held[0])
    decisions = engine_decisions(encoder, reader, *train, *test, options, temperature,
                                 windows=windows)
    return {"decisions": decisions, "temperature": temperature,
            "held_decisions": held_decisions, "held_rows": (rows, gold, priors)}


def run_benchmark(
    train_path: str | Path,
    test_path: str | Path,
    config: BenchmarkConfig | None = None,
    *,
    reader: WordNetCorpusReader,
    encoder: Any,
    limit: int | None = None,
    train_limit: int | None = None,
    cache_dir: Path | None = None,
    variants: bool = True,
    previous: bool = True,
    log: Log = lambda _message: None,
) -> dict[str, Any]:
    """Run the benchmark on the shipped engine and return its figures as JSON-ready data
    (F1 values in percent), with the baselines and the previous twin scorer beside it.

    Encodings are cached under `cache_dir` (None: nothing is read or written)."""
    config = config or BenchmarkConfig()
    started = time.perf_counter()
    timings: dict[str, float] = {}

    def lap(name: str, since: float) -> float:
        now = time.perf_counter()
        timings[name] = round(now - since, 2)
        return now

    train_stats, test_stats = CorpusStats(), CorpusStats()
    train_sentences = list(islice(read_corpus(train_path, reader, train_stats), train_limit))
    test = flatten(list(read_corpus(test_path, reader, test_stats)))
    if limit is not None:
        test = test[:limit]
    _, held_sentences = development_split(
        train_sentences, config.held_out_share, config.held_out_salt)
    train = flatten(train_sentences)
    held_set = {id(s) for s in held_sentences}
    is_held = np.array([id(s) in held_set for s in train_sentences for _ in s.instances], bool)
    log(f"train: {len(train)} instances ({train_stats.skipped_unresolved} skipped unresolved), "
        f"test: {len(test)} instances")
    clock = lap("read", started)

    train_vectors, train_cached = encode_instances(encoder, train, cache_dir)
    clock = lap("encode_train", clock)
    log(f"encoded training instances ({'cache' if train_cached else 'computed'}) "
        f"in {timings['encode_train']} s")
    test_vectors, test_cached = encode_instances(encoder, test, cache_dir)
    clock = lap("encode_test", clock)

    items = CachingEncoder(encoder, cache_dir) if cache_dir is not None else encoder
    held = [t for t, h in zip(train, is_held, strict=True) if h][: config.calibration_instances]
    held_vectors = train_vectors[is_held][: config.calibration_instances]
    fit_train = [t for t, h in zip(train, is_held, strict=True) if not h]
    fit_vectors = train_vectors[~is_held]
    options = config.engine
    windows: Windows | None = None
    if options.sentence_weight > 0:
        both = [*train, *test]
        windows = window_lookup(both, encode_instance_windows(encoder, both, cache_dir))

    def engine_run(opts: EngineOptions, with_evidence: bool = True) -> dict[str, Any]:
        empty: tuple[list[Instance], np.ndarray] = ([], np.zeros((0, encoder.dimension)))
        return score_engine(
            items, reader,
            (fit_train, fit_vectors) if with_evidence else empty, (held, held_vectors),
            (train, train_vectors) if with_evidence else empty, (test, test_vectors), opts,
            windows)

    run = engine_run(options)
    decisions: EngineDecisions = run["decisions"]
    temperature: float = run["temperature"]
    rows, gold_index, priors = run["held_rows"]
    clock = lap("engine", clock)

    predicted = decisions.best()
    ours = f1_table(test, predicted)
    counts = training_sense_counts(train_sentences)
    mfs = {n: k for n, i in enumerate(test)
           if (k := most_frequent_sense(reader, counts, i.lemma, i.pos)) is not None}
    first = {n: k for n, i in enumerate(test)
             if (k := first_sense(reader, i.lemma, i.pos)) is not None}

    confidence, hit = _confidences(decisions, test)
    curve = coverage_curve(confidence.tolist(), hit.tolist())
    held_dev = f1_table(held, run["held_decisions"].best())
    held_curve = coverage_curve(*(
        values.tolist() for values in confidences_and_hits(rows, gold_index, temperature, priors)
    )) if rows else []
    result: dict[str, Any] = {
        "train_file": str(train_path),
        "test_file": str(test_path),
        "n": len(test),
        "engine": "service.engine.Disambiguator",
        "f1": _pct(ours["all"]["f1"]),
        "mfs_f1": _pct(f1_table(test, mfs)["all"]["f1"]),
        "first_sense_f1": _pct(f1_table(test, first)["all"]["f1"]),
        "coverage": round(ours["all"]["coverage"], 6),
        "per_pos": {p: _pct(v["f1"]) for p, v in ours.items() if p != "all"},
        "per_pos_n": {p: v["n"] for p, v in ours.items() if p != "all"},
        "mfs_per_pos": {p: _pct(v["f1"]) for p, v in f1_table(test, mfs).items() if p != "all"},
        "precision": _pct(ours["all"]["precision"]),
        "recall": _pct(ours["all"]["recall"]),
        "temperature": round(temperature, 6),
        "calibration_instances": len(rows),
        "held_out_f1": _pct(held_dev["all"]["f1"]),
        "ece": round(expected_calibration_error(confidence, hit), 6) if len(hit) else None,
        "ece_bins": [
            {"lower": round(b.lower, 3), "upper": round(b.upper, 3), "count": b.count,
             "confidence": round(b.mean_confidence, 4), "accuracy": round(b.accuracy, 4)}
            for b in reliability_bins(confidence, hit)
        ] if len(hit) else [],
        "auto_share_at": {
            f"{target:.2f}": _share_at(curve, target) for target in config.target_accuracies
        },
        "held_out_thresholds_on_test": {
            f"{target:.2f}": _apply_threshold(held_curve, target, confidence, hit)
            for target in config.target_accuracies
        },
        "train_stats": train_stats.to_json(),
        "test_stats": test_stats.to_json(),
        "config": config.to_json(),
        "model_id": encoder.model_id,
        "cached": {"train": train_cached, "test": test_cached},
    }
    if previous:
        result["previous_engine_f1"] = _previous_engine_f1(
            encoder, reader, config, train, train_vectors, test, test_vectors, cache_dir)
        clock = lap("previous_engine", clock)
    if variants:
        others = {"engine without sense prior": (replace(options, sense_prior_pos=""), True),
                  "engine with sense prior on every part of speech":
                      (replace(options, sense_prior_pos="nvar"), True),
                  "engine, glosses and examples only (no evidence)": (options, False)}
        if options.head is not None:
            others["engine without alignment head"] = (replace(options, head=None), True)
        result["variants"] = {
            name: _pct(f1_table(test, engine_run(opts, evidence)["decisions"].best())
                       ["all"]["f1"]) for name, (opts, evidence) in others.items()}
        clock = lap("variants", clock)
    result["timings"] = timings
    result["seconds"] = round(time.perf_counter() - started, 2)
    return result


def _previous_engine_f1(
    encoder: Any, reader: WordNetCorpusReader, config: BenchmarkConfig,
    train: Sequence[Instance], train_vectors: np.ndarray,
    test: Sequence[Instance], test_vectors: np.ndarray, cache_dir: Path | None,
) -> float:
    """F1 of the twin scorer the benchmark used before it measured the shipped engine
    (service/wordnet/prototypes.py), kept for comparison on the same vectors."""
    candidates = [candidate_keys(reader, i) for i in test]
    glosses = GlossTable(encoder, reader, DEFAULT_GLOSS_TEMPLATE, cache_dir)
    glosses.ensure([k for keys in candidates for k in keys])
    corpus = CorpusSenseVectors.from_training(reader, [i.gold[0] for i in train], train_vectors)
    decided = decide(test_vectors, candidates, glosses, corpus, PrototypeRecipe())
    return _pct(f1_table(test, decided.best())["all"]["f1"])


def _confidences(
    decisions: EngineDecisions, instances: Sequence[Instance]
) -> tuple[np.ndarray, np.ndarray]:
    """The engine's top probability and whether its top sense is a gold key, for every
    answered instance."""
    confidence, hit = [], []
    for keys, probabilities, instance in zip(decisions.candidates, decisions.probabilities,
                                             instances, strict=True):
        if not keys:
            continue
        best = int(np.argmax(probabilities))
        confidence.append(float(probabilities[best]))
        hit.append(keys[best] in instance.gold)
    return np.array(confidence, np.float64), np.array(hit, bool)


def _share_at(curve: Sequence[Any], target: float) -> dict[str, float] | None:
    point = threshold_for_accuracy(curve, target)
    if point is None:
        return None
    return {"threshold": round(point.threshold, 6), "share": round(point.coverage, 6),
            "accuracy": round(point.accuracy, 6)}


def _apply_threshold(
    held_curve: Sequence[Any], target: float, confidence: np.ndarray, hit: np.ndarray
) -> dict[str, float | None] | None:
    """The threshold that reached `target` on held-out training documents, applied to the
    test set: the share it assigns there and that share's accuracy (an honest estimate,
    unlike a threshold read off the test curve itself)."""
    point = threshold_for_accuracy(held_curve, target)
    if point is None or not len(confidence):
        return None
    assigned = confidence >= point.threshold
    return {"threshold": round(point.threshold, 6), "share": round(float(assigned.mean()), 6),
            "accuracy": round(float(hit[assigned].mean()), 6) if assigned.any() else None}


def _pct(value: float) -> float:
    return round(100.0 * value, 2)
