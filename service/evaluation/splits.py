"""Hold out part of a training corpus, by document, for tuning and calibration.

Sentences of one document share topic and vocabulary, so a development set cut
by sentence would flatter any method that memorises a document. The split is
a hash of the document id (stable across runs, file order and machines). A
file with fewer than `MIN_DOCUMENTS` documents is split by sentence instead,
which is the best it allows.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence

from service.wordnet.corpus import CorpusSentence

MIN_DOCUMENTS = 10


def _bucket(name: str, buckets: int) -> int:
    return int(hashlib.sha1(name.encode("utf-8")).hexdigest(), 16) % buckets


def is_held_out(name: str, share: float, salt: str = "") -> bool:
    """Whether `name` falls in the held-out share (resolution 1/1000).

    A different `salt` draws an independent split, for holding out again inside
    a training file that is itself what remained after a split.
    """
    return _bucket(salt + name, 1000) < round(share * 1000)


def development_split(
    sentences: Sequence[CorpusSentence], share: float = 0.1, salt: str = ""
) -> tuple[list[CorpusSentence], list[CorpusSentence]]:
    """(training, held-out) sentences; held-out documents are about `share` of them."""
    documents = {sentence.doc for sentence in sentences}
    by_document = len(documents) >= MIN_DOCUMENTS
    train: list[CorpusSentence] = []
    held: list[CorpusSentence] = []
    for number, sentence in enumerate(sentences):
        name = sentence.doc if by_document else f"{sentence.doc}#{sentence.sent}#{number}"
        (held if is_held_out(name, share, salt) else train).append(sentence)
    return train, held
