"""The lab's per-layer vectors are the ones the engine pools (so layer choices measured
in research/ carry over to the shipped engine)."""

from __future__ import annotations

import numpy as np

from research.layers import encode_spans_by_layer, encode_texts_by_layer


def test_last_layer_normalised_equals_the_engines_span_vector(encoder) -> None:  # type: ignore[no-untyped-def]
    spans = [("We caught a bass in the lake at dawn.", 12, 16), ("Turn the bass down.", 9, 13)]
    by_layer = encode_spans_by_layer(encoder, spans)
    assert by_layer.shape == (2, encoder.num_layers + 1, encoder.dimension)
    assert encoder.layers == (encoder.num_layers,)
    last = by_layer[:, encoder.num_layers]
    last = last / np.linalg.norm(last, axis=1, keepdims=True)
    np.testing.assert_allclose(last, encoder.encode_spans(spans), atol=1e-5)


def test_text_layers_match_the_engines_text_vector(encoder) -> None:  # type: ignore[no-untyped-def]
    texts = ["bass: a freshwater fish", "bass: the lowest part in music"]
    last = encode_texts_by_layer(encoder, texts)[:, encoder.num_layers]
    last = last / np.linalg.norm(last, axis=1, keepdims=True)
    np.testing.assert_allclose(last, encoder.encode_texts(texts), atol=1e-5)
