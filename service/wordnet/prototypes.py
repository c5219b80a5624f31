"""The previous benchmark-only scorer of WordNet senses: gloss, corpus evidence, frequency.

`whichsense benchmark wordnet` now measures the shipped engine; this twin is
kept only to report its F1 beside the engine's in the same run
(`previous_engine_f1`). No user-facing path runs it.

Each candidate sense k of an occurrence vector x (unit length) gets

    score_k = cos(x, prototype_k) + beta * log p_k

- prototype_k is the engine's blend of the sense's gloss vector (glosses.py)
  and the mean of the training occurrences labeled k, with weight n/(n + k0)
  on the occurrences (service.engine.prototypes.blend): a sense seen once
  stays close to its gloss, a frequent one follows its usage.
- A sense the training file never shows keeps its gloss vector, or, with
  `fallback="relations"`, borrows occurrences through WordNet's relations, in
  order: the synset's other lemmas, hypernym synsets up to
  `max_hypernym_steps` levels, then the sense's lexicographer file
  (mixed in with weight `relations_weight`).
- p_k is the sense's share of the training labels of its lemma and part of
  speech, add-one smoothed over the candidates: the expectation a reader
  brings to an ambiguous word.

The defaults were chosen on held-out SemCor documents; the measurements are
in docs/measurements.md.
"""

from __future__ import annotations

from collections import Counter, defaultdict
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
from nltk.corpus.reader.wordnet import WordNetCorpusReader

from service.engine.prototypes import blend
from service.wordnet.senses import resolve_sense_key

Fallback = Literal["gloss", "relations"]


@dataclass(frozen=True)
class PrototypeRecipe:
    evidence_prior: float = 4.0  # k0 in w = n / (n + k0)
    prior_weight: float = 0.03  # beta; 0 turns the frequency prior off
    fallback: Fallback = "gloss"
    relations_weight: float = 0.3
    max_hypernym_steps: int = 3
    use_corpus: bool = True  # False: glosses only

    def to_json(self) -> dict[str, object]:
        return {
            "evidence_prior": self.evidence_prior,
            "prior_weight": self.prior_weight,
            "fallback": self.fallback,
            "relations_weight": self.relations_weight,
            "max_hypernym_steps": self.max_hypernym_steps,
            "use_corpus": self.use_corpus,
        }


def _unit(vector: np.ndarray) -> np.ndarray:
    norm = float(np.linalg.norm(vector))
    return vector / norm if norm > 0 else vector


class CorpusSenseVectors:
    """Sums and counts of training occurrence vectors per sense key, synset and lexname."""

    def __init__(self, reader: WordNetCorpusReader, dimension: int):
        self.reader = reader
        self.dimension = dimension
        self.key_sum: dict[str, np.ndarray] = {}
        self.key_count: Counter[str] = Counter()
        self.synset_sum: dict[str, np.ndarray] = defaultdict(lambda: np.zeros(dimension))
        self.synset_count: Counter[str] = Counter()
        self.lexname_sum: dict[str, np.ndarray] = defaultdict(lambda: np.zeros(dimension))
        self._names: dict[str, tuple[str, str] | None] = {}
        self._fallbacks: dict[tuple[str, int], np.ndarray | None] = {}

    @classmethod
    def from_training(
        cls, reader: WordNetCorpusReader, keys: Sequence[str], vectors: np.ndarray
    ) -> CorpusSenseVectors:
        """Accumulate unit `vectors`, each labeled with the sense key at the same position."""
        book = cls(reader, int(np.asarray(vectors).shape[1]))
        for key, vector in zip(keys, np.asarray(vectors, np.float64), strict=True):
            book.add(key, vector)
        return book

    def _synset_and_lexname(self, key: str) -> tuple[str, str] | None:
        if key not in self._names:
            sense = resolve_sense_key(self.reader, key)
            synset = sense.synset() if sense is not None else None
            self._names[key] = (synset.name(), synset.lexname()) if synset else None
        return self._names[key]

    def add(self, key: str, vector: np.ndarray) -> None:
        if key in self.key_sum:
            self.key_sum[key] += vector
        else:
            self.key_sum[key] = np.array(vector, np.float64)
        self.key_count[key] += 1
        names = self._synset_and_lexname(key)
        if names is not None:
            synset, lexname = names
            self.synset_sum[synset] += vector
            self.synset_count[synset] += 1
            self.lexname_sum[lexname] += vector
        self._fallbacks.clear()

    def count(self, key: str) -> int:
        return self.key_count.get(key, 0)

    def evidence_mean(self, key: str) -> np.ndarray | None:
        """The unit mean of the key's own training occurrences, if any."""
        total = self.key_sum.get(key)
        return None if total is None else _unit(total)

    def related_mean(self, key: str, max_hypernym_steps: int = 3) -> np.ndarray | None:
        """Occurrences of related senses standing in for an unseen one (module docstring)."""
        cache_key = (key, max_hypernym_steps)
        if cache_key not in self._fallbacks:
            self._fallbacks[cache_key] = self._related_mean(key, max_hypernym_steps)
        return self._fallbacks[cache_key]

    def _related_mean(self, key: str, max_hypernym_steps: int) -> np.ndarray | None:
        names = self._synset_and_lexname(key)
        if names is None:
            return None
        synset_name, lexname = names
        if self.synset_count.get(synset_name):
            return _unit(self.synset_sum[synset_name])
        frontier = [self.reader.synset(synset_name)]
        for _ in range(max_hypernym_steps):
            frontier = [h for s in frontier for h in s.hypernyms() + s.instance_hypernyms()]
            seen = [
                _unit(self.synset_sum[h.name()])
                for h in frontier
                if self.synset_count.get(h.name())
            ]
            if seen:
                return _unit(np.mean(seen, axis=0))
            if not frontier:
                break
        total = self.lexname_sum.get(lexname)
        return None if total is None or not total.any() else _unit(total)


def log_prior(counts: np.ndarray) -> np.ndarray:
    """log of add-one smoothed label shares among one occurrence's candidates."""
    counts = np.asarray(counts, np.float64)
    return np.log((counts + 1.0) / (counts.sum() + len(counts)))


def sense_prototype(
    key: str, gloss: np.ndarray, corpus: CorpusSenseVectors | None, recipe: PrototypeRecipe
) -> np.ndarray:
    """The unit prototype of one sense under `recipe`."""
    gloss = np.asarray(gloss, np.float64)
    if corpus is None or not recipe.use_corpus:
        return _unit(gloss)
    evidence = corpus.evidence_mean(key)
    if evidence is not None:
        return blend(gloss, evidence, corpus.count(key), recipe.evidence_prior)
    if recipe.fallback == "relations":
        related = corpus.related_mean(key, recipe.max_hypernym_steps)
        if related is not None:
            weight = recipe.relations_weight
            return _unit((1.0 - weight) * _unit(gloss) + weight * related)
    return _unit(gloss)


class SenseScorer:
    """Scores candidates under one recipe; each sense's prototype is built once."""

    def __init__(
        self,
        gloss_of: Callable[[str], np.ndarray],
        corpus: CorpusSenseVectors | None,
        recipe: PrototypeRecipe,
    ):
        self.gloss_of = gloss_of
        self.corpus = corpus
        self.recipe = recipe
        self._prototypes: dict[str, np.ndarray] = {}

    def prototype(self, key: str) -> np.ndarray:
        found = self._prototypes.get(key)
        if found is None:
            found = sense_prototype(key, self.gloss_of(key), self.corpus, self.recipe)
            self._prototypes[key] = found
        return found

    def scores(self, vector: np.ndarray, candidate_keys: Sequence[str]) -> np.ndarray:
        """One score per candidate (see the module docstring); higher is more likely."""
        prototypes = np.stack([self.prototype(key) for key in candidate_keys])
        scores = prototypes @ np.asarray(vector, np.float64)
        if self.corpus is not None and self.recipe.use_corpus and self.recipe.prior_weight:
            counts = np.array([self.corpus.count(key) for key in candidate_keys], np.float64)
            scores = scores + self.recipe.prior_weight * log_prior(counts)
        return scores
