"""Per-layer vectors, for measuring which hidden layers the engine should pool.

The engine pools one fixed set of layers (`DEFAULT_LAYERS`); choosing that set
needs every layer's vector of the same spans. This reads them through the
engine's own windowing and tokenisation, so the measured vectors are the ones
the engine would pool.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import torch

from service.engine.encoder import ContextEncoder


def encode_spans_by_layer(
    encoder: ContextEncoder, spans: Sequence[tuple[str, int, int]]
) -> np.ndarray:
    """(spans, layers + 1, dim) unnormalised mean sub-word vectors of every hidden layer
    (index 0 = embeddings)."""
    vectors = np.zeros((len(spans), encoder.num_layers + 1, encoder.dimension), np.float32)
    if not spans:
        return vectors
    windows, placed = encoder.plan(spans)
    spans_of: dict[int, list[int]] = {}
    for span_id, (window, _start, _end) in enumerate(placed):
        spans_of.setdefault(window, []).append(span_id)
    texts = [text for text, _ in windows]
    for batch in encoder._batches(texts):
        encoding, output = encoder._forward([texts[i] for i in batch], attentions=False)
        mask = encoding["attention_mask"].numpy().astype(bool)
        for row, window_id in enumerate(batch):
            length = int(mask[row].sum())
            offsets = encoding["offset_mapping"][row, :length].numpy()
            special = encoding["special_tokens_mask"][row, :length].numpy().astype(bool)
            for span_id in spans_of.get(window_id, ()):
                _, start, end = placed[span_id]
                tokens = encoder._term_tokens(offsets, special, start, end)
                if len(tokens) == 0:
                    tokens = np.flatnonzero(~special)
                stacked = torch.stack(
                    [layer[row, tokens].mean(dim=0) for layer in output.hidden_states]
                )
                vectors[span_id] = stacked.numpy()
    return vectors


def encode_texts_by_layer(encoder: ContextEncoder, texts: Sequence[str]) -> np.ndarray:
    """(texts, layers + 1, dim) unnormalised mean of each text's non-special tokens."""
    vectors = np.zeros((len(texts), encoder.num_layers + 1, encoder.dimension), np.float32)
    for batch in encoder._batches(texts):
        encoding, output = encoder._forward([texts[i] for i in batch], attentions=False)
        keep = encoding["attention_mask"].bool() & ~encoding["special_tokens_mask"].bool()
        weights = keep.unsqueeze(-1).float()
        counts = weights.sum(dim=1).clamp(min=1.0)
        for layer, states in enumerate(output.hidden_states):
            vectors[batch, layer] = ((states * weights).sum(dim=1) / counts).numpy()
    return vectors
