"""On a slice of SemEval-2013 Task 12 (English nouns), the engine beats the most-frequent-sense
baseline computed on the same slice.

Data: SemEval-2013 Task 12 (Navigli, Jurgens & Vannella 2013) and SemCor 3.0 (Miller et al.
1993) as converted in ../shared/data; inventories are the WordNet 3.0 senses of each
lemma+pos. Prototypes come from glosses, WordNet examples and a SemCor slice of sentences
holding the test lemmas; the baseline is the sense most frequent in that same SemCor slice
(WordNet's first sense where the slice has none), as in Raganato et al. 2017.
"""

from __future__ import annotations

import gzip
import json
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest

from service.engine.disambiguator import Disambiguator, SpanQuery
from service.engine.types import Evidence, InventorySpec, SenseSpec, TermSpec
from tests.conftest import shared_data

TEST_DOCUMENTS = 4  # the first four SemEval-2013 documents
SENTENCES_PER_LEMMA = 6

pytestmark = pytest.mark.slow


def sentences(path: Path) -> Iterator[tuple[str, str, list[dict]]]:
    """(doc, text, instances with character offsets); '_' inside tokens becomes a space."""
    with gzip.open(path, "rt", encoding="utf-8") as handle:
        for raw in handle:
            obj = json.loads(raw)
            starts, position = [], 0
            for token in obj["tokens"]:
                starts.append(position)
                position += len(token) + 1
            text = " ".join(obj["tokens"]).replace("_", " ")
            instances = []
            for item in obj["instances"]:
                last = item["end"] - 1
                instances.append(
                    {
                        "lemma": item["lemma"].replace("_", " ").lower(),
                        "pos": item["pos"],
                        "keys": item["sense_keys"],
                        "start": starts[item["start"]],
                        "end": starts[last] + len(obj["tokens"][last]),
                    }
                )
            yield obj["doc"], text, instances


def wordnet_term(wordnet, lemma: str, pos: str) -> TermSpec | None:
    name = lemma.replace(" ", "_")
    senses = []
    for synset in wordnet.synsets(name, pos):
        for wn_lemma in synset.lemmas():
            if wn_lemma.name().lower() == name.lower():
                senses.append(
                    SenseSpec(wn_lemma.key(), synset.definition(), tuple(synset.examples()))
                )
    unique = {sense.sense_id: sense for sense in senses}
    if not unique:
        return None
    return TermSpec(f"{lemma}/{pos}", tuple(unique.values()), aliases=(lemma,), pos=pos)


@dataclass(frozen=True)
class SemEvalSlice:
    """The test slice: WordNet inventory, SemCor evidence, queries, gold keys, SemCor counts."""

    inventory: InventorySpec
    evidence: list[Evidence]
    queries: list[SpanQuery]
    gold: list[set[str]]
    baseline: list[str]  # the most frequent sense in the SemCor slice, per query


def semeval_slice(semeval: Path, semcor: Path, wordnet) -> SemEvalSlice:
    documents = []
    test_items: list[tuple[str, str, dict]] = []
    for doc, text, instances in sentences(semeval):
        if doc not in documents:
            documents.append(doc)
        if len(documents) > TEST_DOCUMENTS:
            break
        test_items.extend((doc, text, item) for item in instances)

    terms: dict[tuple[str, str], TermSpec] = {}
    for _, _, item in test_items:
        key = (item["lemma"], item["pos"])
        if key not in terms:
            terms[key] = wordnet_term(wordnet, *key)
    terms = {key: spec for key, spec in terms.items() if spec is not None}
    scored = [
        (doc, text, item)
        for doc, text, item in test_items
        if (item["lemma"], item["pos"]) in terms
        and any(k in {s.sense_id for s in terms[(item["lemma"], item["pos"])].senses}
                for k in item["keys"])
    ]

    evidence: list[Evidence] = []
    counts: dict[tuple[str, str], Counter[str]] = {key: Counter() for key in terms}
    taken: Counter[tuple[str, str]] = Counter()
    for _, text, instances in sentences(semcor):
        for item in instances:
            key = (item["lemma"], item["pos"])
            if key not in terms or taken[key] >= SENTENCES_PER_LEMMA:
                continue
            ids = {s.sense_id for s in terms[key].senses}
            label = next((k for k in item["keys"] if k in ids), None)
            if label is None:
                continue
            taken[key] += 1
            counts[key][label] += 1
            evidence.append(
                Evidence(len(evidence) + 1, terms[key].term, label, text, item["start"],
                         item["end"])
            )
    baseline = []
    for _, _, item in scored:
        key = (item["lemma"], item["pos"])
        baseline.append(counts[key].most_common(1)[0][0] if counts[key]
                        else terms[key].senses[0].sense_id)
    return SemEvalSlice(
        inventory=InventorySpec("wordnet-semeval-slice", 1, tuple(terms.values())),
        evidence=evidence,
        queries=[
            SpanQuery(text, item["start"], item["end"], terms[(item["lemma"], item["pos"])].term,
                      document_id=doc)
            for doc, text, item in scored
        ],
        gold=[set(item["keys"]) for _, _, item in scored],
        baseline=baseline,
    )


def test_engine_beats_most_frequent_sense_on_a_semeval_2013_slice(encoder, wordnet):
    semeval, semcor = shared_data("semeval2013-en.jsonl.gz", "semcor30.jsonl.gz")
    data = semeval_slice(semeval, semcor, wordnet)
    assert len(data.queries) > 400
    assert len(data.evidence) > 500
    disambiguator = Disambiguator(encoder, data.inventory, data.evidence)
    results = disambiguator.classify_spans(data.queries)
    engine_hits = sum(
        r.candidates[0].sense_id in gold for r, gold in zip(results, data.gold, strict=True)
    )
    baseline_hits = sum(guess in gold for guess, gold in zip(data.baseline, data.gold,
                                                              strict=True))
    scored = data.queries
    engine, baseline = engine_hits / len(scored), baseline_hits / len(scored)
    print(f"SemEval-2013 slice: {len(scored)} instances, engine {engine:.3f}, MFS {baseline:.3f}")
    assert engine > baseline
