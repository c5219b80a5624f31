"""Sense prototypes: blending definition and evidence, incremental updates, caching."""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from dataclasses import replace

import numpy as np
import pytest

from service.engine.errors import InventoryError
from service.engine.prototypes import PrototypeBook, PrototypeCache, blend, hub_penalty
from service.engine.types import Evidence, InventorySettings, InventorySpec, SenseSpec, TermSpec


class CountingEncoder:
    """Deterministic vectors from a text hash; records what it was asked to encode."""

    model_id = "counting-encoder"
    dimension = 8

    def __init__(self) -> None:
        self.spans: list[tuple[str, int, int]] = []
        self.glosses: list[tuple[str, str, Sequence[str]]] = []
        self.gloss_sentences: list[tuple[str, str, Sequence[str]]] = []

    @staticmethod
    def _vector(key: str) -> np.ndarray:
        seed = int(hashlib.sha256(key.encode()).hexdigest()[:8], 16)
        vector = np.random.default_rng(seed).normal(size=8)
        return (vector / np.linalg.norm(vector)).astype(np.float32)

    def encode_spans(self, spans):
        self.spans.extend(spans)
        return np.stack([self._vector(f"{t}|{s}|{e}") for t, s, e in spans])

    def encode_glosses(self, glosses):
        self.glosses.extend(glosses)
        return np.stack([self._vector(f"{t}|{g}") for t, g, _ in glosses])

    def encode_spans_with_windows(self, spans):
        windows = np.stack([self._vector(f"window|{t}") for t, _, _ in spans])
        return self.encode_spans(spans), windows

    def encode_gloss_sentences(self, glosses):
        self.gloss_sentences.extend(glosses)
        return np.stack([self._vector(f"sentence|{t}|{g}") for t, g, _ in glosses])


INVENTORY = InventorySpec(
    name="tackle",
    version=2,
    terms=(
        TermSpec(
            "bass",
            (
                SenseSpec("bass.fish", "a fish", ("He landed a bass.", "No term here.")),
                SenseSpec("bass.music", "a low part", ("She plays basses.",)),
            ),
        ),
        TermSpec("lantern", (SenseSpec("lantern.lamp", "a lamp"),)),
    ),
)


def evidence(number: int, sense: str = "bass.fish") -> Evidence:
    text = f"Sentence {number} about a bass."
    start = text.index("bass")
    return Evidence(number, "bass", sense, text, start, start + 4)


def test_blend_weights_evidence_by_n_over_n_plus_k():
    definition = np.array([1.0, 0.0])
    evidence_mean = np.array([0.0, 1.0])
    for n, k in [(1, 4.0), (4, 4.0), (12, 4.0), (3, 1.0)]:
        w = n / (n + k)
        expected = np.array([1 - w, w]) / np.hypot(1 - w, w)
        np.testing.assert_allclose(blend(definition, evidence_mean, n, k), expected)
    np.testing.assert_allclose(blend(definition, None, 0, 4.0), definition)
    np.testing.assert_allclose(blend(None, evidence_mean * 3, 5, 4.0), evidence_mean)


def test_definitions_use_gloss_and_examples_that_contain_the_term():
    encoder = CountingEncoder()
    book = PrototypeBook.build(encoder, INVENTORY)
    assert [g[1] for g in encoder.glosses] == ["a fish", "a low part", "a lamp"]
    # "No term here." has no occurrence of bass; "basses" is found as an inflection.
    assert [(t, t[s:e]) for t, s, e in encoder.spans] == [
        ("He landed a bass.", "bass"),
        ("She plays basses.", "basses"),
    ]
    assert book.counts("bass.fish") == (2, 0)
    assert book.counts("lantern.lamp") == (1, 0)


def test_adding_evidence_encodes_only_new_items_and_matches_a_full_build():
    encoder = CountingEncoder()
    incremental = PrototypeBook.build(encoder, INVENTORY)
    first = [evidence(1), evidence(2, "bass.music")]
    second = [*first, evidence(3)]
    assert incremental.add_evidence(first, encoder=encoder) == 2
    encoder.spans.clear()
    assert incremental.add_evidence(second, encoder=encoder) == 1
    assert [text for text, _, _ in encoder.spans] == [second[2].text]

    full = PrototypeBook.build(CountingEncoder(), INVENTORY, second)
    np.testing.assert_allclose(incremental.matrix("bass"), full.matrix("bass"), atol=1e-6)
    assert incremental.counts("bass.fish") == (2, 2)


def test_evidence_moves_the_prototype_towards_the_labels():
    encoder = CountingEncoder()
    book = PrototypeBook.build(encoder, INVENTORY)
    target = encoder._vector("target")
    before = float(book.matrix("bass")[0] @ target)
    items = [evidence(i) for i in range(10)]
    book.add_evidence(items, vectors=np.tile(target, (10, 1)), encoder=encoder)
    after = float(book.matrix("bass")[0] @ target)
    assert after > before
    # The evidence weighs n/(n+k) of the blend, n=10 and k the book's prior.
    k = book.evidence_prior
    definition = book._accumulators["bass.fish"].definition_sum
    definition = definition / np.linalg.norm(definition)
    expected = (k / (10 + k)) * definition + (10 / (10 + k)) * target
    expected /= np.linalg.norm(expected)
    np.testing.assert_allclose(book.matrix("bass")[0], expected, atol=1e-6)


def test_precomputed_vectors_are_used_without_encoding():
    encoder = CountingEncoder()
    book = PrototypeBook.build(encoder, INVENTORY)
    encoder.spans.clear()
    vectors = np.stack([encoder._vector("a"), encoder._vector("b")])
    book.add_evidence([evidence(1), evidence(2)], vectors=vectors, sentence_vectors=vectors)
    assert encoder.spans == []
    assert book.counts("bass.fish") == (2, 2)


def test_evidence_for_an_unknown_sense_is_refused_or_skipped():
    encoder = CountingEncoder()
    book = PrototypeBook.build(encoder, INVENTORY)
    stray = Evidence(9, "bass", "bass.removed", "a bass", 2, 6)
    with pytest.raises(InventoryError, match=r"bass\.removed"):
        book.add_evidence([stray], encoder=encoder)
    assert book.add_evidence([stray, evidence(1)], encoder=encoder, skip_unknown=True) == 1


def test_term_without_senses_is_an_inventory_error():
    broken = InventorySpec("broken", 1, (TermSpec("bass", ()),))
    with pytest.raises(InventoryError, match="no senses"):
        PrototypeBook.build(CountingEncoder(), broken)


def test_nearest_item_names_its_kind_and_sense():
    encoder = CountingEncoder()
    book = PrototypeBook.build(encoder, INVENTORY, [evidence(1, "bass.music")])
    probe = encoder._vector(f"{evidence(1).text}|{evidence(1).start}|{evidence(1).end}")
    nearest = book.nearest("bass", probe)
    assert (nearest.kind, nearest.sense_id, nearest.text) == (
        "evidence",
        "bass.music",
        evidence(1).text,
    )
    assert nearest.similarity == pytest.approx(1.0, abs=1e-5)
    gloss = book.nearest("lantern", encoder._vector("lantern|a lamp"))
    assert (gloss.kind, gloss.text) == ("gloss", "a lamp")


def test_cache_keys_on_inventory_version_and_model():
    encoder = CountingEncoder()
    cache = PrototypeCache(max_books=2)
    book = cache.get_or_build(encoder, INVENTORY)
    assert book.key == ("tackle", 2, "counting-encoder")
    assert cache.get_or_build(encoder, INVENTORY) is book
    newer = InventorySpec("tackle", 3, INVENTORY.terms)
    assert cache.get_or_build(encoder, newer) is not book
    cache.get_or_build(encoder, InventorySpec("other", 1, INVENTORY.terms))
    assert cache.get(INVENTORY, "counting-encoder") is None  # least recently used went first
    same = cache.get_or_build(encoder, newer, [evidence(1)])
    assert same.counts("bass.fish")[1] == 1


def test_sense_prior_is_uniform_without_evidence_and_additively_smoothed_with_it():
    encoder = CountingEncoder()
    book = PrototypeBook.build(encoder, INVENTORY)
    np.testing.assert_allclose(book.log_prior("bass"), np.log([0.5, 0.5]))
    book.add_evidence([evidence(1), evidence(2), evidence(3, "bass.music")], encoder=encoder)
    # Laplace's add-one rule: (2 + 1) / (3 + 2) and (1 + 1) / (3 + 2).
    np.testing.assert_allclose(book.log_prior("bass", smoothing=1.0), np.log([3 / 5, 2 / 5]))
    # The default adds 4: (2 + 4) / (3 + 8) and (1 + 4) / (3 + 8).
    np.testing.assert_allclose(book.log_prior("bass"), np.log([6 / 11, 5 / 11]))
    np.testing.assert_allclose(book.log_prior("lantern"), [0.0])
    with pytest.raises(ValueError):
        book.log_prior("bass", smoothing=0.0)


# -- the sentence channel ---------------------------------------------------------------


def unit(vector: np.ndarray) -> np.ndarray:
    return vector / np.linalg.norm(vector)


def with_weight(weight: float) -> InventorySpec:
    return replace(INVENTORY, settings=InventorySettings(sentence_weight=weight))


def test_weight_zero_encodes_no_sentence_vectors_and_scores_the_token_channel_alone():
    encoder = CountingEncoder()
    book = PrototypeBook.build(encoder, with_weight(0.0), [evidence(1), evidence(2, "bass.music")])
    assert not book.sentences and encoder.gloss_sentences == []
    sims = book.similarities("bass", encoder._vector("probe"))
    neighbourhood, _, _ = book.contextual_items("bass")
    expected = sims - book.hub_weight * hub_penalty(book.matrix("bass"), neighbourhood, 3)
    assert np.array_equal(book.scores("bass", sims), expected)
    assert np.array_equal(book.scores("bass", sims, np.ones((1, 8))), expected)  # ignored
    assert not book.sentence_matrix("bass").any()


def test_sentence_prototype_is_the_blend_of_gloss_examples_and_evidence_windows():
    encoder = CountingEncoder()
    book = PrototypeBook.build(encoder, with_weight(1.0))
    gloss = encoder._vector("sentence|bass|a fish")
    example = encoder._vector("window|He landed a bass.")  # the one example with the term
    definition = unit(gloss.astype(np.float64) + example)
    np.testing.assert_allclose(book.sentence_matrix("bass")[0], definition, atol=1e-6)
    items = [evidence(i) for i in range(1, 4)]
    book.add_evidence(items, encoder=encoder)
    windows = sum(encoder._vector(f"window|{item.text}").astype(np.float64) for item in items)
    w = 3 / (3 + book.evidence_prior)  # the token prototypes' n / (n + k)
    expected = unit((1 - w) * definition + w * unit(windows))
    np.testing.assert_allclose(book.sentence_matrix("bass")[0], expected, atol=1e-6)


def test_sentence_channel_adds_the_weighted_window_cosine_to_the_scores():
    encoder = CountingEncoder()
    items = [evidence(1), evidence(2, "bass.music")]
    weighted = PrototypeBook.build(encoder, with_weight(2.0), items)
    plain = PrototypeBook.build(CountingEncoder(), with_weight(0.0), items)
    probe, window = encoder._vector("probe"), encoder._vector("a window")
    sims = weighted.similarities("bass", probe)
    np.testing.assert_allclose(
        weighted.scores("bass", sims, window[None, :]) - plain.scores("bass", sims),
        2.0 * window[None, :] @ weighted.sentence_matrix("bass").T,
        atol=1e-6,
    )
    with pytest.raises(ValueError, match="sentence"):
        weighted.scores("bass", sims)


def test_sentence_evidence_is_incremental_and_matches_a_full_build():
    encoder = CountingEncoder()
    incremental = PrototypeBook.build(encoder, with_weight(1.0))
    first = [evidence(1), evidence(2, "bass.music")]
    incremental.add_evidence(first, encoder=encoder)
    encoder.spans.clear()
    incremental.add_evidence([*first, evidence(3)], encoder=encoder)
    assert [text for text, _, _ in encoder.spans] == [evidence(3).text]
    full = PrototypeBook.build(CountingEncoder(), with_weight(1.0), [*first, evidence(3)])
    np.testing.assert_allclose(
        incremental.sentence_matrix("bass"), full.sentence_matrix("bass"), atol=1e-6
    )


def test_precomputed_sentence_vectors_are_used_and_missing_ones_encoded():
    encoder = CountingEncoder()
    book = PrototypeBook.build(encoder, with_weight(1.0))
    encoder.spans.clear()
    vectors = np.stack([encoder._vector("a"), encoder._vector("b")])
    book.add_evidence([evidence(1), evidence(2)], vectors=vectors, sentence_vectors=vectors)
    assert encoder.spans == []
    book.add_evidence([evidence(3)], vectors=vectors[:1], encoder=encoder)  # window encoded
    assert [text for text, _, _ in encoder.spans] == [evidence(3).text]
    with pytest.raises(ValueError, match="encoder"):
        book.add_evidence([evidence(4)], vectors=vectors[:1])


def test_held_out_rows_score_each_item_as_a_book_built_without_it_would():
    """Cross-fitting covers both channels: an evidence item's row equals the scores a
    book that never saw it gives to its vectors (prototypes and hub penalty alike)."""
    encoder = CountingEncoder()
    items = [evidence(1), evidence(2), evidence(3, "bass.music"), evidence(4, "bass.music")]
    book = PrototypeBook.build(encoder, with_weight(1.5), items)
    rows = [row for row in book.held_out_rows() if row.term == "bass" and row.kind == "evidence"]
    assert len(rows) == len(items)
    for held, row in zip(items, rows, strict=True):
        rest = [item for item in items if item is not held]
        without = PrototypeBook.build(CountingEncoder(), with_weight(1.5), rest)
        vector = encoder._vector(f"{held.text}|{held.start}|{held.end}")
        window = encoder._vector(f"window|{held.text}")
        sims = without.similarities("bass", vector)
        np.testing.assert_allclose(row.similarities, sims[0], atol=1e-6)
        np.testing.assert_allclose(
            row.scores, without.scores("bass", sims, window[None, :])[0], atol=1e-6
        )
