"""The sense-annotated corpus reader on a tiny hand-made file."""

from __future__ import annotations

import gzip
import json
from pathlib import Path

import pytest

from service.wordnet.corpus import (
    CorpusFormatError,
    CorpusStats,
    corpus_evidence,
    read_corpus,
    sentence_text,
    split_packed_key,
)

LINES = [
    {
        "doc": "tiny/d1",
        "sent": "1",
        "tokens": ["The", "Fulton_County", "jury", "heard", "change", "ringing", "."],
        "instances": [
            {"id": "d1.t1", "start": 2, "end": 3, "lemma": "jury", "pos": "n",
             "sense_keys": ["jury%1:14:00::"]},
            # a multi-token instance
            {"id": "d1.t2", "start": 4, "end": 6, "lemma": "change_ringing", "pos": "n",
             "sense_keys": ["change_ringing%1:04:00::"]},
            # a key this WordNet does not have
            {"id": "d1.t3", "start": 3, "end": 4, "lemma": "hear", "pos": "v",
             "sense_keys": ["hear%2:39:99::"]},
        ],
    },
    {
        "doc": "tiny/d2",
        "sent": "1",
        "tokens": ["A", "favorable", "dog", "barked", "at", "the", "dog", "."],
        "instances": [
            # two alternatives packed into one key, as SemCor writes some
            {"id": "d2.t1", "start": 1, "end": 2, "lemma": "favorable", "pos": "a",
             "sense_keys": ["favorable%3:00:02::;5:00:00:amicable:00"]},
            # synset ids in both accepted spellings (offsets of the local database)
            {"id": "d2.t2", "start": 2, "end": 3, "lemma": "dog", "pos": "n",
             "sense_keys": ["wn:02084071n"]},
            {"id": "d2.t3", "start": 6, "end": 7, "lemma": "dog", "pos": "n",
             "sense_keys": ["02084071-n", "dog%1:05:00::"]},
        ],
    },
]


def _write(tmp_path: Path, lines: list, gz: bool = True) -> Path:
    path = tmp_path / ("tiny.jsonl.gz" if gz else "tiny.jsonl")
    text = "\n".join(json.dumps(line) for line in lines) + "\n"
    if gz:
        with gzip.open(path, "wt", encoding="utf-8") as handle:
            handle.write(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def test_offsets_resolution_and_counts(tmp_path: Path, wordnet) -> None:  # type: ignore[no-untyped-def]
    stats = CorpusStats()
    sentences = list(read_corpus(_write(tmp_path, LINES), wordnet, stats))
    first, second = sentences
    assert first.text == "The Fulton County jury heard change ringing ."
    spans = {i.instance_id: first.text[i.start : i.end] for i in first.instances}
    assert spans == {"d1.t1": "jury", "d1.t2": "change ringing"}
    assert [i.sense_keys for i in first.instances] == [
        ("jury%1:14:00::",), ("change_ringing%1:04:00::",)
    ]
    by_id = {i.instance_id: i for i in second.instances}
    assert by_id["d2.t1"].sense_keys == ("favorable%3:00:02::", "favorable%5:00:00:amicable:00")
    assert by_id["d2.t2"].sense_keys == ("dog%1:05:00::",)
    assert by_id["d2.t3"].sense_keys == ("dog%1:05:00::",)  # same sense named twice, kept once
    assert second.text[by_id["d2.t3"].start : by_id["d2.t3"].end] == "dog"
    assert by_id["d2.t3"].start == len("A favorable dog barked at the ")
    assert stats.sentences == 2
    assert stats.instances == 6
    assert stats.resolved == 5
    assert stats.skipped_unresolved == 1
    assert stats.unresolved_labels == 1
    assert stats.unresolved_examples == ["hear%2:39:99::"]
    assert stats.recovered_by_splitting == 1


def test_plain_json_lines_read_the_same(tmp_path: Path, wordnet) -> None:  # type: ignore[no-untyped-def]
    gz = list(read_corpus(_write(tmp_path, LINES, gz=True), wordnet))
    plain = list(read_corpus(_write(tmp_path, LINES, gz=False), wordnet))
    assert gz == plain


def test_evidence_carries_term_sense_and_offsets(tmp_path: Path, wordnet) -> None:  # type: ignore[no-untyped-def]
    sentences = read_corpus(_write(tmp_path, LINES), wordnet)
    evidence = list(corpus_evidence(sentences, first_id=10))
    assert [e.evidence_id for e in evidence] == list(range(10, 15))
    ringing = evidence[1]
    assert (ringing.term, ringing.sense_id) == ("change ringing", "change_ringing%1:04:00::")
    assert ringing.text[ringing.start : ringing.end] == "change ringing"
    assert evidence[2].sense_id == "favorable%3:00:02::"  # the first accepted key
    assert {e.source for e in evidence} == {"corpus"}


def test_sentence_text_keeps_offsets_of_underscored_tokens() -> None:
    text, spans = sentence_text(["took_place", "in", "U.N."])
    assert text == "took place in U.N."
    assert spans == [(0, 10), (11, 13), (14, 18)]


def test_split_packed_key() -> None:
    assert split_packed_key("a%3:00:02::;5:00:00:b:00") == ["a%3:00:02::", "a%5:00:00:b:00"]
    assert split_packed_key("a%1:05:00::") == ["a%1:05:00::"]


@pytest.mark.parametrize(
    ("line", "problem"),
    [
        ("not json", "not JSON"),
        (json.dumps({"tokens": ["a"]}), "'instances'"),
        (json.dumps({"tokens": ["a"], "instances": [{"start": 0, "end": 2, "lemma": "a",
                                                      "pos": "n", "sense_keys": []}]}),
         "out of range"),
        (json.dumps({"tokens": ["a"], "instances": [{"start": 0, "end": 1, "lemma": "a",
                                                      "pos": "x", "sense_keys": []}]}),
         "pos"),
    ],
)
def test_format_errors_name_the_line(  # type: ignore[no-untyped-def]
    tmp_path: Path, wordnet, line: str, problem: str
) -> None:
    path = tmp_path / "bad.jsonl"
    path.write_text(json.dumps(LINES[0]) + "\n" + line + "\n", encoding="utf-8")
    with pytest.raises(CorpusFormatError, match=problem) as error:
        list(read_corpus(path, wordnet))
    assert error.value.line_number == 2
