"""Sense prototypes: one vector per sense, from its definition and its labeled evidence.

A sense's *definition* part is the mean of its gloss vector (see the encoder's
gloss template) and the contextual vectors of the term inside the sense's own
example sentences. Its *evidence* part is the mean of labeled occurrences
(corpus labels, review decisions, imports). The prototype mixes the two with
weight n/(n+k) on the evidence, n the number of labels: a curator's gloss
carries an unlabeled sense, and real usage takes over as labels accumulate.

History of k: 4 rather than 1, because contextual vectors of one word
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
too and did no better on both sets (docs/measurements.md).

Evidence counts also give each term a sense prior, p(s) = (n_s + a) / (N + S a)
(add-a smoothing, a = DEFAULT_PRIOR_SMOOTHING): without labels it is uniform,
with them it says how often each sense turns up in the curator's data. a = 4
rather than 1 because it held up better when the labels came from other
genres than the text (SemCor cross-genre check in docs/measurements.md).
The Disambiguator leaves it off by default: it helped only inside SemCor and
cost accuracy on SemEval-2013 and on the demo inventory, whose labels need
not follow the frequencies of the documents being tagged.

Hubness reduction (CSLS, Conneau et al. 2018): a prototype that sits close to
*every* contextual item of its term (examples and evidence of all its senses)
wins occurrences it should not. Scores subtract h * r(s), r(s) the mean cosine
of the prototype to its DEFAULT_HUB_NEIGHBOURS nearest contextual items of the
term, h = DEFAULT_HUB_WEIGHT. Measured on two held-out domain inventories
(research/trust_sweep.py; docs/measurements.md, "Evidence helps"): at cold
start it lifts accuracy from 0.640 to 0.764 and 0.738 to 0.800, and evidence
then only sharpens r(s), so accuracy rises with evidence instead of falling.
With it the evidence weight k = DEFAULT_EVIDENCE_PRIOR = 16 (4 before): senses with one or
two labels barely move (the cause of evidence hurting), many labels take over.

Sentence channel (Sentence-BERT's native sentence embedding, Reimers &
Gurevych 2019): besides the token-level vector, each occurrence's context
window is read as one mean-pooled sentence vector (encoder.py). Each sense
keeps a sentence prototype made like the token one: its definition part is the
mean of the gloss's sentence vector and its example sentences' window vectors,
its evidence part the mean of the evidence windows' vectors, mixed with the
same n/(n+k) weight (`blend`). A sense's score becomes
    token score + w * cosine(window sentence vector, sentence prototype),
w = the inventory's `sentence_weight` (0: off, nothing extra encoded, scores
unchanged). The token vector says what the word means here; the sentence
vector says what the passage is about, which is what a curator's gloss and a
document's topic share. Measured on held-out domain inventories and SemCor dev
in docs/measurements.md ("Sentence channel").

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

DEFAULT_EVIDENCE_PRIOR = 16.0
DEFAULT_HUB_WEIGHT = 0.75
DEFAULT_HUB_NEIGHBOURS = 3
# Cross-fitted rows are computed for at most this many labeled items (every n-th
# kept), so a re-fit stays cheap on inventories with a whole corpus as evidence.
MAX_HELD_OUT_ITEMS = 3000
DEFAULT_PRIOR_SMOOTHING = 4.0
ItemKind = Literal["gloss", "example", "evidence"]


class SpanEncoder(Protocol):
    """What prototypes need from an encoder (ContextEncoder satisfies it)."""

    model_id: str
    dimension: int

    def encode_spans(self, spans: Sequence[tuple[str, int, int]]) -> np.ndarray: ...

    def encode_glosses(self, glosses: Sequence[tuple[str, str, Sequence[str]]]) -> np.ndarray: ...

    def encode_spans_with_windows(self, spans: Sequence[tuple[str, int, int]]) -> (
            tuple[np.ndarray, np.ndarray]): ...

    def encode_gloss_sentences(
        self, glosses: Sequence[tuple[str, str, Sequence[str]]]
    ) -> np.ndarray: ...


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
    # The sentence channel's sums (zeros while it is off); evidence_count serves both.
    sentence_definition_sum: np.ndarray | None = None
    sentence_evidence_sum: np.ndarray | None = None
    sentence_definition_count: int = 0


@dataclass
class _TermItems:
    """Every item vector of one term, for nearest-evidence look-ups."""

    vectors: list[np.ndarray] = field(default_factory=list)
    kinds: list[ItemKind] = field(default_factory=list)
    sense_ids: list[str] = field(default_factory=list)
    texts: list[str] = field(default_factory=list)
    evidence_ids: list[int | None] = field(default_factory=list)
    sentences: list[np.ndarray | None] = field(default_factory=list)  # sentence channel
    stacked: np.ndarray | None = None


def _unit(vector: np.ndarray) -> np.ndarray:
    norm = float(np.linalg.norm(vector))
    return vector / norm if norm > 0 else vector


def hub_penalty(prototypes: np.ndarray, neighbourhood: np.ndarray, k: int) -> np.ndarray:
    """r(s): mean cosine of each prototype row to its k nearest neighbourhood rows (CSLS);
    zeros when fewer than two neighbours (nothing to tell a hub from)."""
    if len(neighbourhood) < 2:
        return np.zeros(len(prototypes), np.float64)
    sims = np.asarray(prototypes, np.float64) @ np.asarray(neighbourhood, np.float64).T
    top = min(k, sims.shape[1])
    penalty: np.ndarray = np.sort(sims, axis=1)[:, ::-1][:, :top].mean(axis=1)
    return penalty


@dataclass(frozen=True)
class HeldOutRow:
    """A labeled item scored against its term's senses rebuilt without it (cross-fitting)."""

    term: str
    kind: ItemKind
    gold: int  # index of the item's sense among the term's senses
    similarities: np.ndarray  # cosines to the held-out prototypes
    scores: np.ndarray  # similarities minus the hub penalty (plus the sentence channel)


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
        hub_weight: float = DEFAULT_HUB_WEIGHT,
        sentence_weight: float | None = None,
    ) -> None:
        """`sentence_weight` None takes the inventory's setting (module docstring)."""
        self.inventory = inventory
        self.sentence_weight = float(
            inventory.settings.sentence_weight if sentence_weight is None else sentence_weight
        )
        if self.sentence_weight < 0:
            raise ValueError("the sentence weight must not be negative")
        self._sentence_matrices: dict[str, np.ndarray] = {}
        self.hub_weight = hub_weight
        self._penalties: dict[str, np.ndarray] = {}
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
                if self.sentences:
                    accumulator = self._accumulators[sense_id]
                    accumulator.sentence_definition_sum = np.zeros(dimension, np.float64)
                    accumulator.sentence_evidence_sum = np.zeros(dimension, np.float64)
            self._items[spec.term] = _TermItems()

    @property
    def sentences(self) -> bool:
        """Whether the sentence channel is on (sentence vectors are encoded and kept)."""
        return self.sentence_weight > 0

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
        evidence_sentences: np.ndarray | None = None,
        finder: OccurrenceFinder | None = None,
        evidence_prior: float = DEFAULT_EVIDENCE_PRIOR,
        keep_items: bool = True,
        sentence_weight: float | None = None,
    ) -> PrototypeBook:
        """Encode every gloss and example of `inventory`, then add `evidence`."""
        book = cls(
            inventory,
            encoder.model_id,
            encoder.dimension,
            evidence_prior=evidence_prior,
            keep_items=keep_items,
            sentence_weight=sentence_weight,
        )
        book.add_definitions(encoder, finder)
        if len(evidence):
            book.add_evidence(
                evidence,
                vectors=evidence_vectors,
                sentence_vectors=evidence_sentences,
                encoder=encoder,
            )
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
        gloss_sentences = example_sentences = None
        if not example_spans:
            example_vectors = None
        elif self.sentences:
            example_vectors, example_sentences = encoder.encode_spans_with_windows(example_spans)
        else:
            example_vectors = encoder.encode_spans(example_spans)
        if self.sentences and gloss_inputs:
            gloss_sentences = encoder.encode_gloss_sentences(gloss_inputs)
        with self._lock:
            for owners, vectors, sentences, kind in (
                (gloss_owner, gloss_vectors, gloss_sentences, "gloss"),
                (example_owner, example_vectors, example_sentences, "example"),
            ):
                if vectors is None:
                    continue
                for n, ((term, sense_id, text), vector) in enumerate(
                    zip(owners, vectors, strict=True)
                ):
                    accumulator = self._accumulators[sense_id]
                    accumulator.definition_sum += vector
                    accumulator.definition_count += 1
                    sentence = None if sentences is None else sentences[n]
                    if sentence is not None:
                        accumulator.sentence_definition_sum += sentence
                        accumulator.sentence_definition_count += 1
                    self._remember(term, kind, sense_id, text, vector, None,  # type: ignore[arg-type]
                                   sentence)
            self._matrices.clear()
            self._penalties.clear()
            self._sentence_matrices.clear()

    def add_evidence(
        self,
        evidence: Sequence[Evidence],
        *,
        vectors: np.ndarray | None = None,
        sentence_vectors: np.ndarray | None = None,
        encoder: SpanEncoder | None = None,
        skip_unknown: bool = False,
    ) -> int:
        """Add labeled occurrences; encodes only items not seen before. Returns how many were added.

        Pass `vectors` (rows aligned with `evidence`, unit length) when they are
        cached elsewhere, and with the sentence channel on `sentence_vectors`
        (their window sentence vectors) too; otherwise an encoder is needed.
        Evidence naming a sense this inventory version lacks raises
        InventoryError, or is left out with skip_unknown (evidence outlives
        senses a curator removed).
        """
        if vectors is not None and len(vectors) != len(evidence):
            raise ValueError("evidence and vectors differ in length")
        if sentence_vectors is not None and len(sentence_vectors) != len(evidence):
            raise ValueError("evidence and sentence vectors differ in length")
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
        new_sentences: np.ndarray | None = None
        if self.sentences and sentence_vectors is not None:
            new_sentences = np.asarray(sentence_vectors, dtype=np.float32)[fresh]
        if vectors is None or (self.sentences and new_sentences is None):
            if encoder is None:
                raise ValueError(
                    "an encoder is needed to encode evidence without vectors"
                    + (" and sentence vectors" if self.sentences else "")
                )
            if encoder.model_id != self.model_id:
                raise InventoryError(
                    f"prototypes were built with {self.model_id}, not {encoder.model_id}"
                )
            spans = [(evidence[i].text, evidence[i].start, evidence[i].end) for i in fresh]
            if self.sentences:
                encoded, encoded_sentences = encoder.encode_spans_with_windows(spans)
                new_sentences = encoded_sentences if new_sentences is None else new_sentences
            else:
                encoded = encoder.encode_spans(spans)
            new_vectors = encoded if vectors is None else np.asarray(vectors, np.float32)[fresh]
        else:
            new_vectors = np.asarray(vectors, dtype=np.float32)[fresh]
        with self._lock:
            touched: set[str] = set()
            for n, (i, vector) in enumerate(zip(fresh, new_vectors, strict=True)):
                item = evidence[i]
                if item.evidence_id in self._seen_evidence:
                    continue
                self._seen_evidence.add(item.evidence_id)
                accumulator = self._accumulators[item.sense_id]
                accumulator.evidence_sum += vector
                accumulator.evidence_count += 1
                sentence = None if new_sentences is None else new_sentences[n]
                if sentence is not None:
                    accumulator.sentence_evidence_sum += sentence
                self._remember(
                    item.term, "evidence", item.sense_id, item.text, vector, item.evidence_id,
                    sentence,
                )
                touched.add(item.term)
            for term in touched:
                self._matrices.pop(term, None)
                self._penalties.pop(term, None)
                self._sentence_matrices.pop(term, None)
        return len(fresh)

    def _remember(
        self,
        term: str,
        kind: ItemKind,
        sense_id: str,
        text: str,
        vector: np.ndarray,
        evidence_id: int | None,
        sentence: np.ndarray | None = None,
    ) -> None:
        if not self.keep_items:
            return
        items = self._items[term]
        items.sentences.append(None if sentence is None else np.asarray(sentence, np.float32))
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

    def prototype(
        self,
        sense_id: str,
        *,
        without: np.ndarray | None = None,
        without_definition: np.ndarray | None = None,
    ) -> np.ndarray | None:
        """One sense's prototype; `without` removes one evidence vector and
        `without_definition` one example vector (leave-one-out)."""
        accumulator = self._accumulators[sense_id]
        return self._leave_out(
            (accumulator.definition_sum, accumulator.definition_count),
            (accumulator.evidence_sum, accumulator.evidence_count),
            without,
            without_definition,
        )

    def _leave_out(
        self,
        definition: tuple[np.ndarray, int],
        evidence: tuple[np.ndarray, int],
        without: np.ndarray | None,
        without_definition: np.ndarray | None,
    ) -> np.ndarray | None:
        """The blend of (sum, count) parts, one evidence or definition vector taken out."""
        (definition_sum, definition_count), (evidence_sum, count) = definition, evidence
        if without is not None:
            evidence_sum, count = evidence_sum - without, count - 1
        if without_definition is not None:
            definition_sum = definition_sum - without_definition
            definition_count -= 1
        kept_definition = definition_sum if definition_count else None
        kept_evidence = evidence_sum if count > 0 else None
        if kept_definition is None and kept_evidence is None:
            return None
        return blend(kept_definition, kept_evidence, count, self.evidence_prior).astype(np.float32)

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

    def sentence_prototype(
        self,
        sense_id: str,
        *,
        without: np.ndarray | None = None,
        without_definition: np.ndarray | None = None,
    ) -> np.ndarray | None:
        """One sense's sentence prototype (sentence channel on); `without` removes one
        evidence window vector and `without_definition` one example's (leave-one-out)."""
        accumulator = self._accumulators[sense_id]
        if accumulator.sentence_definition_sum is None or accumulator.sentence_evidence_sum is None:
            return None
        return self._leave_out(
            (accumulator.sentence_definition_sum, accumulator.sentence_definition_count),
            (accumulator.sentence_evidence_sum, accumulator.evidence_count),
            without,
            without_definition,
        )

    def sentence_matrix(self, term: str) -> np.ndarray:
        """(senses, dim) unit sentence prototypes of a term's senses (zero rows while
        the channel is off or a sense has nothing behind it)."""
        cached = self._sentence_matrices.get(term)
        if cached is not None:
            return cached
        rows = []
        for sense_id in self.senses(term):
            row = self.sentence_prototype(sense_id)
            rows.append(row if row is not None else np.zeros(self.dimension, np.float32))
        matrix = np.stack(rows).astype(np.float32)
        self._sentence_matrices[term] = matrix
        return matrix

    def log_prior(self, term: str, smoothing: float = DEFAULT_PRIOR_SMOOTHING) -> np.ndarray:
        """log p(sense) for the term's senses from evidence counts, add-`smoothing` smoothed."""
        if smoothing <= 0:
            raise ValueError("the prior needs a positive smoothing count")
        counts = np.array(
            [self._accumulators[s].evidence_count for s in self.senses(term)], np.float64
        )
        smoothed = counts + smoothing
        prior: np.ndarray = np.log(smoothed / smoothed.sum())
        return prior

    def similarities(self, term: str, vectors: np.ndarray) -> np.ndarray:
        """(n, senses) cosine similarities of unit `vectors` to the term's prototypes."""
        rows = np.asarray(vectors, np.float32).reshape(-1, self.dimension)
        similarities: np.ndarray = rows @ self.matrix(term).T
        return similarities

    def penalty(self, term: str) -> np.ndarray:
        """h * r(s) per sense of `term` (CSLS hubness penalty; see the module docstring)."""
        cached = self._penalties.get(term)
        if cached is not None:
            return cached
        neighbourhood, _, _ = self.contextual_items(term)
        penalty = self.hub_weight * hub_penalty(
            self.matrix(term), neighbourhood, DEFAULT_HUB_NEIGHBOURS
        )
        self._penalties[term] = penalty
        return penalty

    def scores(
        self, term: str, similarities: np.ndarray, sentences: np.ndarray | None = None
    ) -> np.ndarray:
        """Similarity rows (n, senses) of `term` turned into scores: minus the hub penalty,
        plus, with the sentence channel on, sentence_weight times the cosines of the
        occurrences' window sentence vectors `sentences` (n, dim) to the sentence
        prototypes. A caller without sentence vectors gets a ValueError while the
        channel is on: scores without it would be on another scale."""
        scored: np.ndarray = np.asarray(similarities, np.float64) - self.penalty(term)
        if not self.sentences:
            return scored
        total: np.ndarray = scored + self.sentence_channel(term, sentences).reshape(scored.shape)
        return total

    def sentence_channel(self, term: str, sentences: np.ndarray | None) -> np.ndarray:
        """(n, senses) sentence_weight times the cosines of window sentence vectors (n, dim)
        to the term's sentence prototypes; zeros while the channel is off."""
        if not self.sentences:
            return np.zeros((1 if sentences is None else len(np.atleast_2d(sentences)),
                             len(self.senses(term))))
        if sentences is None:
            raise ValueError(
                "the sentence channel is on (sentence_weight > 0): scores need the "
                "occurrences' window sentence vectors"
            )
        rows = np.asarray(sentences, np.float64).reshape(-1, self.dimension)
        channel: np.ndarray = self.sentence_weight * (
            rows @ self.sentence_matrix(term).astype(np.float64).T
        )
        return channel

    def contextual_items(self, term: str) -> tuple[np.ndarray, list[str], list[ItemKind]]:
        """(vectors, sense ids, kinds) of the term's labeled occurrences: example
        sentences and evidence (not glosses, which live in another cosine band)."""
        items = self._items.get(term)
        if items is None:
            return np.zeros((0, self.dimension), np.float64), [], []
        keep = [i for i, kind in enumerate(items.kinds) if kind != "gloss"]
        if not keep:
            return np.zeros((0, self.dimension), np.float64), [], []
        vectors = np.stack([items.vectors[i] for i in keep]).astype(np.float64)
        return vectors, [items.sense_ids[i] for i in keep], [items.kinds[i] for i in keep]

    def contextual_sentences(self, term: str) -> np.ndarray:
        """(items, dim) window sentence vectors of `contextual_items(term)`, same order
        (zero rows for items kept without one, e.g. while the channel is off)."""
        items = self._items.get(term)
        if items is None:
            return np.zeros((0, self.dimension), np.float64)
        rows = [
            np.zeros(self.dimension, np.float32) if sentence is None else sentence
            for sentence, kind in zip(items.sentences, items.kinds, strict=True)
            if kind != "gloss"
        ]
        if not rows:
            return np.zeros((0, self.dimension), np.float64)
        return np.stack(rows).astype(np.float64)

    def gloss_vectors(self, term: str) -> np.ndarray:
        """(glosses, dim) gloss vectors of the term's senses (those that have a gloss)."""
        return self._gloss_rows(term, sentences=False)

    def gloss_sentences(self, term: str) -> np.ndarray:
        """(glosses, dim) sentence vectors of the term's glosses (sentence channel on)."""
        return self._gloss_rows(term, sentences=True)

    def _gloss_rows(self, term: str, *, sentences: bool) -> np.ndarray:
        items = self._items.get(term)
        rows: list[np.ndarray] = []
        if items is not None:
            for vector, sentence, kind in zip(
                items.vectors, items.sentences, items.kinds, strict=True
            ):
                row = sentence if sentences else vector
                if kind == "gloss" and row is not None:
                    rows.append(row)
        if not rows:
            return np.zeros((0, self.dimension), np.float64)
        return np.stack(rows).astype(np.float64)

    def held_out_rows(self, max_items: int = MAX_HELD_OUT_ITEMS) -> list[HeldOutRow]:
        """Every labeled item (example or evidence) of every term, scored against
        prototypes and hub penalties rebuilt without it: no item scores itself.

        With more than `max_items` items, every n-th is used (deterministic)."""
        plan = [
            (term, index)
            for term in self.terms()
            for index in range(len(self.contextual_items(term)[1]))
        ]
        step = max(1, -(-len(plan) // max_items)) if plan else 1
        wanted: dict[str, list[int]] = {}
        for term, index in plan[::step]:
            wanted.setdefault(term, []).append(index)
        rows: list[HeldOutRow] = []
        k = DEFAULT_HUB_NEIGHBOURS
        for term, indices in wanted.items():
            sense_ids = self.senses(term)
            vectors, owners, kinds = self.contextual_items(term)
            matrix = self.matrix(term).astype(np.float64)
            base = matrix @ vectors.T  # (senses, items): computed once per term
            if self.sentences:
                sentence_vectors = self.contextual_sentences(term)
                sentence_matrix = self.sentence_matrix(term).astype(np.float64)
            for index in indices:
                vector, sense_id, kind = vectors[index], owners[index], kinds[index]
                position = sense_ids.index(sense_id)
                held = self.prototype(
                    sense_id,
                    without=vector if kind == "evidence" else None,
                    without_definition=vector if kind == "example" else None,
                )
                prototypes = matrix.copy()
                prototypes[position] = held if held is not None else 0.0
                sims = base.copy()
                sims[position] = prototypes[position] @ vectors.T
                sims = np.delete(sims, index, axis=1)  # the item is no neighbour of itself
                if sims.shape[1] < 2:
                    penalty = np.zeros(len(sense_ids))
                else:
                    top = min(k, sims.shape[1])
                    penalty = self.hub_weight * (
                        -np.partition(-sims, top - 1, axis=1)[:, :top]
                    ).mean(axis=1)
                similarities = prototypes @ vector
                scores = similarities - penalty
                if self.sentences:  # the sentence channel, cross-fitted the same way
                    sentence = sentence_vectors[index]
                    held_sentence = self.sentence_prototype(
                        sense_id,
                        without=sentence if kind == "evidence" else None,
                        without_definition=sentence if kind == "example" else None,
                    )
                    sentence_prototypes = sentence_matrix.copy()
                    sentence_prototypes[position] = (
                        held_sentence if held_sentence is not None else 0.0
                    )
                    scores = scores + self.sentence_weight * (sentence_prototypes @ sentence)
                rows.append(HeldOutRow(term, kind, position, similarities, scores))
        return rows

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
        evidence_sentences: np.ndarray | None = None,
    ) -> PrototypeBook:
        """The cached book for this inventory version and encoder, built if missing;
        evidence not yet in a cached book is added incrementally."""
        book = self.get(inventory, encoder.model_id)
        if book is None:
            book = PrototypeBook.build(
                encoder, inventory, evidence, evidence_vectors=evidence_vectors,
                evidence_sentences=evidence_sentences,
            )
            self.put(book)
        elif len(evidence):
            book.add_evidence(evidence, vectors=evidence_vectors,
                              sentence_vectors=evidence_sentences, encoder=encoder)
        return book
