"""Why an occurrence got its sense: attention, nearest evidence, and erasure.

Attention: the rows of the term's sub-words in an attention matrix (last layer
averaged over heads, or attention rollout over all layers, Abnar & Zuidema
2020) are averaged, summed from sub-words to words, and renormalised after
dropping special tokens ([CLS] and [SEP] soak up around half of the mass),
punctuation and the term itself. What remains says which context words the
model read the term with.

Erasure (representation erasure, Li, Monroe & Jurafsky 2016): each context
word is masked in turn and the drop in cosine similarity between the term's
vector and the chosen sense's prototype is its importance. It costs one
forward pass per word (batched), so it is computed for occurrences sent to
review, where a curator wants the evidence.
"""

from __future__ import annotations

import unicodedata
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .encoder import ContextEncoder, SpanEncoding
from .prototypes import NearestEvidence

DEFAULT_TOP_WORDS = 5
# Erasure costs one forward pass per word; the words nearest the term carry the
# context (24 nearest gave the agreement figures in docs/measurements.md).
MAX_ERASED_WORDS = 12
ATTENTION_METHOD = "last-layer-head-average"
ROLLOUT_METHOD = "attention-rollout"
ERASURE_METHOD = "representation-erasure"


@dataclass(frozen=True)
class ContextWord:
    """A word of the window other than the term: its token positions and text offsets."""

    word: str
    start: int
    end: int
    positions: tuple[int, ...]


@dataclass(frozen=True)
class WordWeight:
    word: str
    start: int
    end: int
    weight: float

    def to_json(self) -> dict[str, object]:
        return {
            "word": self.word,
            "start": self.start,
            "end": self.end,
            "weight": round(float(self.weight), 4),
        }


@dataclass(frozen=True)
class WordDrop:
    word: str
    start: int
    end: int
    drop: float

    def to_json(self) -> dict[str, object]:
        return {
            "word": self.word,
            "start": self.start,
            "end": self.end,
            "drop": round(float(self.drop), 4),
        }


@dataclass(frozen=True)
class Rationale:
    attention: tuple[WordWeight, ...]
    rollout: tuple[WordWeight, ...]
    nearest_evidence: NearestEvidence | None
    erasure: tuple[WordDrop, ...] | None = None

    def to_json(self) -> dict[str, object]:
        return {
            "attention": {
                "method": ATTENTION_METHOD,
                "words": [w.to_json() for w in self.attention],
            },
            "rollout": {"method": ROLLOUT_METHOD, "words": [w.to_json() for w in self.rollout]},
            "nearest_evidence": self.nearest_evidence.to_json()
            if self.nearest_evidence is not None
            else None,
            "erasure": None
            if self.erasure is None
            else {"method": ERASURE_METHOD, "words": [w.to_json() for w in self.erasure]},
        }


def _is_punctuation(text: str) -> bool:
    """True when every character is punctuation or a symbol (Unicode categories P*, S*)."""
    return all(unicodedata.category(ch)[0] in "PS" for ch in text if not ch.isspace())


def context_words(encoding: SpanEncoding) -> list[ContextWord]:
    """Words of the window other than special tokens, punctuation and the term's tokens."""
    window = encoding.window
    term = set(int(i) for i in encoding.term_tokens)
    groups: dict[int, list[int]] = {}
    for position, word_id in enumerate(window.word_ids):
        if word_id is None or window.special[position]:
            continue
        groups.setdefault(word_id, []).append(position)
    words = []
    for positions in groups.values():
        if term.intersection(positions):
            continue
        start = int(window.offsets[positions[0], 0])
        end = int(window.offsets[positions[-1], 1])
        text = window.text[start - window.text_start : end - window.text_start]
        if not text or _is_punctuation(text):
            continue
        words.append(ContextWord(text, start, end, tuple(positions)))
    return words


def word_weights(
    matrix: np.ndarray, encoding: SpanEncoding, words: Sequence[ContextWord] | None = None
) -> list[WordWeight]:
    """Attention of the term's sub-words (rows of `matrix`, averaged) summed per context word,
    renormalised to 1, heaviest first."""
    words = context_words(encoding) if words is None else words
    if not words:
        return []
    row = matrix[np.asarray(encoding.term_tokens)].mean(axis=0)
    mass = np.array([row[list(word.positions)].sum() for word in words], np.float64)
    total = mass.sum()
    if total <= 0:
        return []
    mass /= total
    order = np.argsort(-mass, kind="stable")
    return [WordWeight(words[i].word, words[i].start, words[i].end, float(mass[i])) for i in order]


def attention_words(encoding: SpanEncoding, top_k: int = DEFAULT_TOP_WORDS) -> list[WordWeight]:
    """Top context words by last-layer, head-averaged attention."""
    if encoding.window.attention is None:
        raise ValueError("the window was encoded without attention")
    return word_weights(encoding.window.attention, encoding)[:top_k]


def rollout_words(encoding: SpanEncoding, top_k: int = DEFAULT_TOP_WORDS) -> list[WordWeight]:
    """Top context words by attention rollout."""
    if encoding.window.rollout is None:
        raise ValueError("the window was encoded without attention")
    return word_weights(encoding.window.rollout, encoding)[:top_k]


def erasure_drops(
    encoder: ContextEncoder,
    encoding: SpanEncoding,
    prototype: np.ndarray,
    max_words: int = MAX_ERASED_WORDS,
) -> list[WordDrop]:
    """Similarity drop to `prototype` when each context word is masked, largest drop first.

    The `max_words` words nearest the term are tried (all of them in a sentence).
    """
    words = context_words(encoding)
    if not words:
        return []
    centre = float(np.mean(encoding.term_tokens))
    words = sorted(words, key=lambda w: abs(np.mean(w.positions) - centre))[:max_words]
    erased = encoder.encode_erasures(
        encoding.window, encoding.term_tokens, [np.asarray(w.positions) for w in words]
    )
    base = float(encoding.vector @ prototype)
    drops = base - erased @ prototype
    order = np.argsort(-drops, kind="stable")
    return [WordDrop(words[i].word, words[i].start, words[i].end, float(drops[i])) for i in order]


def top_word_agreement(
    first: Sequence[WordWeight | WordDrop], second: Sequence[WordWeight | WordDrop], k: int
) -> float:
    """Share of the top-k words (by offsets) of `first` also among the top k of `second`."""
    top_first = {(w.start, w.end) for w in first[:k]}
    top_second = {(w.start, w.end) for w in second[:k]}
    if not top_first:
        return 0.0
    return len(top_first & top_second) / len(top_first)
