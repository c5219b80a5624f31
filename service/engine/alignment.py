"""An alignment head: a small learned map that makes glosses comparable to contexts.

The encoder reads a gloss as a sentence and an occurrence as a few sub-words in
context; the two kinds of vector sit in different regions of one space, so a
gloss is a weak prototype until labeled evidence arrives. The head is two
residual linear maps on the frozen encoder's pooled vectors,

    context(x) = normalise(x + x W_c)      gloss(g) = normalise(g + g W_g),

trained contrastively on SemCor (research/train_alignment_head.py) so that an
occurrence lands nearer its own sense's gloss than the other senses of its term,
in the spirit of the bi-encoder of Blevins & Zettlemoyer (2020) but with the
encoder frozen. `AlignedEncoder` applies it to everything the engine encodes
(occurrences, example sentences, evidence, erasure variants: `context`;
glosses: `gloss`), so prototypes, similarities and rationales all live in the
aligned space. The sentence channel's vectors (window and gloss sentence
vectors, prototypes.py) all pass through `context`: one map on both sides
keeps them comparable with each other.

A head file (.npz) holds the two matrices and a JSON header: format, head id,
version, the encoder it was trained for, the training data's digest and
commit, and a SHA-256 of the weights. Loading checks the checksum and refuses a
head made for another encoder (`AlignmentHeadError`).
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from .errors import EngineError

HEAD_FORMAT = "whichsense.alignment-head/1"
HEADS_DIR = Path(__file__).with_name("heads")


class AlignmentHeadError(EngineError):
    """A head file is unreadable, corrupt, or was made for another encoder."""


def encoder_family(model_id: str) -> str:
    """The part of an encoder's model id a head depends on: model name, weights digest and
    layers (the window settings change contexts, not the space)."""
    return ":".join(model_id.split(":")[:3])


def weights_digest(context_weight: np.ndarray, gloss_weight: np.ndarray) -> str:
    digest = hashlib.sha256()
    for array in (context_weight, gloss_weight):
        digest.update(str(array.dtype).encode())
        digest.update(str(array.shape).encode())
        digest.update(np.ascontiguousarray(array).tobytes())
    return digest.hexdigest()


def _normalise(vectors: np.ndarray) -> np.ndarray:
    norms = np.linalg.norm(vectors, axis=-1, keepdims=True)
    unit: np.ndarray = (vectors / np.maximum(norms, 1e-12)).astype(np.float32)
    return unit


@dataclass(frozen=True)
class AlignmentHead:
    """The two maps and what they were made from (module docstring)."""

    head_id: str
    version: int
    encoder: str  # encoder_family() of the model it was trained for
    context_weight: np.ndarray  # (dim, dim), float16 or float32
    gloss_weight: np.ndarray
    training: dict[str, Any]

    @property
    def dimension(self) -> int:
        return int(self.context_weight.shape[0])

    def context(self, vectors: np.ndarray) -> np.ndarray:
        """Aligned unit vectors of occurrences in context (rows)."""
        x = np.asarray(vectors, np.float32)
        return _normalise(x + x @ self.context_weight.astype(np.float32))

    def gloss(self, vectors: np.ndarray) -> np.ndarray:
        """Aligned unit vectors of glosses (rows)."""
        g = np.asarray(vectors, np.float32)
        return _normalise(g + g @ self.gloss_weight.astype(np.float32))

    def header(self) -> dict[str, Any]:
        return {
            "format": HEAD_FORMAT,
            "head_id": self.head_id,
            "version": self.version,
            "encoder": self.encoder,
            "dimension": self.dimension,
            "training": self.training,
            "sha256": weights_digest(self.context_weight, self.gloss_weight),
        }

    def save(self, path: str | Path) -> None:
        header = json.dumps(self.header(), sort_keys=True)
        with Path(path).open("wb") as handle:
            np.savez_compressed(handle, header=np.array(header), context=self.context_weight,
                                gloss=self.gloss_weight)

    def check_encoder(self, model_id: str) -> None:
        if encoder_family(model_id) != self.encoder:
            raise AlignmentHeadError(
                f"alignment head {self.head_id!r} was trained for encoder {self.encoder!r}, "
                f"not {encoder_family(model_id)!r}; train a head for this encoder or turn "
                "the head off in the inventory's settings"
            )


def load_head(path: str | Path, model_id: str | None = None) -> AlignmentHead:
    """Read and verify a head file; with `model_id`, also check it suits that encoder."""
    try:
        with np.load(Path(path), allow_pickle=False) as data:
            header = json.loads(str(data["header"]))
            context, gloss = np.array(data["context"]), np.array(data["gloss"])
    except (OSError, ValueError, KeyError) as error:
        raise AlignmentHeadError(f"cannot read alignment head {path}: {error}") from error
    if header.get("format") != HEAD_FORMAT:
        raise AlignmentHeadError(f"{path} is not an alignment head ({HEAD_FORMAT})")
    if weights_digest(context, gloss) != header.get("sha256"):
        raise AlignmentHeadError(f"alignment head {path}: checksum mismatch (corrupt file)")
    if context.shape != gloss.shape or context.shape[0] != context.shape[1]:
        raise AlignmentHeadError(f"alignment head {path}: weights are not square and equal")
    head = AlignmentHead(
        head_id=str(header["head_id"]),
        version=int(header["version"]),
        encoder=str(header["encoder"]),
        context_weight=context,
        gloss_weight=gloss,
        training=dict(header.get("training", {})),
    )
    if model_id is not None:
        head.check_encoder(model_id)
    return head


def bundled_head(head_id: str, model_id: str | None = None) -> AlignmentHead:
    """A head shipped with the engine (service/engine/heads/<head_id>.npz)."""
    path = HEADS_DIR / f"{head_id}.npz"
    if not path.is_file():
        raise AlignmentHeadError(f"no bundled alignment head {head_id!r}")
    return load_head(path, model_id)


class AlignedEncoder:
    """An encoder whose every output vector passes through an alignment head.

    Everything else (tokenizer, windows, attention for rationales) is the wrapped
    encoder's; `model_id` names the head too, so prototypes built without it are
    never mixed with aligned vectors.
    """

    def __init__(self, encoder: Any, head: AlignmentHead) -> None:
        head.check_encoder(encoder.model_id)
        if head.dimension != encoder.dimension:
            raise AlignmentHeadError("the head's dimension differs from the encoder's")
        self.encoder = encoder
        self.head = head
        self.dimension: int = encoder.dimension
        self.model_id = f"{encoder.model_id}+{head.head_id}.v{head.version}"

    def __getattr__(self, name: str) -> Any:
        return getattr(self.encoder, name)

    def encode_spans(self, spans: Sequence[tuple[str, int, int]]) -> np.ndarray:
        return self.head.context(self.encoder.encode_spans(spans))

    def encode_glosses(self, glosses: Sequence[tuple[str, str, Sequence[str]]]) -> np.ndarray:
        return self.head.gloss(self.encoder.encode_glosses(glosses))

    def encode_spans_with_windows(
        self, spans: Sequence[tuple[str, int, int]]
    ) -> tuple[np.ndarray, np.ndarray]:
        vectors, sentences = self.encoder.encode_spans_with_windows(spans)
        return self.head.context(vectors), self.head.context(sentences)

    def encode_gloss_sentences(
        self, glosses: Sequence[tuple[str, str, Sequence[str]]]
    ) -> np.ndarray:
        return self.head.context(self.encoder.encode_gloss_sentences(glosses))

    def encode_spans_detailed(self, spans: Sequence[tuple[str, int, int]]) -> list[Any]:
        encodings: list[Any] = self.encoder.encode_spans_detailed(spans)
        if not encodings:
            return encodings
        vectors = self.head.context(np.stack([item.vector for item in encodings]))
        aligned = []
        for item, vector in zip(encodings, vectors, strict=True):
            sentence = item.sentence
            if sentence is not None:
                sentence = self.head.context(sentence[None, :])[0]
            aligned.append(replace(item, vector=vector, sentence=sentence))
        return aligned

    def encode_erasures(self, window: Any, term_tokens: np.ndarray,
                        erased: Sequence[np.ndarray]) -> np.ndarray:
        return self.head.context(self.encoder.encode_erasures(window, term_tokens, erased))
