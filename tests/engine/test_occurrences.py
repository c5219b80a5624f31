"""The occurrence finder: inflections by WordNet's morphy, case rules, overlaps, Unicode offsets."""

from __future__ import annotations

import unicodedata

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.engine.occurrences import OccurrenceFinder, split_pieces
from service.engine.types import Document, InventorySpec, SenseSpec, TermSpec


def _term(term: str, **options) -> TermSpec:
    return TermSpec(term=term, senses=(SenseSpec(f"{term}.1", "a sense"),), **options)


@pytest.fixture(scope="module")
def finder(wordnet) -> OccurrenceFinder:
    inventory = InventorySpec(
        name="finder",
        version=1,
        terms=(
            _term("bass", aliases=("bass guitar",)),
            _term("spring roll"),
            _term("roll"),
            _term("run"),
            _term("mouse", pos="n"),
            _term("Apple", case="exact"),
            _term("café"),
            _term("zorbix"),
            _term("new"),
            _term("e-mail"),
            _term("lantern"),
            _term("axis", pos="n"),
            _term("good", pos="a"),
            _term("wolf", inflect=False),
        ),
    )
    return OccurrenceFinder(inventory, wordnet)


def surfaces(finder: OccurrenceFinder, text: str) -> list[tuple[str, str]]:
    return [(text[s:e], term) for s, e, term in finder.find_in_text(text)]


def test_plural_and_possessive_forms(finder):
    text = "Bass's fins, two basses, the basses' nets, a bass."
    assert surfaces(finder, text) == [
        ("Bass's", "bass"),
        ("basses", "bass"),
        ("basses'", "bass"),
        ("bass", "bass"),
    ]


def test_verb_forms_for_a_term_wordnet_knows_as_a_verb(finder):
    text = "She runs, he ran, they are running; a run."
    assert [s for s, _ in surfaces(finder, text)] == ["runs", "ran", "running", "run"]


def test_irregular_plural_from_wordnet_exception_list(finder):
    # noun.exc lists "mice mouse" (WordNet 3.0); rules alone would never find it.
    assert surfaces(finder, "The mice ate it.") == [("mice", "mouse")]


def test_morphy_gives_every_analysis(finder):
    # "axes" is the plural of both "ax" and "axis" in WordNet's morphy.
    assert surfaces(finder, "Plot both axes.") == [("axes", "axis")]


def test_adjective_comparatives_only_when_pos_is_a(finder):
    # adj.exc maps "better" to "good"; the term is declared an adjective.
    assert surfaces(finder, "a better plan") == [("better", "good")]


def test_no_inflection_when_disabled(finder):
    assert surfaces(finder, "a wolf and two wolves") == [("wolf", "wolf")]


def test_head_unknown_to_wordnet_still_inflects(finder):
    assert surfaces(finder, "Two zorbixes and a zorbix's lid.") == [
        ("zorbixes", "zorbix"),
        ("zorbix's", "zorbix"),
    ]


def test_wordnet_lemma_is_not_read_as_an_inflection_of_another_term(finder):
    # "news" is its own WordNet lemma, not the plural of the term "new".
    assert surfaces(finder, "The news is new.") == [("new", "new")]


def test_multi_word_term_inflects_its_last_word_and_wins_over_shorter(finder):
    text = "Spring rolls and a spring roll, then a roll."
    assert surfaces(finder, text) == [
        ("Spring rolls", "spring roll"),
        ("spring roll", "spring roll"),
        ("roll", "roll"),
    ]


def test_multi_word_term_spans_any_whitespace_but_not_other_characters(finder):
    assert surfaces(finder, "spring\r\n roll") == [("spring\r\n roll", "spring roll")]
    assert surfaces(finder, "spring-roll") == [("roll", "roll")]


def test_alias_maps_to_its_term(finder):
    assert surfaces(finder, "my bass guitar") == [("bass guitar", "bass")]


def test_word_boundaries(finder):
    assert surfaces(finder, "bassoon, rerun, lanterns2, e-mails") == [("e-mails", "e-mail")]


def test_exact_case_rule(finder):
    text = "Apple and apple and APPLE; Apples and apples."
    assert surfaces(finder, text) == [("Apple", "Apple"), ("Apples", "Apple")]


def test_insensitive_case_rule(finder):
    assert [s for s, _ in surfaces(finder, "BASS Bass bass")] == ["BASS", "Bass", "bass"]


def test_nfc_and_nfd_spellings_both_match_with_original_offsets(finder):
    nfd = unicodedata.normalize("NFD", "café")
    text = f"un {nfd} et un café"
    found = finder.find_in_text(text)
    assert [text[s:e] for s, e, _ in found] == [nfd, "café"]
    assert found[0][:2] == (3, 3 + len(nfd))


def test_combining_mark_keeps_a_word_whole(finder):
    # "bass" followed by a combining acute is a different word, not "bass".
    assert surfaces(finder, "bass\u0301 bass") == [("bass", "bass")]
    assert finder.find_in_text("bass\u0301 bass")[0][:2] == (6, 10)


def test_offsets_after_emoji_and_crlf(finder):
    text = "😀👍🏽 lantern\r\n\r\n🎸 bass"
    for start, end, term in finder.find_in_text(text):
        assert text[start:end].casefold() == term
    assert [s for s, _ in surfaces(finder, text)] == ["lantern", "bass"]


def test_empty_text_has_no_occurrences(finder):
    assert finder.find_in_text("") == []
    assert finder.find(Document.from_text("d", "")) == []


def test_index_runs_over_fields_in_order(finder):
    document = Document(
        doc_id="d", fields=(("title", "bass and lantern"), ("text", "A lantern. A bass."))
    )
    found = finder.find(document)
    assert [(o.field, o.surface, o.index) for o in found] == [
        ("title", "bass", 0),
        ("title", "lantern", 1),
        ("text", "lantern", 2),
        ("text", "bass", 3),
    ]


def test_find_restricted_to_some_terms(finder):
    text = "a spring roll"
    assert finder.find_in_text(text, terms=("roll",)) == [(9, 13, "roll")]


def test_pieces_cover_every_non_space_character():
    text = "a\u0301b, c😀\r\nd"
    covered = "".join(p.text for p in split_pieces(text))
    assert covered == "".join(ch for ch in text if not ch.isspace())


# -- properties -----------------------------------------------------------------------------

FRAGMENTS = [
    "bass", "Basses", "bass's", "basses'", "bass guitar", "spring rolls", "Spring", "roll",
    "ran", "running", "lantern", "café", unicodedata.normalize("NFD", "café"), "e\u0301",
    "mice", "Apple", "apple", "news", "zorbixes", "e-mail", "bassoon", "😀", "👍🏽", "\u200d",
    "x", "Q", "42", "_", "'", "’", "-", ",", ".",
]
SEPARATORS = [" ", "  ", "\r\n", "\n", "\t", "", "\u00a0", "\u3000"]

texts = st.lists(
    st.tuples(st.sampled_from(FRAGMENTS), st.sampled_from(SEPARATORS)), max_size=30
).map(lambda parts: "".join(fragment + separator for fragment, separator in parts))
any_text = st.one_of(texts, st.text(max_size=80))


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(any_text)
def test_offsets_slice_back_to_surface_without_overlap(finder, text):
    document = Document.from_text("d", text)
    previous_end = 0
    for number, occurrence in enumerate(finder.find(document)):
        assert occurrence.index == number
        assert text[occurrence.start : occurrence.end] == occurrence.surface
        assert occurrence.surface.strip() == occurrence.surface != ""
        assert occurrence.start >= previous_end
        previous_end = occurrence.end


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(texts, texts)
def test_a_planted_occurrence_is_found_where_it_was_put(finder, left, right):
    text = f"{left} lanterns {right}"
    start = len(left) + 1
    assert (start, start + len("lanterns"), "lantern") in finder.find_in_text(text)


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(texts)
def test_nfc_and_nfd_texts_give_the_same_occurrences(finder, text):
    composed = unicodedata.normalize("NFC", text)
    decomposed = unicodedata.normalize("NFD", text)
    found_c = [(text_c, t) for text_c, t in surfaces(finder, composed)]
    found_d = [(unicodedata.normalize("NFC", s), t) for s, t in surfaces(finder, decomposed)]
    assert found_c == found_d
