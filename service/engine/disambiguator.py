"""The engine's front door: documents in, one decision with its rationale per occurrence out.

Documents are taken from any iterable and processed in groups (one encoder
pass over all of a group's windows, batched by token length), and results are
yielded group by group, so memory stays flat however long the stream. Groups
of 64 documents rather than 16 took the engine from 0.70 to 0.90 of the bare
encoder's speed on the demo corpus: more windows to sort, less padding
(docs/measurements.md, "Throughput"). The erasure rationale costs one forward
pass per context word, so it is computed only for the statuses in
`erasure_for`, empty unless the caller asks.

The sense prior from evidence counts is off by default (sense_prior=True turns
it on): it gained inside SemCor but cost 1.5 points on SemEval-2013 and 2
points on the demo inventory's inner split, so label frequencies are not
trusted to match the documents being tagged (docs/measurements.md).

With the inventory's `sentence_weight` above 0 every path that scores
(documents, `classify_spans`, `classify_vectors`) also reads each occurrence's
window sentence vector (prototypes.py, "sentence channel"); `classify_vectors`
then needs those vectors handed in beside the span vectors.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from itertools import islice

import numpy as np

from .alignment import AlignedEncoder, AlignmentHead, bundled_head
from .assignment import Assignment, Candidate, assign
from .consistency import DEFAULT_CONSISTENCY_WEIGHT, share_within_documents
from .encoder import ContextEncoder, SpanEncoding
from .errors import DocumentTooLarge, InventoryError, UnknownTerm
from .occurrences import OccurrenceFinder
from .outliers import OccurrenceScorer
from .prototypes import DEFAULT_EVIDENCE_PRIOR, PrototypeBook
from .rationale import Rationale, attention_words, erasure_drops, rollout_words
from .trust import TrustFit, fit_trust
from .types import Document, Evidence, InventorySpec, Occurrence, Status

DEFAULT_MAX_DOCUMENT_CHARS = 1_000_000
DEFAULT_GROUP_SIZE = 64


@dataclass(frozen=True)
class SpanQuery:
    """A pre-located occurrence: `text[start:end]` is an occurrence of `term`.

    Queries sharing a `document_id` count as one document for consistency.
    """

    text: str
    start: int
    end: int
    term: str
    document_id: str = ""
    field: str = "text"


@dataclass(frozen=True)
class OccurrenceResult:
    """One occurrence's decision; `to_json` gives the Result interchange format."""

    document_id: str
    field: str
    occurrence_index: int
    start: int
    end: int
    surface: str
    term: str
    sense_id: str | None
    tags: tuple[str, ...]
    confidence: float
    margin: float
    status: Status
    candidates: tuple[Candidate, ...]
    rationale: Rationale | None
    inventory_version: int
    missing_sense_p: float | None = None

    def to_json(self) -> dict[str, object]:
        return {
            "document_id": self.document_id,
            "field": self.field,
            "occurrence_index": self.occurrence_index,
            "start": self.start,
            "end": self.end,
            "surface": self.surface,
            "term": self.term,
            "sense_id": self.sense_id,
            "tags": list(self.tags),
            "confidence": round(float(self.confidence), 4),
            "margin": round(float(self.margin), 4),
            "status": self.status,
            "missing_sense_p": (
                round(float(self.missing_sense_p), 4) if self.missing_sense_p is not None else None
            ),
            "candidates": [candidate.to_json() for candidate in self.candidates],
            "rationale": self.rationale.to_json() if self.rationale is not None else None,
            "inventory_version": self.inventory_version,
        }


@dataclass(frozen=True)
class DocumentResult:
    document_id: str
    occurrences: tuple[OccurrenceResult, ...]


def _validate(inventory: InventorySpec) -> None:
    seen_terms: set[str] = set()
    seen_senses: set[str] = set()
    for spec in inventory.terms:
        if not spec.term.strip():
            raise InventoryError("a term is empty")
        folded = spec.term.casefold()
        if folded in seen_terms:
            raise InventoryError(f"term {spec.term!r} appears twice")
        seen_terms.add(folded)
        if not spec.senses:
            raise InventoryError(f"term {spec.term!r} has no senses")
        for sense in spec.senses:
            if sense.sense_id in seen_senses:
                raise InventoryError(f"sense id {sense.sense_id!r} is used twice")
            seen_senses.add(sense.sense_id)


class Disambiguator:
    """Tags occurrences of one inventory version's terms with senses."""

    def __init__(
        self,
        encoder: ContextEncoder,
        inventory: InventorySpec,
        evidence: Sequence[Evidence] = (),
        *,
        prototypes: PrototypeBook | None = None,
        evidence_vectors: np.ndarray | None = None,
        evidence_sentences: np.ndarray | None = None,
        consistency_weight: float = DEFAULT_CONSISTENCY_WEIGHT,
        sense_prior: bool = False,
        evidence_prior: float = DEFAULT_EVIDENCE_PRIOR,
        top_words: int = 5,
        erasure_for: frozenset[Status] = frozenset(),
        max_document_chars: int = DEFAULT_MAX_DOCUMENT_CHARS,
        group_size: int = DEFAULT_GROUP_SIZE,
        finder: OccurrenceFinder | None = None,
        alignment_head: AlignmentHead | None = None,
    ) -> None:
        _validate(inventory)
        if alignment_head is None and inventory.settings.alignment_head:
            alignment_head = bundled_head(inventory.settings.alignment_head, encoder.model_id)
        self.alignment_head = alignment_head
        if alignment_head is not None:
            # Everything encoded from here on (glosses, examples, evidence, occurrences,
            # erasure variants) is aligned; vectors handed in are aligned below.
            encoder = AlignedEncoder(encoder, alignment_head)  # type: ignore[assignment]
            if evidence_vectors is not None:
                evidence_vectors = alignment_head.context(evidence_vectors)
            if evidence_sentences is not None:
                evidence_sentences = alignment_head.context(evidence_sentences)
        self.encoder = encoder
        self.inventory = inventory
        self.finder = finder or OccurrenceFinder(inventory)
        if prototypes is None:
            prototypes = PrototypeBook.build(
                encoder,
                inventory,
                evidence,
                evidence_vectors=evidence_vectors,
                evidence_sentences=evidence_sentences,
                finder=self.finder,
                evidence_prior=evidence_prior,
            )
        else:
            if prototypes.model_id != encoder.model_id:
                raise InventoryError(
                    f"prototypes were built with {prototypes.model_id}, not {encoder.model_id}"
                )
            if prototypes.sentence_weight != inventory.settings.sentence_weight:
                raise InventoryError(
                    f"prototypes were built with sentence weight {prototypes.sentence_weight}, "
                    f"the inventory asks for {inventory.settings.sentence_weight}"
                )
            if len(evidence):
                prototypes.add_evidence(
                    evidence,
                    vectors=evidence_vectors,
                    sentence_vectors=evidence_sentences,
                    encoder=encoder,
                )
        self.prototypes = prototypes
        self.consistency_weight = consistency_weight
        self.sense_prior = sense_prior
        self.top_words = top_words
        self.erasure_for = erasure_for
        self.max_document_chars = max_document_chars
        self.group_size = group_size
        self._terms = frozenset(prototypes.terms())
        self.trust: TrustFit = fit_trust(prototypes, inventory.settings)
        self._tags = {
            sense.sense_id: sense.tags for spec in inventory.terms for sense in spec.senses
        }

    # -- documents ------------------------------------------------------------------------

    def check_size(self, document: Document) -> None:
        """Raise DocumentTooLarge when the document's text exceeds the limit."""
        size = sum(len(text) for _, text in document.fields)
        if size > self.max_document_chars:
            raise DocumentTooLarge(document.doc_id, size, self.max_document_chars)

    def tag(
        self, documents: Iterable[Document], *, rationale: bool = True
    ) -> Iterator[DocumentResult]:
        """Results per document, in input order, streamed group by group.

        A document over the size limit raises DocumentTooLarge when its group is reached.
        """
        iterator = iter(documents)
        while True:
            group = list(islice(iterator, self.group_size))
            if not group:
                return
            for document in group:
                self.check_size(document)
            yield from self._tag_group(group, rationale)

    def _tag_group(self, documents: Sequence[Document], rationale: bool) -> list[DocumentResult]:
        found: list[list[Occurrence]] = [self.finder.find(document) for document in documents]
        queries: list[SpanQuery] = []
        owners: list[tuple[int, Occurrence]] = []
        for doc_number, (document, occurrences) in enumerate(zip(documents, found, strict=True)):
            texts = dict(document.fields)
            for occurrence in occurrences:
                queries.append(
                    SpanQuery(
                        text=texts[occurrence.field],
                        start=occurrence.start,
                        end=occurrence.end,
                        term=occurrence.term,
                        document_id=f"{doc_number}",
                        field=occurrence.field,
                    )
                )
                owners.append((doc_number, occurrence))
        decided = self._decide(queries, rationale)
        per_document: list[list[OccurrenceResult]] = [[] for _ in documents]
        for (doc_number, occurrence), (assignment, why) in zip(owners, decided, strict=True):
            per_document[doc_number].append(
                self._result(documents[doc_number].doc_id, occurrence, assignment, why)
            )
        return [
            DocumentResult(document.doc_id, tuple(results))
            for document, results in zip(documents, per_document, strict=True)
        ]

    # -- pre-located spans ----------------------------------------------------------------

    def classify_spans(
        self, spans: Sequence[SpanQuery], *, rationale: bool = False
    ) -> list[OccurrenceResult]:
        """Decide pre-located occurrences (evaluation, benchmarks); one result per query.

        occurrence_index is the query's position in `spans`.
        """
        self._check_queries(spans)
        return self._results(spans, self._decide(spans, rationale))

    def classify_vectors(
        self,
        spans: Sequence[SpanQuery],
        vectors: np.ndarray,
        sentences: np.ndarray | None = None,
    ) -> list[OccurrenceResult]:
        """Like classify_spans, from span vectors encoded earlier by the encoder this
        engine was given (e.g. cached under its model_id); no rationale.

        With the sentence channel on, `sentences` (the spans' window sentence vectors,
        `encode_spans_with_windows`) are required: a ValueError says so otherwise."""
        self._check_queries(spans)
        if len(vectors) != len(spans):
            raise ValueError("one vector per span")
        if self.prototypes.sentences:
            if sentences is None:
                raise ValueError(
                    "this inventory's sentence channel is on (sentence_weight > 0): pass "
                    "the spans' window sentence vectors too"
                )
            if len(sentences) != len(spans):
                raise ValueError("one sentence vector per span")
        aligned = self.align(vectors)
        aligned_sentences = (
            self.align(sentences) if self.prototypes.sentences and sentences is not None
            else None
        )
        return self._results(
            spans, [(a, None) for a in self._assign(spans, aligned, aligned_sentences)]
        )

    def align(self, vectors: np.ndarray) -> np.ndarray:
        """Span vectors of the given encoder in the space prototypes live in (unchanged
        without an alignment head)."""
        if self.alignment_head is None or not len(vectors):
            return vectors
        return self.alignment_head.context(vectors)

    def _check_queries(self, spans: Sequence[SpanQuery]) -> None:
        for query in spans:
            if query.term not in self._terms:
                raise UnknownTerm(query.term)
            if not 0 <= query.start <= query.end <= len(query.text):
                raise ValueError(f"span [{query.start}, {query.end}) outside its text")

    def _results(
        self,
        spans: Sequence[SpanQuery],
        decided: Sequence[tuple[Assignment, Rationale | None]],
    ) -> list[OccurrenceResult]:
        return [
            self._result(
                query.document_id,
                Occurrence(
                    field=query.field,
                    start=query.start,
                    end=query.end,
                    surface=query.text[query.start : query.end],
                    term=query.term,
                    index=i,
                ),
                assignment,
                why,
            )
            for i, (query, (assignment, why)) in enumerate(zip(spans, decided, strict=True))
        ]

    # -- the decision ---------------------------------------------------------------------

    def similarities(self, spans: Sequence[SpanQuery], vectors: np.ndarray) -> list[np.ndarray]:
        """Cosine similarity rows (one per span, over its term's senses), after consistency."""
        rows = [
            self.prototypes.similarities(query.term, vector)[0]
            for query, vector in zip(spans, vectors, strict=True)
        ]
        if self.consistency_weight > 0:
            groups = [(query.document_id, query.term) for query in spans]
            rows = share_within_documents(rows, groups, self.consistency_weight)
        return rows

    def _decide(
        self, spans: Sequence[SpanQuery], rationale: bool
    ) -> list[tuple[Assignment, Rationale | None]]:
        if not spans:
            return []
        triples = [(query.text, query.start, query.end) for query in spans]
        encodings: list[SpanEncoding] | None = None
        sentences: np.ndarray | None = None
        if rationale:
            encodings = self.encoder.encode_spans_detailed(triples)
            vectors = np.stack([encoding.vector for encoding in encodings])
            if self.prototypes.sentences:
                sentences = np.stack([
                    encoding.sentence if encoding.sentence is not None
                    else np.zeros(len(encoding.vector), np.float32)
                    for encoding in encodings
                ])
        elif self.prototypes.sentences:
            vectors, sentences = self.encoder.encode_spans_with_windows(triples)
        else:
            vectors = self.encoder.encode_spans(triples)
        assignments = self._assign(spans, vectors, sentences)
        if encodings is None:
            return [(assignment, None) for assignment in assignments]
        return [
            (assignment, self._rationale(query, encoding, assignment))
            for query, encoding, assignment in zip(spans, encodings, assignments, strict=True)
        ]

    def _assign(
        self,
        spans: Sequence[SpanQuery],
        vectors: np.ndarray,
        sentences: np.ndarray | None = None,
    ) -> list[Assignment]:
        rows = self.similarities(spans, vectors)
        if sentences is None:
            sentences_of: list[np.ndarray | None] = [None] * len(spans)
        else:
            sentences_of = list(sentences)
        settings = self.inventory.settings
        trust = self.trust
        outlier_score = OccurrenceScorer(self.prototypes)
        assignments = []
        for query, row, vector, sentence in zip(spans, rows, vectors, sentences_of, strict=True):
            prior = self.prototypes.log_prior(query.term) if self.sense_prior else None
            senses = self.prototypes.senses(query.term)
            p_value = trust.missing.p_value(outlier_score(query.term, vector, sentence))
            assignments.append(
                assign(
                    row,
                    senses,
                    settings,
                    trust.temperature,
                    prior,
                    scores=self.prototypes.scores(query.term, row, sentence),
                    review_threshold=trust.review.threshold,
                    missing_sense_p=p_value,
                    missing_sense=trust.missing.flags(p_value),
                )
            )
        return assignments

    def _rationale(
        self, query: SpanQuery, encoding: SpanEncoding, assignment: Assignment
    ) -> Rationale:
        erasure = None
        if assignment.status in self.erasure_for:
            senses = self.prototypes.senses(query.term)
            prototype = self.prototypes.matrix(query.term)[senses.index(assignment.best_sense)]
            erasure = tuple(erasure_drops(self.encoder, encoding, prototype)[: self.top_words])
        return Rationale(
            attention=tuple(attention_words(encoding, self.top_words)),
            rollout=tuple(rollout_words(encoding, self.top_words)),
            nearest_evidence=self.prototypes.nearest(query.term, encoding.vector),
            erasure=erasure,
        )

    def _result(
        self,
        document_id: str,
        occurrence: Occurrence,
        assignment: Assignment,
        why: Rationale | None,
    ) -> OccurrenceResult:
        return OccurrenceResult(
            document_id=document_id,
            field=occurrence.field,
            occurrence_index=occurrence.index,
            start=occurrence.start,
            end=occurrence.end,
            surface=occurrence.surface,
            term=occurrence.term,
            sense_id=assignment.sense_id,
            tags=self._tags.get(assignment.sense_id, ()) if assignment.sense_id else (),
            confidence=assignment.confidence,
            margin=assignment.margin,
            status=assignment.status,
            candidates=assignment.candidates,
            rationale=why,
            inventory_version=self.inventory.version,
            missing_sense_p=assignment.missing_sense_p,
        )
