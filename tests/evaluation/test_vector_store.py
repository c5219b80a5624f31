"""The caching encoder: every vector kind is stored per item and never changed."""

from __future__ import annotations

import hashlib

import numpy as np

from service.evaluation.vector_store import CachingEncoder


class CountingEncoder:
    """Deterministic vectors from a text hash; counts the items it encodes per method."""

    model_id = "counting"
    dimension = 4

    def __init__(self) -> None:
        self.encoded: dict[str, int] = {}

    def _count(self, method: str, items: int) -> None:
        self.encoded[method] = self.encoded.get(method, 0) + items

    @staticmethod
    def _vector(key: str) -> np.ndarray:
        seed = int(hashlib.sha256(key.encode()).hexdigest()[:8], 16)
        vector = np.random.default_rng(seed).normal(size=4)
        return (vector / np.linalg.norm(vector)).astype(np.float32)

    def encode_spans(self, spans):
        self._count("spans", len(spans))
        return np.stack([self._vector(f"span|{s}") for s in spans])

    def encode_spans_with_windows(self, spans):
        self._count("windows", len(spans))
        return (np.stack([self._vector(f"span|{s}") for s in spans]),
                np.stack([self._vector(f"window|{t}") for t, _, _ in spans]))

    def gloss_text(self, term, gloss, examples=()):
        return f"{term}: {gloss}"

    def encode_texts(self, texts):
        self._count("texts", len(texts))
        return np.stack([self._vector(f"text|{t}") for t in texts])

    def encode_sentences(self, texts):
        self._count("sentences", len(texts))
        return np.stack([self._vector(f"sentence|{t}") for t in texts])


def test_window_and_gloss_sentence_vectors_are_cached_per_item(tmp_path):
    inner = CountingEncoder()
    cached = CachingEncoder(inner, tmp_path)
    spans = [("a bass here", 2, 6), ("the bass there", 4, 8)]
    vectors, windows = cached.encode_spans_with_windows(spans)
    expected = inner.encode_spans_with_windows(spans)
    np.testing.assert_array_equal(vectors, expected[0])
    np.testing.assert_array_equal(windows, expected[1])
    inner.encoded.clear()
    # Known spans come from the store; only the new one is encoded, in both forms.
    more = [spans[1], ("bass again", 0, 4)]
    again_vectors, again_windows = cached.encode_spans_with_windows(more)
    assert inner.encoded == {"windows": 1}
    np.testing.assert_array_equal(again_vectors[0], vectors[1])
    np.testing.assert_array_equal(again_windows[0], windows[1])
    # A span first read through encode_spans still gets its window vector encoded.
    cached.encode_spans([("lone bass", 5, 9)])
    inner.encoded.clear()
    cached.encode_spans_with_windows([("lone bass", 5, 9)])
    assert inner.encoded == {"windows": 1}
    glosses = [("bass", "a fish", ()), ("bass", "a low sound", ())]
    first = cached.encode_gloss_sentences(glosses)
    np.testing.assert_array_equal(first[0], inner._vector("sentence|bass: a fish"))
    inner.encoded.clear()
    np.testing.assert_array_equal(cached.encode_gloss_sentences(glosses[::-1]), first[::-1])
    assert inner.encoded == {}
    cached.save()
    reopened = CachingEncoder(CountingEncoder(), tmp_path)
    np.testing.assert_array_equal(reopened.encode_spans_with_windows(spans)[1], windows)
    assert reopened.encoder.encoded == {}
    empty_vectors, empty_windows = cached.encode_spans_with_windows([])
    assert empty_vectors.shape == empty_windows.shape == (0, 4)
