"""Rationale helpers: which tokens count as context words, and agreement between rankings."""

from __future__ import annotations

import numpy as np
import pytest

from service.engine.rationale import (
    WordDrop,
    WordWeight,
    context_words,
    rollout_words,
    top_word_agreement,
    word_weights,
)

TEXT = 'The "bass" player, 😀 tuned his guitar.'


@pytest.fixture(scope="module")
def encoding(encoder):
    start = TEXT.index("bass")
    (result,) = encoder.encode_spans_detailed([(TEXT, start, start + 4)])
    return result


def test_context_words_leave_out_special_tokens_punctuation_and_the_term(encoding):
    words = [w.word for w in context_words(encoding)]
    assert words == ["The", "player", "tuned", "his", "guitar"]
    for word in context_words(encoding):
        assert TEXT[word.start : word.end] == word.word


def test_word_weights_sum_sub_word_attention_and_renormalise(encoding):
    size = len(encoding.window.input_ids)
    uniform = np.full((size, size), 1.0 / size)
    weights = word_weights(uniform, encoding)
    assert sum(w.weight for w in weights) == pytest.approx(1.0)
    # Under uniform attention each word weighs in proportion to its sub-word count.
    counts = {w.word: len(w.positions) for w in context_words(encoding)}
    total = sum(counts.values())
    for weight in weights:
        assert weight.weight == pytest.approx(counts[weight.word] / total)


def test_rollout_words_are_ranked(encoding):
    ranked = rollout_words(encoding, top_k=3)
    assert len(ranked) == 3
    assert [w.weight for w in ranked] == sorted((w.weight for w in ranked), reverse=True)


def test_top_word_agreement_compares_offsets():
    first = [WordWeight("a", 0, 1, 0.5), WordWeight("b", 2, 3, 0.3), WordWeight("c", 4, 5, 0.2)]
    second = [WordDrop("b", 2, 3, 0.1), WordDrop("x", 6, 7, 0.05), WordDrop("a", 0, 1, 0.01)]
    assert top_word_agreement(first, second, 2) == pytest.approx(0.5)
    assert top_word_agreement(first, second, 3) == pytest.approx(2 / 3)
    assert top_word_agreement([], second, 3) == 0.0
