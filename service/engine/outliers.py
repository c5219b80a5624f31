"""Senses the inventory lacks: an out-of-inventory score and its conformal p-value.

Score of an occurrence x of term t (larger = stranger):
    (1 - max cosine of x to the glosses of t) + (1 - cosine of x to its nearest
    labeled occurrence of t: example sentences and evidence)
the nearest-neighbour distance of deep nearest-neighbour out-of-distribution
detection (Sun et al. 2022) plus the distance to the curator's definitions.
The best cosine to a prototype, the previous rule, ranks missing-sense
occurrences worse (research/trust_ood.py; docs/measurements.md).

With the sentence channel on (prototypes.py), the same two distances are read
on the occurrence's window sentence vector too (to the glosses' sentence
vectors and to the labeled items' windows) and added with the inventory's
`sentence_weight`: what a passage is about separates a sense the inventory
lacks better than the token vector alone (AUROC 0.80 -> 0.89 and 34 % -> 46 %
of missing-sense occurrences caught over three held-out inventories,
research/measure_missing_sense.py). Weight 0 leaves the score as it was.

Calibration set: every labeled occurrence of every term, scored leave-one-out
(its own vector removed from the neighbours). The conformal p-value of a new
score s is (1 + #{calibration scores >= s}) / (n + 1) (Bates et al. 2023,
"Testing for outliers with conformal p-values"): when the occurrence is
exchangeable with the labeled items, P(p <= a) <= a, so flagging p <= a
flags at most a share a of in-inventory occurrences. Works at cold start, with
the example sentences as the only labeled items. Scores are pooled over terms
so that a term with two examples still gets a usable p-value.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .prototypes import PrototypeBook
from .types import DEFAULT_MISSING_SENSE_RATE

# Calibration scores come from at most this many labeled items (every n-th kept),
# so a re-fit stays cheap when a whole corpus is evidence.
MAX_CALIBRATION_ITEMS = 5000


def _gloss_distance(glosses: np.ndarray, vector: np.ndarray) -> float:
    if not len(glosses):
        return 1.0
    return 1.0 - float(np.max(glosses @ vector))


def _neighbour_distance(neighbours: np.ndarray, vector: np.ndarray, fallback: float) -> float:
    if not len(neighbours):
        return fallback
    return 1.0 - float(np.max(neighbours @ vector))


def conformal_p_value(calibration: np.ndarray, score: float) -> float:
    """(1 + #{calibration >= score}) / (n + 1); 1.0 with no calibration scores."""
    calibration = np.asarray(calibration, np.float64)
    return float((1 + np.count_nonzero(calibration >= score)) / (len(calibration) + 1))


@dataclass(frozen=True)
class MissingSenseModel:
    """Calibration scores of an inventory's labeled items and the flagging rate."""

    calibration: np.ndarray  # sorted ascending
    rate: float

    @property
    def labels(self) -> int:
        return len(self.calibration)

    @property
    def usable(self) -> bool:
        """Whether a p-value can fall to the rate at all: needs n + 1 >= 1 / rate."""
        return self.rate > 0 and (self.labels + 1) * self.rate >= 1.0

    def p_value(self, score: float) -> float:
        if not self.labels:
            return 1.0
        above = self.labels - int(np.searchsorted(self.calibration, score, side="left"))
        return float((1 + above) / (self.labels + 1))

    def flags(self, p_value: float) -> bool:
        return self.usable and p_value <= self.rate


def _two_distances(glosses: np.ndarray, neighbours: np.ndarray, vector: np.ndarray) -> float:
    gloss = _gloss_distance(glosses, vector)
    return gloss + _neighbour_distance(neighbours, vector, gloss)


@dataclass(frozen=True)
class _TermMatrices:
    glosses: np.ndarray
    neighbours: np.ndarray
    gloss_sentences: np.ndarray
    neighbour_sentences: np.ndarray

    @classmethod
    def of(cls, book: PrototypeBook, term: str) -> _TermMatrices:
        empty = np.zeros((0, book.dimension), np.float64)
        return cls(
            book.gloss_vectors(term),
            book.contextual_items(term)[0],
            book.gloss_sentences(term) if book.sentences else empty,
            book.contextual_sentences(term) if book.sentences else empty,
        )

    def without(self, index: int) -> _TermMatrices:
        """The same with labeled item `index` taken out of the neighbours (leave-one-out)."""
        keep = np.arange(len(self.neighbours)) != index
        sentences = self.neighbour_sentences[keep] if len(self.neighbour_sentences) else (
            self.neighbour_sentences)
        return _TermMatrices(self.glosses, self.neighbours[keep], self.gloss_sentences, sentences)


def _score(book: PrototypeBook, matrices: _TermMatrices, vector: np.ndarray,
           sentence: np.ndarray | None) -> float:
    score = _two_distances(matrices.glosses, matrices.neighbours, np.asarray(vector, np.float64))
    if not book.sentences:
        return score
    if sentence is None:
        raise ValueError(
            "the sentence channel is on (sentence_weight > 0): the missing-sense score needs "
            "the occurrence's window sentence vector"
        )
    return score + book.sentence_weight * _two_distances(
        matrices.gloss_sentences, matrices.neighbour_sentences, np.asarray(sentence, np.float64)
    )


def occurrence_score(book: PrototypeBook, term: str, vector: np.ndarray,
                     sentence: np.ndarray | None = None) -> float:
    """The out-of-inventory score of one occurrence of `term` (its span vector, and its
    window sentence vector while the sentence channel is on)."""
    return _score(book, _TermMatrices.of(book, term), vector, sentence)


class OccurrenceScorer:
    """occurrence_score with each term's matrices stacked once (for a whole batch)."""

    def __init__(self, book: PrototypeBook) -> None:
        self.book = book
        self._cache: dict[str, _TermMatrices] = {}

    def __call__(self, term: str, vector: np.ndarray, sentence: np.ndarray | None = None) -> (
            float):
        cached = self._cache.get(term)
        if cached is None:
            cached = self._cache[term] = _TermMatrices.of(self.book, term)
        return _score(self.book, cached, vector, sentence)


def calibration_scores(book: PrototypeBook, max_items: int = MAX_CALIBRATION_ITEMS) -> (
        np.ndarray):
    """Leave-one-out scores of the labeled occurrences (examples and evidence), pooled;
    every n-th item when there are more than `max_items` (deterministic)."""
    plan = [(term, len(book.contextual_items(term)[0])) for term in book.terms()]
    total = sum(count for _, count in plan)
    step = max(1, -(-total // max_items)) if total else 1
    scores: list[float] = []
    seen = 0
    for term, count in plan:
        if not count:
            continue
        matrices = _TermMatrices.of(book, term)
        picked = [i for i in range(count) if (seen + i) % step == 0]
        seen += count
        for index in picked:  # the item is no neighbour of itself
            sentence = matrices.neighbour_sentences[index] if book.sentences else None
            scores.append(
                _score(book, matrices.without(index), matrices.neighbours[index], sentence)
            )
    return np.sort(np.asarray(scores, np.float64))


def fit_missing_sense(book: PrototypeBook, rate: float = DEFAULT_MISSING_SENSE_RATE) -> (
        MissingSenseModel):
    """The calibration set of `book` (no encoding: the book's kept vectors)."""
    if not 0 <= rate < 1:
        raise ValueError("the missing-sense rate must be in [0, 1)")
    return MissingSenseModel(calibration_scores(book), rate)
