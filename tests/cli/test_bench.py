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
SERVICE = ("service_sqlite_per_s", "peak_rss_mb", "sync_p50_ms", "sync_p95_ms",
           "service_sqlite_vs_ceiling")
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


def test_percentile_is_nearest_rank():
    # Nearest-rank definition (NIST Engineering Statistics Handbook, 7.2.5.2 style ranks).
    values = [float(v) for v in range(1, 201)]
    assert percentile(values, 0.95) == 190.0
    assert percentile(values, 0.50) == 100.0


@pytest.mark.slow
def test_in_process_figures(capsys):
    figures = _figures(capsys, "--no-service")
    assert set(JSON_KEYS) <= set(figures)
    corpus = load_corpus(REPO / "demo_corpus", 5)
    from service.engine.occurrences import OccurrenceFinder

    finder = OccurrenceFinder(corpus.inventory)
    assert figures["occurrences"] == sum(len(finder.find(d)) for d in corpus.documents) > 0
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
