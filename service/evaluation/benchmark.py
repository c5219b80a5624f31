"""The WordNet benchmark: train on one sense-annotated file, disambiguate another.

Every test instance is decided among the WordNet senses of its lemma and part
of speech (service/wordnet/prototypes.py says how senses are scored) and
scored with the unified framework's F1 (scoring.py), next to two baselines on
the same data: the training file's most frequent sense and WordNet's first
sense (baselines.py). Confidences are softmax(scores / T) with T fitted by
temperature scaling on training documents held out from the prototypes
(splits.py); the test set then gives ECE and the coverage/accuracy trade-off.

Any file of the format works. Encoded occurrences and glosses are cached on
disk, keyed by the exact spans or texts and the encoder's model id.
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

from service.engine.assignment import DEFAULT_TEMPERATURE, softmax
from service.engine.calibration import (
    confidences_and_hits,
    expected_calibration_error,
    fit_temperature,
    reliability_bins,
)
from service.engine.types import PartOfSpeech
from service.evaluation.baselines import first_sense, most_frequent_sense, training_sense_counts
from service.evaluation.encoding_cache import cached_array
from service.evaluation.metrics import coverage_curve, threshold_for_accuracy
from service.evaluation.scoring import score, score_by_group
from service.evaluation.splits import development_split
from service.wordnet.corpus import CorpusSentence, CorpusStats, read_corpus
from service.wordnet.glosses import DEFAULT_GLOSS_TEMPLATE, gloss_text
from service.wordnet.prototypes import CorpusSenseVectors, PrototypeRecipe, SenseScorer
from service.wordnet.senses import resolve_sense_key, senses_of

Log = Callable[[str], None]
SPAN_RECIPE = "wordnet-corpus-spans/1"
GLOSS_RECIPE = "wordnet-gloss-texts/1"


@dataclass(frozen=True)
class BenchmarkConfig:
    layers: tuple[int, ...] = (6,)  # the last layer: best on held-out SemCor
    gloss_template: str = DEFAULT_GLOSS_TEMPLATE
    recipe: PrototypeRecipe = field(default_factory=PrototypeRecipe)
    held_out_share: float = 0.1  # training documents held out to fit the temperature
    held_out_salt: str = ""  # set when the training file is itself what a split left
    calibration_instances: int = 4000  # at most this many held-out instances are scored
    target_accuracies: tuple[float, ...] = (0.9, 0.95)
    batch_size: int = 64

    def to_json(self) -> dict[str, Any]:
        return {
            "layers": list(self.layers),
            "gloss_template": self.gloss_template,
            "recipe": self.recipe.to_json(),
            "held_out_share": self.held_out_share,
            "calibration_instances": self.calibration_instances,
            "held_out_salt": self.held_out_salt,
        }


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
    encoder: Any, instances: Sequence[Instance], use_cache: bool = True
) -> tuple[np.ndarray, bool]:
    """Unit vectors of every instance in context (through the engine's encoder), cached."""
    spans = [(i.text, i.start, i.end) for i in instances]
    if not spans:
        return np.zeros((0, encoder.dimension), np.float32), False

    def compute() -> np.ndarray:
        return np.asarray(encoder.encode_spans(spans), np.float32)

    if not use_cache:
        return compute(), False
    parts = {
        "spans": _digest([f"{s}:{e}:{t}" for t, s, e in spans]),
        "model": encoder.model_id,
        "recipe": SPAN_RECIPE,
    }
    return cached_array(parts, compute)


def candidate_keys(reader: WordNetCorpusReader, instance: Instance) -> list[str]:
    return [sense.key() for sense in senses_of(reader, instance.lemma, instance.pos)]


class GlossTable:
    """Gloss vectors of WordNet senses, encoded in one batch per call and cached on disk."""

    def __init__(
        self, encoder: Any, reader: WordNetCorpusReader, template: str, use_cache: bool = True
    ):
        self.encoder = encoder
        self.reader = reader
        self.template = template
        self.use_cache = use_cache
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

        if self.use_cache:
            parts = {
                "texts": _digest(texts),
                "model": self.encoder.model_id,
                "recipe": GLOSS_RECIPE,
            }
            vectors, _ = cached_array(parts, compute)
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
        return {
            i: keys[int(np.argmax(s))]
            for i, (keys, s) in enumerate(zip(self.candidates, self.scores, strict=True))
            if keys
        }


def decide(
    vectors: np.ndarray,
    candidates: list[list[str]],
    glosses: GlossTable,
    corpus: CorpusSenseVectors | None,
    recipe: PrototypeRecipe,
) -> Decisions:
    scorer = SenseScorer(glosses.rows.__getitem__, corpus, recipe)
    scores = [
        scorer.scores(vector, keys) if keys else np.zeros(0)
        for keys, vector in zip(candidates, vectors, strict=True)
    ]
    return Decisions(candidates, scores)


def _f1_table(instances: Sequence[Instance], predicted: dict[int, str]) -> dict[str, Any]:
    gold = {i.instance_id: set(i.gold) for i in instances}
    answers = {instances[n].instance_id: key for n, key in predicted.items()}
    pos = {i.instance_id: i.pos for i in instances}
    overall = score(gold, answers)
    return {
        "all": overall.to_json(),
        **{p: s.to_json() for p, s in score_by_group(gold, answers, pos).items()},
    }


def _rows_for_calibration(
    decisions: Decisions, instances: Sequence[Instance]
) -> tuple[list[np.ndarray], list[int]]:
    rows, gold = [], []
    for keys, s, instance in zip(decisions.candidates, decisions.scores, instances, strict=True):
        right = [j for j, key in enumerate(keys) if key in instance.gold]
        if len(keys) > 1 and right:
            rows.append(s)
            gold.append(right[0])
    return rows, gold


def run_benchmark(
    train_path: str | Path,
    test_path: str | Path,
    config: BenchmarkConfig | None = None,
    *,
    reader: WordNetCorpusReader,
    encoder: Any,
    limit: int | None = None,
    train_limit: int | None = None,
    use_cache: bool = True,
    variants: bool = True,
    extra_recipes: dict[str, PrototypeRecipe] | None = None,
    log: Log = lambda _message: None,
) -> dict[str, Any]:
    """Run the benchmark and return its figures as JSON-ready data (F1 values in percent)."""
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
        train_sentences, config.held_out_share, config.held_out_salt
    )
    train = flatten(train_sentences)
    held_set = {id(s) for s in held_sentences}
    is_held = np.array([id(s) in held_set for s in train_sentences for _ in s.instances], bool)
    log(
        f"train: {len(train)} instances ({train_stats.skipped_unresolved} skipped unresolved), "
        f"test: {len(test)} instances"
    )
    clock = lap("read", started)

    train_vectors, train_cached = encode_instances(encoder, train, use_cache)
    clock = lap("encode_train", clock)
    log(
        f"encoded training instances ({'cache' if train_cached else 'computed'}) "
        f"in {timings['encode_train']} s"
    )
    test_vectors, test_cached = encode_instances(encoder, test, use_cache)
    clock = lap("encode_test", clock)

    held = [t for t, h in zip(train, is_held, strict=True) if h][: config.calibration_instances]
    held_vectors = train_vectors[is_held][: config.calibration_instances]
    test_candidates = [candidate_keys(reader, i) for i in test]
    held_candidates = [candidate_keys(reader, i) for i in held]
    glosses = GlossTable(encoder, reader, config.gloss_template, use_cache)
    glosses.ensure([k for keys in test_candidates + held_candidates for k in keys])
    clock = lap("encode_glosses", clock)

    train_keys = [i.gold[0] for i in train]
    full = CorpusSenseVectors.from_training(reader, train_keys, train_vectors)
    fit_only = CorpusSenseVectors.from_training(
        reader,
        [k for k, h in zip(train_keys, is_held, strict=True) if not h],
        train_vectors[~is_held],
    )
    clock = lap("prototypes", clock)

    recipe = config.recipe
    held_decisions = decide(held_vectors, held_candidates, glosses, fit_only, recipe)
    rows, gold_index = _rows_for_calibration(held_decisions, held)
    temperature = fit_temperature(rows, gold_index) if rows else DEFAULT_TEMPERATURE
    test_decisions = decide(test_vectors, test_candidates, glosses, full, recipe)
    clock = lap("decide", clock)

    predicted = test_decisions.best()
    ours = _f1_table(test, predicted)
    counts = training_sense_counts(train_sentences)
    mfs = {
        n: k
        for n, i in enumerate(test)
        if (k := most_frequent_sense(reader, counts, i.lemma, i.pos)) is not None
    }
    first = {
        n: k for n, i in enumerate(test) if (k := first_sense(reader, i.lemma, i.pos)) is not None
    }

    confidence, hit = _confidences(test_decisions, test, temperature)
    default_confidence, _ = _confidences(test_decisions, test, DEFAULT_TEMPERATURE)
    curve = coverage_curve(confidence.tolist(), hit.tolist())
    held_dev = _f1_table(held, held_decisions.best())
    held_curve = (
        coverage_curve(
            *(values.tolist() for values in confidences_and_hits(rows, gold_index, temperature))
        )
        if rows
        else []
    )
    result: dict[str, Any] = {
        "train_file": str(train_path),
        "test_file": str(test_path),
        "n": len(test),
        "f1": _pct(ours["all"]["f1"]),
        "mfs_f1": _pct(_f1_table(test, mfs)["all"]["f1"]),
        "first_sense_f1": _pct(_f1_table(test, first)["all"]["f1"]),
        "coverage": round(ours["all"]["coverage"], 6),
        "per_pos": {p: _pct(v["f1"]) for p, v in ours.items() if p != "all"},
        "per_pos_n": {p: v["n"] for p, v in ours.items() if p != "all"},
        "mfs_per_pos": {p: _pct(v["f1"]) for p, v in _f1_table(test, mfs).items() if p != "all"},
        "precision": _pct(ours["all"]["precision"]),
        "recall": _pct(ours["all"]["recall"]),
        "temperature": round(temperature, 6),
        "calibration_instances": len(rows),
        "held_out_f1": _pct(held_dev["all"]["f1"]),
        "ece": round(expected_calibration_error(confidence, hit), 6) if len(hit) else None,
        "ece_at_default_temperature": round(expected_calibration_error(default_confidence, hit), 6)
        if len(hit)
        else None,
        "ece_bins": [
            {
                "lower": round(b.lower, 3),
                "upper": round(b.upper, 3),
                "count": b.count,
                "confidence": round(b.mean_confidence, 4),
                "accuracy": round(b.accuracy, 4),
            }
            for b in reliability_bins(confidence, hit)
        ]
        if len(hit)
        else [],
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
    if variants:
        result["variants"] = _variants(
            test, test_vectors, test_candidates, glosses, full, recipe, extra_recipes or {}
        )
    timings["variants"] = round(time.perf_counter() - clock, 2)
    result["timings"] = timings
    result["seconds"] = round(time.perf_counter() - started, 2)
    return result


def _confidences(
    decisions: Decisions, instances: Sequence[Instance], temperature: float
) -> tuple[np.ndarray, np.ndarray]:
    """Top probability of softmax(scores / T) and whether the top sense is a gold key,
    for every answered instance."""
    confidence, hit = [], []
    for keys, scores, instance in zip(
        decisions.candidates, decisions.scores, instances, strict=True
    ):
        if not keys:
            continue
        probabilities = softmax(scores, temperature)
        best = int(np.argmax(probabilities))
        confidence.append(float(probabilities[best]))
        hit.append(keys[best] in instance.gold)
    return np.array(confidence, np.float64), np.array(hit, bool)


def _share_at(curve: Sequence[Any], target: float) -> dict[str, float] | None:
    point = threshold_for_accuracy(curve, target)
    if point is None:
        return None
    return {
        "threshold": round(point.threshold, 6),
        "share": round(point.coverage, 6),
        "accuracy": round(point.accuracy, 6),
    }


def _apply_threshold(
    held_curve: Sequence[Any], target: float, confidence: np.ndarray, hit: np.ndarray
) -> dict[str, float] | None:
    """The threshold that reached `target` on held-out training documents, applied to the
    test set: the share it assigns there and that share's accuracy (an honest estimate,
    unlike a threshold read off the test curve itself)."""
    point = threshold_for_accuracy(held_curve, target)
    if point is None or not len(confidence):
        return None
    assigned = confidence >= point.threshold
    return {
        "threshold": round(point.threshold, 6),
        "share": round(float(assigned.mean()), 6),
        "accuracy": round(float(hit[assigned].mean()), 6) if assigned.any() else None,
    }


def _pct(value: float) -> float:
    return round(100.0 * value, 2)


def _variants(
    test: Sequence[Instance],
    vectors: np.ndarray,
    candidates: list[list[str]],
    glosses: GlossTable,
    corpus: CorpusSenseVectors,
    recipe: PrototypeRecipe,
    extra_recipes: dict[str, PrototypeRecipe],
) -> dict[str, float]:
    """F1 of simpler recipes (and any `extra_recipes`) on the same vectors."""
    options = {
        "gloss only": replace(recipe, use_corpus=False),
        "gloss + corpus blend, no prior": replace(recipe, prior_weight=0.0, fallback="gloss"),
        "blend + relations fallback, no prior": replace(
            recipe, prior_weight=0.0, fallback="relations"
        ),
        "blend + prior, relations fallback": replace(recipe, fallback="relations"),
        "blend + prior, gloss fallback": replace(recipe, fallback="gloss"),
        **extra_recipes,
    }
    return {
        name: _pct(
            _f1_table(test, decide(vectors, candidates, glosses, corpus, option).best())["all"][
                "f1"
            ]
        )
        for name, option in options.items()
    }
