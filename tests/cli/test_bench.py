"""`whichsense bench` smoke tests: the JSON line carries every figure, each one positive.

No speed is asserted (figures depend on the host); the benchmark itself prints them.
The occurrence count is checked against an independent count: the demo corpus's
occurrences found by the engine's own finder on the same seeded documents.
"""

from __future__ import annotations

import json

import pytest

from service.bench.corpus import load_corpus
from service.cli.bench import JSON_KEYS, percentile
from service.cli.main import main
from tests.conftest import REPO, _postgres_available

IN_PROCESS = (
    "ceiling_per_s", "engine_per_s", "naive_per_s", "engine_vs_ceiling", "engine_vs_naive",
    "ceiling_per_cpu_s", "engine_per_cpu_s", "naive_per_cpu_s",
)  # fmt: skip
SERVICE = (
    "service_sqlite_per_s",
    "peak_rss_mb",
    "sync_p50_ms",
    "sync_p95_ms",
    "service_sqlite_vs_ceiling",
)
POSTGRES = ("service_pg_1w_per_s", "service_pg_2w_per_s")


def _figures(capsys: pytest.CaptureFixture[str], *extra: str) -> dict:
    code = main(["bench", "--docs", "5", "--json", "--corpus", str(REPO / "demo_corpus"), *extra])
    assert code == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0].startswith("run ")  # the table comes first
    return json.loads(lines[-1])


def test_corpus_is_seeded_and_sized():
    first = load_corpus(REPO / "demo_corpus", 600)
    again = load_corpus(REPO / "demo_corpus", 600)
    assert [d["id"] for d in first.raw] == [d["id"] for d in again.raw]
    assert len(first.raw) == 600 and len({d["id"] for d in first.raw}) == 600  # 534 + a 2nd pass
    assert first.raw[0]["id"].endswith("~0") and first.raw[-1]["id"].endswith("~1")


def test_joined_documents_are_parts_of_one_kind():
    lines = (REPO / "demo_corpus" / "documents.jsonl").read_text("utf-8").splitlines()
    demo = {item["id"]: item for item in map(json.loads, filter(str.strip, lines))}
    corpus = load_corpus(REPO / "demo_corpus", 40, join=4)
    again = load_corpus(REPO / "demo_corpus", 40, join=4)
    assert corpus.raw == again.raw and corpus.joined == 4
    assert len(corpus.raw) == len(corpus.documents) == 40
    assert len({d["id"] for d in corpus.raw}) == 40
    used = [part for item in corpus.raw for part in item["metadata"]["parts"]]
    assert len(used) == len(set(used)) == 160  # 160 of the 534 demo documents: one pass
    for item in corpus.raw:
        parts = [demo[part.rsplit("~", 1)[0]] for part in item["metadata"]["parts"]]
        assert len(parts) == 4
        assert {part["metadata"]["kind"] for part in parts} == {item["metadata"]["kind"]}
        assert item.get("fields") == parts[0].get("fields")
        for part in parts:  # every word of every part is kept, titles of later parts included
            assert part["text"] in item["text"]
            if part is not parts[0]:
                assert all(value in item["text"] for value in part.get("fields", {}).values())
        total = len(item["text"]) + sum(map(len, item.get("fields", {}).values()))
        assert total >= sum(len(part["text"]) for part in parts)
    lengths = [len(text) for d in corpus.documents for _, text in d.fields]
    assert corpus.chars_per_document == sum(lengths) / 40


def test_join_of_one_is_the_plain_corpus():
    plain, joined = (
        load_corpus(REPO / "demo_corpus", 30),
        load_corpus(REPO / "demo_corpus", 30, 17, 1),
    )
    assert plain.raw == joined.raw and plain.joined == 1


def test_join_must_be_positive(capsys):
    with pytest.raises(SystemExit):
        main(["bench", "--join", "0"])
    assert "--join" in capsys.readouterr().err


def test_percentile_is_nearest_rank():
    # Nearest-rank definition (NIST Engineering Statistics Handbook, 7.2.5.2 style ranks).
    values = [float(v) for v in range(1, 201)]
    assert percentile(values, 0.95) == 190.0
    assert percentile(values, 0.50) == 100.0


@pytest.mark.slow
@pytest.mark.parametrize("join", [1, 3])
def test_in_process_figures(capsys, join):
    figures = _figures(capsys, "--no-service", "--join", str(join))
    assert set(JSON_KEYS) <= set(figures)
    corpus = load_corpus(REPO / "demo_corpus", 5, join=join)
    from service.engine.occurrences import OccurrenceFinder

    finder = OccurrenceFinder(corpus.inventory)
    assert figures["occurrences"] == sum(len(finder.find(d)) for d in corpus.documents) > 0
    assert figures["documents"] == 5 and figures["joined"] == join
    assert figures["chars_per_document"] == round(corpus.chars_per_document)
    assert all(figures[key] > 0 for key in IN_PROCESS), figures
    assert all(figures[key] is None for key in SERVICE + POSTGRES)


@pytest.mark.slow
def test_service_figures(capsys):
    figures = _figures(capsys, "--sync-requests", "5")
    assert all(figures[key] > 0 for key in IN_PROCESS + SERVICE), figures
    if _postgres_available():
        assert all(figures[key] > 0 for key in POSTGRES), figures
    else:
        assert all(figures[key] is None for key in POSTGRES)
