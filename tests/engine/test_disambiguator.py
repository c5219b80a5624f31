"""The Disambiguator end to end: result format, rationale, errors, streaming."""

from __future__ import annotations

import json
import re
from dataclasses import replace
from pathlib import Path

import pytest

from service.engine.assignment import softmax
from service.engine.disambiguator import Disambiguator, SpanQuery
from service.engine.errors import DocumentTooLarge, InventoryError, UnknownTerm
from service.engine.rationale import context_words, erasure_drops
from service.engine.types import (
    Document,
    Evidence,
    InventorySettings,
    InventorySpec,
    SenseSpec,
    TermSpec,
)

README = Path(__file__).resolve().parents[2] / "README.md"
RESULT_KEYS = {
    "document_id", "field", "occurrence_index", "start", "end", "surface", "term", "sense_id",
    "tags", "confidence", "margin", "status", "candidates", "rationale", "inventory_version",
    "missing_sense_p",
}


@pytest.fixture(scope="module")
def disambiguator(encoder, bass_inventory) -> Disambiguator:
    return Disambiguator(encoder, bass_inventory, max_document_chars=5_000)


@pytest.fixture(scope="module")
def tagged(disambiguator):
    documents = [
        Document.from_text(
            "d1",
            "We caught a huge bass in the lake. Then the bass player tuned his guitar!\r\n"
            "A lantern 😀 glowed.",
            title="Bass fishing",
        ),
        Document.from_text("d2", ""),
    ]
    return list(disambiguator.tag(documents))


def test_result_keys_are_those_of_the_interchange_format(tagged):
    # The README documents the result object; its example must show every key.
    block = README.read_text(encoding="utf-8").split("## What a result looks like")[1]
    block = block.split("\n## ")[0]
    assert set(re.findall(r'"([a-z_]+)":', block)) >= RESULT_KEYS
    for result in tagged[0].occurrences:
        data = json.loads(json.dumps(result.to_json()))
        assert set(data) == RESULT_KEYS
        assert set(data["rationale"]) == {"attention", "rollout", "nearest_evidence", "erasure"}
        assert data["rationale"]["attention"]["method"] == "last-layer-head-average"
        assert data["rationale"]["rollout"]["method"] == "attention-rollout"
        for candidate in data["candidates"]:
            assert set(candidate) == {"sense_id", "similarity", "probability"}
        assert data["inventory_version"] == 3


def test_occurrences_offsets_and_indices(tagged):
    document, empty = tagged
    assert empty.document_id == "d2" and empty.occurrences == ()
    found = [(o.field, o.surface, o.occurrence_index) for o in document.occurrences]
    assert found == [
        ("text", "bass", 0),
        ("text", "bass", 1),
        ("text", "lantern", 2),
        ("title", "Bass", 3),
    ]


def test_senses_follow_context(tagged):
    fish, music = tagged[0].occurrences[:2]
    assert fish.candidates[0].sense_id == "bass.fish"
    assert music.candidates[0].sense_id == "bass.music"
    assert fish.tags == (("dept:fishing",) if fish.sense_id == "bass.fish" else ())
    for result in (fish, music):
        assert sum(c.probability for c in result.candidates) == pytest.approx(1.0)
        assert result.margin == pytest.approx(
            result.candidates[0].probability - result.candidates[1].probability
        )


def test_one_sense_term_has_full_confidence_and_a_rationale(tagged):
    lantern = tagged[0].occurrences[2]
    assert (lantern.status, lantern.sense_id, lantern.confidence) == ("assigned", "lantern.lamp",
                                                                      1.0)
    words = [w.word for w in lantern.rationale.attention]
    assert words and "lantern" not in words and "😀" not in words
    assert lantern.rationale.nearest_evidence.sense_id == "lantern.lamp"
    assert lantern.rationale.erasure is None


def test_attention_words_exclude_term_and_punctuation_and_sum_to_one(tagged, disambiguator):
    fish = tagged[0].occurrences[0]
    for words in (fish.rationale.attention, fish.rationale.rollout):
        assert all(w.word not in {"bass", ".", "!", "[CLS]", "[SEP]"} for w in words)
        text = "We caught a huge bass in the lake. Then the bass player tuned his guitar!"
        assert all(text[w.start : w.end] == w.word for w in words)
    (encoding,) = disambiguator.encoder.encode_spans_detailed(
        [("We caught a huge bass in the lake.", 17, 21)]
    )
    from service.engine.rationale import word_weights

    assert sum(w.weight for w in word_weights(encoding.window.attention, encoding)) == (
        pytest.approx(1.0)
    )


def test_review_occurrences_get_an_erasure_rationale_when_asked(encoder, bass_inventory):
    strict = InventorySpec(
        bass_inventory.name,
        bass_inventory.version,
        bass_inventory.terms,
        InventorySettings(review_threshold=0.999, abstain_threshold=-1.0),
    )
    document = Document.from_text("d", "The bass was huge.")
    (plain,) = list(Disambiguator(encoder, strict).tag([document]))
    assert plain.occurrences[0].status == "review"
    assert plain.occurrences[0].rationale.to_json()["erasure"] is None  # costly: only on request
    disambiguator = Disambiguator(encoder, strict, erasure_for=frozenset({"review"}))
    (result,) = list(disambiguator.tag([document]))
    (bass,) = result.occurrences
    assert bass.status == "review"
    erasure = bass.rationale.to_json()["erasure"]
    assert erasure["method"] == "representation-erasure"
    assert {w["word"] for w in erasure["words"]} <= {"The", "was", "huge"}


def test_erasure_drop_is_the_similarity_lost_by_masking(encoder, disambiguator):
    # Representation erasure (Li, Monroe & Jurafsky 2016), checked by masking one word by hand.
    text = "He landed a huge bass off the dock."
    (encoding,) = encoder.encode_spans_detailed([(text, 17, 21)])
    prototype = disambiguator.prototypes.matrix("bass")[0]
    drops = {d.word: d.drop for d in erasure_drops(encoder, encoding, prototype)}
    dock = next(w for w in context_words(encoding) if w.word == "dock")
    masked = text[: dock.start] + "[MASK]" + text[dock.end :]
    (by_hand,) = encoder.encode_spans([(masked, 17, 21)])
    expected = float(encoding.vector @ prototype - by_hand @ prototype)
    assert drops["dock"] == pytest.approx(expected, abs=1e-4)


def test_classify_spans_matches_tagging(disambiguator):
    text = "We caught a huge bass in the lake."
    (span_result,) = disambiguator.classify_spans([SpanQuery(text, 17, 21, "bass")])
    (doc_result,) = list(disambiguator.tag([Document.from_text("x", text)], rationale=False))
    assert span_result.sense_id == doc_result.occurrences[0].sense_id
    assert span_result.confidence == pytest.approx(doc_result.occurrences[0].confidence, abs=1e-5)
    assert span_result.rationale is None
    with pytest.raises(UnknownTerm):
        disambiguator.classify_spans([SpanQuery(text, 17, 21, "pike")])
    with pytest.raises(ValueError):
        disambiguator.classify_spans([SpanQuery(text, 17, 99, "bass")])


def test_document_over_the_size_limit_is_a_clear_error(disambiguator):
    big = Document.from_text("big", "bass " * 2_000)
    with pytest.raises(DocumentTooLarge) as caught:
        list(disambiguator.tag([big]))
    assert caught.value.doc_id == "big" and caught.value.limit == 5_000
    assert "5000" in str(caught.value)


def test_term_without_senses_and_duplicate_sense_ids_are_refused(encoder):
    with pytest.raises(InventoryError, match="no senses"):
        Disambiguator(encoder, InventorySpec("x", 1, (TermSpec("bass", ()),)))
    twice = SenseSpec("same", "a gloss")
    with pytest.raises(InventoryError, match="used twice"):
        Disambiguator(
            encoder, InventorySpec("x", 1, (TermSpec("a", (twice,)), TermSpec("b", (twice,))))
        )


def test_tag_streams_its_input_in_small_groups(encoder, bass_inventory):
    disambiguator = Disambiguator(encoder, bass_inventory, group_size=2)
    pulled = []

    def documents():
        for number in range(100):
            pulled.append(number)
            yield Document.from_text(f"d{number}", "a bass")

    stream = disambiguator.tag(documents(), rationale=False)
    first = next(stream)
    assert first.document_id == "d0"
    assert len(pulled) == 2


def test_evidence_changes_decisions(encoder, bass_inventory):
    text = "The bass was on the counter all morning."
    plain = Disambiguator(encoder, bass_inventory, consistency_weight=0.0)
    before = plain.classify_spans([SpanQuery(text, 4, 8, "bass")])[0]
    other = "bass.music" if before.candidates[0].sense_id == "bass.fish" else "bass.fish"
    # evidence weight n / (n + k), k = 16: twenty labels outweigh the definition
    labels = [Evidence(i, "bass", other, text, 4, 8) for i in range(1, 21)]
    taught = Disambiguator(encoder, bass_inventory, labels, consistency_weight=0.0)
    after = taught.classify_spans([SpanQuery(text, 4, 8, "bass")])[0]
    assert after.candidates[0].sense_id == other
    was = {c.sense_id: c.similarity for c in before.candidates}[other]
    assert after.candidates[0].similarity > was + 0.1


class RecordingEncoder:
    """The session encoder, recording which of its methods the engine calls."""

    def __init__(self, encoder) -> None:
        self.encoder = encoder
        self.model_id = encoder.model_id
        self.dimension = encoder.dimension
        self.calls: list[str] = []

    def __getattr__(self, name):
        method = getattr(self.encoder, name)
        if not callable(method):
            return method

        def recorded(*args, **kwargs):
            self.calls.append(name)
            return method(*args, **kwargs)

        return recorded


def with_sentence_weight(inventory: InventorySpec, weight: float) -> InventorySpec:
    return replace(inventory, settings=replace(inventory.settings, sentence_weight=weight))


SENTENCE_QUERIES = [
    SpanQuery("We caught a huge bass in the lake.", 17, 21, "bass", "a"),
    SpanQuery("The bass player tuned his guitar before the show.", 4, 8, "bass", "b"),
    SpanQuery("A bass, a cooler and two rods went into the boat.", 2, 6, "bass", "c"),
]


def test_sentence_weight_zero_reads_and_scores_the_token_channel_alone(encoder, bass_inventory):
    recording = RecordingEncoder(encoder)
    engine = Disambiguator(recording, with_sentence_weight(bass_inventory, 0.0))
    results = engine.classify_spans(SENTENCE_QUERIES)
    assert not {"encode_spans_with_windows", "encode_gloss_sentences"} & set(recording.calls)
    book, trust = engine.prototypes, engine.trust
    rows = engine.similarities(SENTENCE_QUERIES, encoder.encode_spans(
        [(q.text, q.start, q.end) for q in SENTENCE_QUERIES]))
    for result, row in zip(results, rows, strict=True):
        expected = softmax(row - book.penalty("bass"), trust.temperature)
        got = {c.sense_id: c.probability for c in result.candidates}
        assert [got[s] for s in book.senses("bass")] == pytest.approx(expected.tolist(), abs=0)


def test_sentence_channel_is_read_on_every_scoring_path(encoder, bass_inventory):
    spec = with_sentence_weight(bass_inventory, 1.0)
    engine = Disambiguator(encoder, spec, consistency_weight=0.0)
    plain = Disambiguator(encoder, with_sentence_weight(bass_inventory, 0.0),
                          consistency_weight=0.0)
    by_spans = engine.classify_spans(SENTENCE_QUERIES)
    triples = [(q.text, q.start, q.end) for q in SENTENCE_QUERIES]
    vectors, sentences = encoder.encode_spans_with_windows(triples)
    by_vectors = engine.classify_vectors(SENTENCE_QUERIES, vectors, sentences)
    with pytest.raises(ValueError, match="sentence"):
        engine.classify_vectors(SENTENCE_QUERIES, vectors)
    tagged = [
        document.occurrences[0]
        for document in engine.tag(
            [Document.from_text(q.document_id, q.text) for q in SENTENCE_QUERIES],
            rationale=True,
        )
    ]
    for span, vector, document in zip(by_spans, by_vectors, tagged, strict=True):
        assert span.confidence == pytest.approx(vector.confidence, abs=1e-5)
        assert span.confidence == pytest.approx(document.confidence, abs=1e-5)
    # The channel changes the scores: its weight times the window's cosine to each
    # sense's sentence prototype (same similarities, other probabilities).
    base = plain.classify_spans(SENTENCE_QUERIES)
    for a, b in zip(base, by_spans, strict=True):
        cosines = {c.sense_id: c.similarity for c in a.candidates}
        assert {c.sense_id: c.similarity for c in b.candidates} == pytest.approx(cosines)
    assert any(
        abs(a.confidence - b.confidence) > 1e-4 for a, b in zip(base, by_spans, strict=True)
    )


def test_prototypes_of_another_sentence_weight_are_refused(encoder, bass_inventory):
    book = Disambiguator(encoder, with_sentence_weight(bass_inventory, 0.0)).prototypes
    with pytest.raises(InventoryError, match="sentence weight"):
        Disambiguator(encoder, with_sentence_weight(bass_inventory, 1.0), prototypes=book)
