"""Sense prototypes: one vector per sense, from its definition and its labeled evidence.

A sense's *definition* part is the mean of its gloss vector (see the encoder's
gloss template) and the contextual vectors of the term inside the sense's own
example sentences. Its *evidence* part is the mean of labeled occurrences
(corpus labels, review decisions, imports). The prototype mixes the two with
weight n/(n+k) on the evidence, n the number of labels: a curator's gloss
carries an unlabeled sense, and real usage takes over as labels accumulate.

k = DEFAULT_EVIDENCE_PRIOR = 4 rather than 1: contextual vectors of one word
form all lie close together (anisotropy), so a prototype made mostly of
evidence drifts towards *every* occurrence of the term, while a sense still
carrying its gloss vector (a sentence-level vector in a lower cosine band)
falls behind; with k = 1 a few labels per sense were enough to pull a curated
inventory's occurrences towards the best-labeled senses (hubness), and the
demo inventory lost accuracy as evidence was added. k = 4 keeps the definition
in charge until a sense has several labels: on the demo's inner split evidence
then helps (0.810 -> 0.820) instead of hurting (-> 0.795), and SemCor dev is
unchanged (0.677 -> 0.679 with document consistency). Scoring gloss and
contexts separately, per-term centring and nearest-item scoring were measured
too and did no better on both sets (DEVELOPERS.md, "Measurements").

Evidence counts also give each term a sense prior, p(s) = (n_s + a) / (N + S a)
(add-a smoothing, a = DEFAULT_PRIOR_SMOOTHING): without labels it is uniform,
with them it says how often each sense turns up in the curator's data. a = 4
rather than 1 because it held up better when the labels came from other
genres than the text (SemCor cross-genre check in DEVELOPERS.md, "Measurements").
The Disambiguator leaves it off by default: it helped only inside SemCor and
cost accuracy on SemEval-2013 and on the demo inventory, whose labels need
not follow the frequencies of the documents being tagged.

The book keeps per-sense sums and counts, so adding evidence encodes only the
new items and updates a few rows; it also keeps each item's vector (unless told
not to) to name the evidence nearest to an occurrence in the rationale.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Literal, Protocol

import numpy as np

from .errors import InventoryError, UnknownTerm
from .occurrences import OccurrenceFinder
from .types import Evidence, InventorySpec

DEFAULT_EVIDENCE_PRIOR = 4.0
DEFAULT_PRIOR_SMOOTHING = 4.0
ItemKind = Literal["gloss", "example", "evidence"]


class SpanEncoder(Protocol):
    """What prototypes need from an encoder (ContextEncoder satisfies it)."""

    model_id: str
    dimension: int

    def encode_spans(self, spans: Sequence[tuple[str, int, int]]) -> np.ndarray: ...

    def encode_glosses(self, glosses: Sequence[tuple[str, str, Sequence[str]]]) -> np.ndarray: ...


@dataclass(frozen=True)
class NearestEvidence:
    """The labeled item (gloss, example or evidence) closest to an occurrence."""

    kind: ItemKind
    sense_id: str
    text: str
    similarity: float

    def to_json(self) -> dict[str, object]:
        return {
            "kind": self.kind,
            "sense_id": self.sense_id,
            "text": self.text,
            "similarity": round(float(self.similarity), 4),
        }


@dataclass
class _SenseAccumulator:
    definition_sum: np.ndarray
    evidence_sum: np.ndarray
    definition_count: int = 0
    evidence_count: int = 0


@dataclass
class _TermItems:
    """Every item vector of one term, for nearest-evidence look-ups."""

    vectors: list[np.ndarray] = field(default_factory=list)
    kinds: list[ItemKind] = field(default_factory=list)
    sense_ids: list[str] = field(default_factory=list)
    texts: list[str] = field(default_factory=list)
    evidence_ids: list[int | None] = field(default_factory=list)
    stacked: np.ndarray | None = None


def _unit(vector: np.ndarray) -> np.ndarray:
    norm = float(np.linalg.norm(vector))
    return vector / norm if norm > 0 else vector


def blend(
    definition: np.ndarray | None,
    evidence: np.ndarray | None,
    evidence_count: int,
    prior: float,
) -> np.ndarray:
    """normalise((1 - w) * definition + w * evidence), w = n / (n + prior), on unit means."""
    if definition is None and evidence is None:
        raise ValueError("a prototype needs a definition or evidence")
    if evidence is None or evidence_count == 0:
        return _unit(definition)  # type: ignore[arg-type]
    if definition is None:
        return _unit(evidence)
    weight = evidence_count / (evidence_count + prior)
    return _unit((1.0 - weight) * _unit(definition) + weight * _unit(evidence))


class PrototypeBook:
    """Prototypes of every sense of one inventory version, for one encoder (model_id)."""

    def __init__(
        self,
        inventory: InventorySpec,
        model_id: str,
        dimension: int,
        *,
        evidence_prior: float = DEFAULT_EVIDENCE_PRIOR,
        keep_items: bool = True,
    ) -> None:
        self.inventory = inventory
        self.model_id = model_id
        self.dimension = dimension
        self.evidence_prior = evidence_prior
        self.keep_items = keep_items
        self._senses: dict[str, tuple[str, ...]] = {}
        self._term_of_sense: dict[str, str] = {}
        self._accumulators: dict[str, _SenseAccumulator] = {}
        self._items: dict[str, _TermItems] = {}
        self._matrices: dict[str, np.ndarray] = {}
        self._seen_evidence: set[int] = set()
        self._lock = threading.Lock()
        for spec in inventory.terms:
            if not spec.senses:
                raise InventoryError(f"term {spec.term!r} has no senses")
            ids = tuple(sense.sense_id for sense in spec.senses)
            self._senses[spec.term] = ids
            for sense_id in ids:
                if sense_id in self._term_of_sense:
                    raise InventoryError(f"sense id {sense_id!r} is used twice")
                self._term_of_sense[sense_id] = spec.term
                self._accumulators[sense_id] = _SenseAccumulator(
                    np.zeros(dimension, np.float64), np.zeros(dimension, np.float64)
                )
            self._items[spec.term] = _TermItems()

    @property
    def key(self) -> tuple[str, int, str]:
        return (self.inventory.name, self.inventory.version, self.model_id)

    # -- building -----------------------------------------------------------------------

    @classmethod
    def build(
        cls,
        encoder: SpanEncoder,
        inventory: InventorySpec,
        evidence: Sequence[Evidence] = (),
        *,
        evidence_vectors: np.ndarray | None = None,
        finder: OccurrenceFinder | None = None,
        evidence_prior: float = DEFAULT_EVIDENCE_PRIOR,
        keep_items: bool = True,
    ) -> PrototypeBook:
        """Encode every gloss and example of `inventory`, then add `evidence`."""
        book = cls(
            inventory,
            encoder.model_id,
            encoder.dimension,
            evidence_prior=evidence_prior,
            keep_items=keep_items,
        )
        book.add_definitions(encoder, finder)
        if len(evidence):
            book.add_evidence(evidence, vectors=evidence_vectors, encoder=encoder)
        return book

    def add_definitions(self, encoder: SpanEncoder, finder: OccurrenceFinder | None = None) -> None:
        """Encode glosses (template) and the term inside each example sentence."""
        finder = finder or OccurrenceFinder(self.inventory)
        gloss_inputs: list[tuple[str, str, tuple[str, ...]]] = []
        gloss_owner: list[tuple[str, str, str]] = []  # term, sense_id, gloss
        example_spans: list[tuple[str, int, int]] = []
        example_owner: list[tuple[str, str, str]] = []
        for spec in self.inventory.terms:
            for sense in spec.senses:
                if sense.gloss.strip():
                    gloss_inputs.append((spec.term, sense.gloss, sense.examples))
                    gloss_owner.append((spec.term, sense.sense_id, sense.gloss))
                for example in sense.examples:
                    span = _locate(finder, example, spec.term)
                    if span is not None:
                        example_spans.append((example, *span))
                        example_owner.append((spec.term, sense.sense_id, example))
        gloss_vectors = encoder.encode_glosses(gloss_inputs) if gloss_inputs else None
        example_vectors = encoder.encode_spans(example_spans) if example_spans else None
        with self._lock:
            for owners, vectors, kind in (
                (gloss_owner, gloss_vectors, "gloss"),
                (example_owner, example_vectors, "example"),
            ):
                if vectors is None:
                    continue
                for (term, sense_id, text), vector in zip(owners, vectors, strict=True):
                    accumulator = self._accumulators[sense_id]
                    accumulator.definition_sum += vector
                    accumulator.definition_count += 1
                    self._remember(term, kind, sense_id, text, vector, None)  # type: ignore[arg-type]
            self._matrices.clear()

    def add_evidence(
        self,
        evidence: Sequence[Evidence],
        *,
        vectors: np.ndarray | None = None,
        encoder: SpanEncoder | None = None,
        skip_unknown: bool = False,
    ) -> int:
        """Add labeled occurrences; encodes only items not seen before. Returns how many were added.

        Pass `vectors` (rows aligned with `evidence`, unit length) when they are
        cached elsewhere; otherwise an encoder is needed. Evidence naming a sense
        this inventory version lacks raises InventoryError, or is left out with
        skip_unknown (evidence outlives senses a curator removed).
        """
        if vectors is not None and len(vectors) != len(evidence):
            raise ValueError("evidence and vectors differ in length")
        fresh = []
        for i, item in enumerate(evidence):
            if item.evidence_id in self._seen_evidence:
                continue
            if self._term_of_sense.get(item.sense_id) != item.term:
                if skip_unknown:
                    continue
                raise InventoryError(
                    f"evidence {item.evidence_id}: sense {item.sense_id!r} is not a sense of "
                    f"term {item.term!r} in inventory {self.inventory.name!r}"
                )
            fresh.append(i)
        if not fresh:
            return 0
        if vectors is None:
            if encoder is None:
                raise ValueError("an encoder is needed to encode evidence without vectors")
            if encoder.model_id != self.model_id:
                raise InventoryError(
                    f"prototypes were built with {self.model_id}, not {encoder.model_id}"
                )
            new_vectors = encoder.encode_spans(
                [(evidence[i].text, evidence[i].start, evidence[i].end) for i in fresh]
            )
        else:
            new_vectors = np.asarray(vectors, dtype=np.float32)[fresh]
        with self._lock:
            touched: set[str] = set()
            for i, vector in zip(fresh, new_vectors, strict=True):
                item = evidence[i]
                if item.evidence_id in self._seen_evidence:
                    continue
                self._seen_evidence.add(item.evidence_id)
                accumulator = self._accumulators[item.sense_id]
                accumulator.evidence_sum += vector
                accumulator.evidence_count += 1
                self._remember(
                    item.term, "evidence", item.sense_id, item.text, vector, item.evidence_id
                )
                touched.add(item.term)
            for term in touched:
                self._matrices.pop(term, None)
        return len(fresh)

    def _remember(
        self,
        term: str,
        kind: ItemKind,
        sense_id: str,
        text: str,
        vector: np.ndarray,
        evidence_id: int | None,
    ) -> None:
        if not self.keep_items:
            return
        items = self._items[term]
        items.vectors.append(np.asarray(vector, np.float32))
        items.kinds.append(kind)
        items.sense_ids.append(sense_id)
        items.texts.append(text)
        items.evidence_ids.append(evidence_id)
        items.stacked = None

    # -- reading ------------------------------------------------------------------------

    def terms(self) -> tuple[str, ...]:
        return tuple(self._senses)

    def senses(self, term: str) -> tuple[str, ...]:
        try:
            return self._senses[term]
        except KeyError:
            raise UnknownTerm(term) from None

    def counts(self, sense_id: str) -> tuple[int, int]:
        """(definition items, evidence items) behind a sense's prototype."""
        accumulator = self._accumulators[sense_id]
        return accumulator.definition_count, accumulator.evidence_count

    def prototype(self, sense_id: str, *, without: np.ndarray | None = None) -> np.ndarray | None:
        """One sense's prototype; `without` removes one evidence vector (leave-one-out)."""
        accumulator = self._accumulators[sense_id]
        evidence_sum, count = accumulator.evidence_sum, accumulator.evidence_count
        if without is not None:
            evidence_sum, count = evidence_sum - without, count - 1
        definition = accumulator.definition_sum if accumulator.definition_count else None
        evidence = evidence_sum if count > 0 else None
        if definition is None and evidence is None:
            return None
        return blend(definition, evidence, count, self.evidence_prior).astype(np.float32)

    def matrix(self, term: str) -> np.ndarray:
        """(senses, dim) unit prototypes of a term's senses, in inventory order.

        A sense with neither definition nor evidence gets a zero row (similarity 0).
        """
        cached = self._matrices.get(term)
        if cached is not None:
            return cached
        rows = []
        for sense_id in self.senses(term):
            row = self.prototype(sense_id)
            rows.append(row if row is not None else np.zeros(self.dimension, np.float32))
        matrix = np.stack(rows).astype(np.float32)
        self._matrices[term] = matrix
        return matrix

    def log_prior(self, term: str, smoothing: float = DEFAULT_PRIOR_SMOOTHING) -> np.ndarray:
        """log p(sense) for the term's senses from evidence counts, add-`smoothing` smoothed."""
        if smoothing <= 0:
            raise ValueError("the prior needs a positive smoothing count")
        counts = np.array(
            [self._accumulators[s].evidence_count for s in self.senses(term)], np.float64
        )
        smoothed = counts + smoothing
        return np.log(smoothed / smoothed.sum())

    def similarities(self, term: str, vectors: np.ndarray) -> np.ndarray:
        """(n, senses) cosine similarities of unit `vectors` to the term's prototypes."""
        return np.asarray(vectors, np.float32).reshape(-1, self.dimension) @ self.matrix(term).T

    def nearest(self, term: str, vector: np.ndarray) -> NearestEvidence | None:
        """The gloss, example or evidence item of `term` most similar to `vector`."""
        items = self._items.get(term)
        if items is None or not items.vectors:
            return None
        if items.stacked is None:
            items.stacked = np.stack(items.vectors)
        scores = items.stacked @ np.asarray(vector, np.float32)
        best = int(np.argmax(scores))
        return NearestEvidence(
            kind=items.kinds[best],
            sense_id=items.sense_ids[best],
            text=items.texts[best],
            similarity=float(scores[best]),
        )

    def evidence_items(self, term: str) -> list[tuple[int, str, np.ndarray]]:
        """(evidence id, sense id, vector) of the term's labeled evidence (needs keep_items)."""
        items = self._items.get(term)
        if items is None:
            return []
        return [
            (evidence_id, sense_id, vector)
            for evidence_id, sense_id, vector, kind in zip(
                items.evidence_ids, items.sense_ids, items.vectors, items.kinds, strict=True
            )
            if kind == "evidence" and evidence_id is not None
        ]


def _locate(finder: OccurrenceFinder, text: str, term: str) -> tuple[int, int] | None:
    """The first occurrence of `term` (or its aliases and inflections) in an example sentence."""
    found = finder.find_in_text(text, terms=(term,))
    return (found[0][0], found[0][1]) if found else None


class PrototypeCache:
    """Books keyed by (inventory name, version, model_id), least recently used dropped first."""

    def __init__(self, max_books: int = 8) -> None:
        self.max_books = max_books
        self._books: OrderedDict[tuple[str, int, str], PrototypeBook] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, inventory: InventorySpec, model_id: str) -> PrototypeBook | None:
        key = (inventory.name, inventory.version, model_id)
        with self._lock:
            book = self._books.get(key)
            if book is not None:
                self._books.move_to_end(key)
            return book

    def put(self, book: PrototypeBook) -> None:
        with self._lock:
            self._books[book.key] = book
            self._books.move_to_end(book.key)
            while len(self._books) > self.max_books:
                self._books.popitem(last=False)

    def get_or_build(
        self,
        encoder: SpanEncoder,
        inventory: InventorySpec,
        evidence: Sequence[Evidence] = (),
        *,
        evidence_vectors: np.ndarray | None = None,
    ) -> PrototypeBook:
        """The cached book for this inventory version and encoder, built if missing;
        evidence not yet in a cached book is added incrementally."""
        book = self.get(inventory, encoder.model_id)
        if book is None:
            book = PrototypeBook.build(
                encoder, inventory, evidence, evidence_vectors=evidence_vectors
            )
            self.put(book)
        elif len(evidence):
            book.add_evidence(evidence, vectors=evidence_vectors, encoder=encoder)
        return book
