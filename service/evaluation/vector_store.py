"""An encoder wrapper that remembers every span and gloss vector it computed, on disk.

The WordNet benchmark builds the shipped engine many times over (held-out
SemCor, SemEval-2013, development splits), and each build encodes the glosses
and example sentences of thousands of WordNet senses. Vectors are stored per
item (keyed by the exact span or gloss input and the encoder's model id), so a
second build, or a build over an overlapping set of lemmas, encodes only what
it has not seen. The wrapper answers the engine's `SpanEncoder` protocol and
changes no vector: it is a cache, not a model.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np


def _item_key(kind: str, parts: Sequence[object]) -> str:
    text = json.dumps([kind, *parts], ensure_ascii=False, separators=(",", ":"))
    return hashlib.sha1(text.encode("utf-8")).hexdigest()


class VectorStore:
    """item key -> vector rows of one model, kept in memory and saved as one .npz file."""

    def __init__(self, path: Path, dimension: int) -> None:
        self.path = path
        self.dimension = dimension
        self.rows: dict[str, np.ndarray] = {}
        self.dirty = False
        if path.is_file():
            try:
                with np.load(path, allow_pickle=False) as data:
                    keys, vectors = data["keys"], data["vectors"]
                self.rows = dict(zip(keys.tolist(), vectors, strict=True))
            except (OSError, ValueError, KeyError):
                self.rows = {}

    def lookup(
        self, keys: Sequence[str], compute: Callable[[list[int]], np.ndarray]
    ) -> np.ndarray:
        """Rows for `keys`; `compute(missing positions)` encodes those not stored yet."""
        missing = [i for i, key in enumerate(keys) if key not in self.rows]
        if missing:
            fresh = np.asarray(compute(missing), np.float32)
            for i, vector in zip(missing, fresh, strict=True):
                self.rows[keys[i]] = vector
            self.dirty = True
        if not keys:
            return np.zeros((0, self.dimension), np.float32)
        return np.stack([self.rows[key] for key in keys]).astype(np.float32)

    def save(self) -> None:
        if not self.dirty:
            return
        self.path.parent.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=self.path.parent, suffix=".npz.part")
        try:
            with os.fdopen(handle, "wb") as stream:
                keys = np.array(list(self.rows), dtype=str)
                np.savez(stream, keys=keys, vectors=np.stack(list(self.rows.values())))
            os.replace(temporary, self.path)
        finally:
            if os.path.exists(temporary):
                os.unlink(temporary)
        self.dirty = False


class CachingEncoder:
    """Delegates to an encoder (ContextEncoder or anything with its methods), caching
    `encode_spans`, `encode_glosses` and the sentence channel's window and gloss
    sentence vectors (`encode_spans_with_windows`, `encode_gloss_sentences`) per item."""

    def __init__(self, encoder: Any, root: Path) -> None:
        self.encoder = encoder
        self.model_id: str = encoder.model_id
        self.dimension: int = encoder.dimension
        name = hashlib.sha1(self.model_id.encode()).hexdigest()[:16]
        self.store = VectorStore(root / "items" / f"{name}.npz", self.dimension)

    def encode_spans(self, spans: Sequence[tuple[str, int, int]]) -> np.ndarray:
        keys = [_item_key("span", span) for span in spans]
        return self.store.lookup(
            keys, lambda missing: self.encoder.encode_spans([spans[i] for i in missing]))

    def encode_glosses(self, glosses: Sequence[tuple[str, str, Sequence[str]]]) -> np.ndarray:
        texts = [self.encoder.gloss_text(t, g, tuple(e)) for t, g, e in glosses]
        keys = [_item_key("text", (text,)) for text in texts]
        return self.store.lookup(
            keys, lambda missing: self.encoder.encode_texts([texts[i] for i in missing]))

    def encode_spans_with_windows(
        self, spans: Sequence[tuple[str, int, int]]
    ) -> tuple[np.ndarray, np.ndarray]:
        span_keys = [_item_key("span", span) for span in spans]
        window_keys = [_item_key("window", span) for span in spans]
        rows = self.store.rows
        missing = [i for i in range(len(spans))
                   if span_keys[i] not in rows or window_keys[i] not in rows]
        if missing:
            vectors, sentences = self.encoder.encode_spans_with_windows(
                [spans[i] for i in missing])
            for i, vector, sentence in zip(missing, vectors, sentences, strict=True):
                rows[span_keys[i]] = np.asarray(vector, np.float32)
                rows[window_keys[i]] = np.asarray(sentence, np.float32)
            self.store.dirty = True
        if not spans:
            empty = np.zeros((0, self.dimension), np.float32)
            return empty, empty.copy()
        return (np.stack([rows[key] for key in span_keys]).astype(np.float32),
                np.stack([rows[key] for key in window_keys]).astype(np.float32))

    def encode_gloss_sentences(
        self, glosses: Sequence[tuple[str, str, Sequence[str]]]
    ) -> np.ndarray:
        texts = [self.encoder.gloss_text(t, g, tuple(e)) for t, g, e in glosses]
        keys = [_item_key("sentence", (text,)) for text in texts]
        return self.store.lookup(
            keys, lambda missing: self.encoder.encode_sentences([texts[i] for i in missing]))

    def gloss_text(self, term: str, gloss: str, examples: Sequence[str] = ()) -> str:
        return str(self.encoder.gloss_text(term, gloss, examples))

    def save(self) -> None:
        self.store.save()
