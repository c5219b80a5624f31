"""`whichsense tag`: streaming JSON Lines in and out, bad lines reported by number."""

from __future__ import annotations

import argparse
import io
import json
from collections import Counter
from pathlib import Path

import pytest

from service.cli import tag
from service.config import Settings

INVENTORY = {
    "format": "whichsense.inventory/1",
    "name": "tackle-cli",
    "terms": [
        {
            "term": "bass",
            "senses": [
                {"id": "bass.fish", "gloss": "a fish caught for sport or food",
                 "examples": ["He landed a bass off the dock."], "tags": ["dept:fishing"]},
                {"id": "bass.music", "gloss": "the lowest part in music",
                 "examples": ["She plays bass in a trio."]},
            ],
        },
        {"term": "lantern", "senses": [{"id": "lantern.lamp", "gloss": "a portable lamp"}]},
    ],
}


@pytest.fixture
def workdir(tmp_path: Path, encoder) -> Path:
    """An inventory file; `encoder` loads the session's one model before the first run."""
    (tmp_path / "inventory.json").write_text(json.dumps(INVENTORY), encoding="utf-8")
    return tmp_path


def run_tag(
    workdir: Path, lines: list[bytes], *extra: str, settings: Settings | None = None
) -> tuple[int, Path]:
    docs = workdir / "docs.jsonl"
    docs.write_bytes(b"\n".join(lines) + b"\n")
    out = workdir / "results.jsonl"
    parser = argparse.ArgumentParser()
    commands = parser.add_subparsers()
    tag.add_parser(commands)
    args = parser.parse_args(
        ["tag", str(docs), "--inventory", str(workdir / "inventory.json"), "-o", str(out),
         "--no-progress", *extra]
    )
    chosen = settings or Settings(cache_dir=workdir / "cache")
    return args.func(args, chosen), out


def line(obj) -> bytes:
    return json.dumps(obj, ensure_ascii=False).encode("utf-8")


GOOD = [
    line({"id": "a", "text": "We caught a bass in the lake.", "metadata": {"k": 1}}),
    line({"id": "b", "fields": {"title": "Lantern 😀 sale", "body": "One lantern, one bass."}}),
    line({"id": "7", "text": "No terms here."}),
]


def test_one_result_line_per_occurrence(workdir, capsys):
    code, out = run_tag(workdir, GOOD)
    assert code == 0
    results = [json.loads(row) for row in out.read_text(encoding="utf-8").splitlines()]
    assert [(r["document_id"], r["field"], r["surface"]) for r in results] == [
        ("a", "text", "bass"),
        ("b", "title", "Lantern"),
        ("b", "body", "lantern"),
        ("b", "body", "bass"),
    ]
    assert all(r["rationale"]["attention"]["words"] is not None for r in results)
    assert "3 documents, 4 occurrences" in capsys.readouterr().err


def test_invalid_utf8_fails_by_default_with_its_line_number_and_no_output(workdir, capsys):
    bad = b'{"id": "x", "text": "caf\xe9 bass"}'
    code, out = run_tag(workdir, [GOOD[0], bad, GOOD[1]])
    assert code == 1
    assert not out.exists()
    assert list(workdir.glob("*.partial")) == []
    err = capsys.readouterr().err
    assert "docs.jsonl:2: invalid UTF-8" in err


def test_skip_reports_bad_lines_and_keeps_the_rest(workdir, capsys):
    lines = [GOOD[0], b'{"id": "x", "text": "caf\xe9"}', b"{not json", b'{"text": "no id"}',
             b"", GOOD[1]]
    code, out = run_tag(workdir, lines, "--on-error", "skip")
    assert code == 0
    ids = {json.loads(row)["document_id"] for row in out.read_text().splitlines()}
    assert ids == {"a", "b"}
    err = capsys.readouterr().err
    assert "docs.jsonl:2: invalid UTF-8" in err
    assert "docs.jsonl:3: malformed JSON" in err
    assert "docs.jsonl:4: not a document: 'id'" in err
    assert "3 lines skipped" in err


def test_document_over_the_size_limit_is_reported_by_line(workdir, capsys):
    big = line({"id": "big", "text": "bass " * 50})
    small = Settings(cache_dir=workdir / "cache", max_document_bytes=100)
    code, _ = run_tag(workdir, [GOOD[0], big], settings=small)
    assert code == 1
    assert "docs.jsonl:2: document 'big' has 250 characters" in capsys.readouterr().err


def test_documents_are_read_one_line_at_a_time():
    pulled = []

    class Lines(io.BytesIO):
        def __iter__(self):
            for number in range(1000):
                pulled.append(number)
                yield line({"id": f"d{number}", "text": "a bass"}) + b"\n"

    stream = tag.read_documents(Lines(), "docs", "fail", Counter())
    assert next(stream).doc_id == "d0"
    assert pulled == [0]


def test_duplicate_ids_are_refused_with_both_lines(tmp_path):
    lines = [b'{"id": "a", "text": "bass"}\n', b'{"id": "b", "text": "x"}\n',
             b'{"id": "a", "text": "again"}\n']
    stream = tag.read_documents(iter(lines), "docs", "fail", Counter())
    assert [d.doc_id for d in (next(stream), next(stream))] == ["a", "b"]
    with pytest.raises(tag.InputLineError, match="duplicate id 'a' \\(first on line 1\\)"):
        next(stream)


def test_document_json_rules():
    document = tag.document_from_json({"id": "a", "text": "t", "fields": {"title": "x"}})
    assert document.fields == (("text", "t"), ("title", "x"))
    for bad in ({"id": "a"}, {"id": "", "text": "t"}, {"id": "a", "text": 3},
                {"id": "a", "fields": {"title": 1}}, ["not", "an", "object"],
                {"id": 7, "text": "t"}, {"id": "a", "text": "t", "fields": {"text": "again"}},
                {"id": "a", "txt": "t"}):
        with pytest.raises(ValueError):
            tag.document_from_json(bad)
