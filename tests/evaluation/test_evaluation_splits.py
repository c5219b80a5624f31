"""Held-out splits for tuning and calibration: whole documents, stable, independent by salt."""

from __future__ import annotations

from service.evaluation.splits import development_split, is_held_out
from service.wordnet.corpus import CorpusSentence


def _sentences(documents: int, per_document: int) -> list[CorpusSentence]:
    return [CorpusSentence(doc=f"doc{d:03d}", sent=str(s), text="t", instances=())
            for d in range(documents) for s in range(per_document)]


def test_documents_are_never_cut_and_the_share_is_about_right() -> None:
    sentences = _sentences(400, 3)
    train, held = development_split(sentences, share=0.1)
    assert len(train) + len(held) == len(sentences)
    held_docs = {s.doc for s in held}
    assert not held_docs & {s.doc for s in train}
    assert 25 <= len(held_docs) <= 55  # 10% of 400 documents, give or take the hash
    assert development_split(list(reversed(sentences)), share=0.1)[1][::-1] == held


def test_a_salt_draws_an_independent_split() -> None:
    names = [f"doc{d:03d}" for d in range(1000)]
    plain = {n for n in names if is_held_out(n, 0.1)}
    salted = {n for n in names if is_held_out(n, 0.1, "within-training")}
    assert plain != salted
    # Inside the training part of the plain split, the salted split still holds some out.
    assert {n for n in names if n not in plain} & salted


def test_few_documents_are_split_by_sentence() -> None:
    sentences = _sentences(1, 500)
    train, held = development_split(sentences, share=0.2)
    assert train and held
    assert 60 <= len(held) <= 140
