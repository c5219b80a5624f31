"""Turn labeled files into Evidence for one inventory.

Two inputs carry labels: our labeled-occurrence JSON Lines and sense-annotated
corpora (SemCor's format). Either way the store refuses a whole import that
names a term or sense the inventory lacks, so evidence is first matched to the
inventory: terms by case-folded surface form, senses by id. What does not fit
is counted, not stored; a WordNet inventory of a few lemmas can thus take its
share of a whole corpus.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Iterator
from itertools import chain
from pathlib import Path

from service.engine.types import Evidence, InventorySpec
from service.evaluation.labeled import LabeledOccurrence, parse_labeled, read_json_lines
from service.inventory.document import fold
from service.wordnet.corpus import CorpusStats, corpus_evidence, is_corpus_line, parse_sentence


def labeled_evidence(
    occurrences: Iterable[LabeledOccurrence], first_id: int = 1
) -> Iterator[Evidence]:
    """One Evidence per labeled occurrence, source "import" (missing-sense lines skipped)."""
    for number, item in enumerate(occurrences, start=first_id):
        if item.missing_sense:
            continue
        yield Evidence(
            evidence_id=number,
            term=item.term,
            sense_id=item.sense,
            text=item.text,
            start=item.start,
            end=item.end,
            source="import",
        )


def restrict_to_inventory(
    evidences: Iterable[Evidence], inventory: InventorySpec, skipped: Counter[str]
) -> Iterator[Evidence]:
    """Evidence whose term and sense the inventory has, with the term spelled as there.

    `skipped` counts the rest under "unknown term" and "unknown sense".
    """
    terms: dict[str, tuple[str, frozenset[str]]] = {}
    for term in inventory.terms:
        senses = frozenset(sense.sense_id for sense in term.senses)
        for surface in (term.term, *term.aliases):
            terms[fold(surface)] = (term.term, senses)
    for item in evidences:
        found = terms.get(fold(item.term))
        if found is None:
            skipped["unknown term"] += 1
            continue
        spelled, senses = found
        if item.sense_id not in senses:
            skipped["unknown sense"] += 1
            continue
        yield Evidence(
            item.evidence_id, spelled, item.sense_id, item.text, item.start, item.end, item.source
        )


def file_evidence(path: str | Path, corpus_stats: CorpusStats) -> Iterator[Evidence]:
    """Evidence from a labeled-occurrence file or a sense-annotated corpus, told apart by
    the first line; corpus labels are resolved through WordNet (`corpus_stats` counts)."""
    lines = read_json_lines(path)
    first = next(lines, None)
    if first is None:
        return iter(())
    everything = chain([first], lines)
    if is_corpus_line(first[1]):
        from service.engine.lexicon import open_wordnet

        reader = open_wordnet()
        sentences = (
            parse_sentence(obj, reader, corpus_stats, (str(path), number))
            for number, obj in everything
        )
        return corpus_evidence(sentences)
    return labeled_evidence(parse_labeled(obj, (str(path), number)) for number, obj in everything)
