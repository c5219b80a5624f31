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
    tokenized = encoder._tokenize([text for text, _ in windows])
    all_ids = tokenized["input_ids"]
    for batch in encoder._batches([len(row) for row in all_ids]):
        output = encoder._forward([all_ids[i] for i in batch], attentions=False)
        for row, window_id in enumerate(batch):
            offsets = np.asarray(tokenized["offset_mapping"][window_id], np.int64)
            special = np.asarray(tokenized["special_tokens_mask"][window_id], bool)
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
    tokenized = encoder._tokenize(texts)
    all_ids = tokenized["input_ids"]
    for batch in encoder._batches([len(row) for row in all_ids]):
        output = encoder._forward([all_ids[i] for i in batch], attentions=False)
        width = max(len(all_ids[i]) for i in batch)
        keep = np.zeros((len(batch), width), np.float32)
        for number, i in enumerate(batch):
            special = tokenized["special_tokens_mask"][i]
            keep[number, : len(special)] = 1 - np.asarray(special, np.float32)
        weights = torch.from_numpy(keep).unsqueeze(-1)
        counts = weights.sum(dim=1).clamp(min=1.0)
        for layer, states in enumerate(output.hidden_states):
            vectors[batch, layer] = ((states * weights).sum(dim=1) / counts).numpy()
    return vectors
