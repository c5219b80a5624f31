"""Senses the inventory lacks: an out-of-inventory score and its conformal p-value.

Score of an occurrence x of term t (larger = stranger):
    (1 - max cosine of x to the glosses of t) + (1 - cosine of x to its nearest
    labeled occurrence of t: example sentences and evidence)
the nearest-neighbour distance of deep nearest-neighbour out-of-distribution
detection (Sun et al. 2022) plus the distance to the curator's definitions.
The best cosine to a prototype, the previous rule, ranks missing-sense
occurrences worse (research/trust_ood.py; docs/measurements.md).

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


def occurrence_score(book: PrototypeBook, term: str, vector: np.ndarray) -> float:
    """The out-of-inventory score of one occurrence vector of `term`."""
    vector = np.asarray(vector, np.float64)
    glosses = book.gloss_vectors(term)
    gloss = _gloss_distance(glosses, vector)
    neighbours, _, _ = book.contextual_items(term)
    return gloss + _neighbour_distance(neighbours, vector, gloss)


class OccurrenceScorer:
    """occurrence_score with each term's matrices stacked once (for a whole batch)."""

    def __init__(self, book: PrototypeBook) -> None:
        self.book = book
        self._cache: dict[str, tuple[np.ndarray, np.ndarray]] = {}

    def __call__(self, term: str, vector: np.ndarray) -> float:
        cached = self._cache.get(term)
        if cached is None:
            cached = (self.book.gloss_vectors(term), self.book.contextual_items(term)[0])
            self._cache[term] = cached
        glosses, neighbours = cached
        vector = np.asarray(vector, np.float64)
        gloss = _gloss_distance(glosses, vector)
        return gloss + _neighbour_distance(neighbours, vector, gloss)


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
        glosses = book.gloss_vectors(term)
        vectors, _, _ = book.contextual_items(term)
        picked = [i for i in range(count) if (seen + i) % step == 0]
        seen += count
        for index in picked:
            vector = vectors[index]
            gloss = _gloss_distance(glosses, vector)
            if count > 1:
                sims = vectors @ vector
                sims[index] = -np.inf  # the item is no neighbour of itself
                neighbour = 1.0 - float(sims.max())
            else:
                neighbour = gloss
            scores.append(gloss + neighbour)
    return np.sort(np.asarray(scores, np.float64))


def fit_missing_sense(book: PrototypeBook, rate: float = DEFAULT_MISSING_SENSE_RATE) -> (
        MissingSenseModel):
    """The calibration set of `book` (no encoding: the book's kept vectors)."""
    if not 0 <= rate < 1:
        raise ValueError("the missing-sense rate must be in [0, 1)")
    return MissingSenseModel(calibration_scores(book), rate)
