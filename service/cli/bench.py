"""`whichsense bench`: occurrences per second of the encoder's limit, the engine, the
service and the naive loop, measured on one seeded corpus in one run.

Heavy imports (torch, the encoder, the service runner) happen inside the handler so
that the rest of the command line stays quick to start.
"""

from __future__ import annotations

import argparse
import functools
import json
import math
import sys
import tempfile
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from service.config import Settings

DEFAULT_DOCS = 300
DEFAULT_SYNC_REQUESTS = 200
DEFAULT_ADMIN_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"
JSON_KEYS = (
    "occurrences", "documents", "joined", "chars_per_document", "windows", "threads", "quantized",
    "ceiling_per_s", "engine_per_s", "service_sqlite_per_s", "service_pg_1w_per_s",
    "service_pg_2w_per_s", "naive_per_s", "engine_vs_ceiling", "service_sqlite_vs_ceiling",
    "engine_vs_naive", "ceiling_per_cpu_s", "engine_per_cpu_s", "naive_per_cpu_s",
    "service_sqlite_per_cpu_s", "service_pg_1w_per_cpu_s", "service_pg_2w_per_cpu_s",
    "engine_vs_ceiling_cpu", "service_sqlite_vs_ceiling_cpu", "engine_vs_naive_cpu",
    "peak_rss_mb", "sync_p50_ms", "sync_p95_ms",
)  # fmt: skip


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser(
        "bench",
        help="measure throughput: encoder limit, engine, service, naive loop",
        description=__doc__.splitlines()[0] if __doc__ else None,
    )
    parser.add_argument("--docs", type=int, default=DEFAULT_DOCS,
                        help=f"documents in the corpus (default {DEFAULT_DOCS})")
    parser.add_argument("--join", type=_positive, default=1, metavar="K",
                        help="join K demo documents of one kind into each document, for "
                             "help-page-length documents (default 1: as they are)")
    parser.add_argument("--json", action="store_true", help="end with one line of JSON figures")
    parser.add_argument("--corpus", type=Path, default=Path("demo_corpus"),
                        help="directory with inventory.json and documents.jsonl")
    parser.add_argument("--postgres-url", default=DEFAULT_ADMIN_URL,
                        help="PostgreSQL server to make a throwaway database on")
    parser.add_argument("--sync-requests", type=int, default=DEFAULT_SYNC_REQUESTS,
                        help="sequential POST /v1/disambiguate calls for the latency figure")
    parser.add_argument("--no-service", action="store_true",
                        help="in-process runs only (no API or worker processes)")
    parser.set_defaults(func=run)


def _positive(value: str) -> int:
    number = int(value)
    if number < 1:
        raise argparse.ArgumentTypeError(f"{value} is not a positive whole number")
    return number


def percentile(values: Sequence[float], share: float) -> float:
    """Nearest-rank percentile (NIST/Excel 'inclusive' rank rounding); NaN when empty."""
    if not values:
        return math.nan
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, max(0, math.ceil(share * len(ordered)) - 1))]


def _ratio(a: float | None, b: float | None) -> float | None:
    return round(a / b, 3) if a and b else None


def one_sentence_texts(documents: list[dict[str, Any]], count: int = 20) -> list[str]:
    """Short single sentences from the corpus for the latency figure."""
    from service.engine.windows import sentence_spans

    found = []
    for item in documents:
        body = item.get("text") or ""
        for start, end in sentence_spans(body):
            sentence = body[start:end]
            if 20 <= len(sentence) <= 160 and "\n" not in sentence:
                found.append(sentence)
                break
        if len(found) >= count:
            break
    return found or ["Landed a bass off the jetty."]


def run(args: argparse.Namespace, settings: Settings) -> int:
    print("bench: loading the corpus and the model ...", file=sys.stderr, flush=True)
    from tqdm import tqdm

    from service.bench import inprocess, service_runs
    from service.bench.corpus import load_corpus
    from service.tagging.engines import build_disambiguator

    corpus = load_corpus(args.corpus, args.docs, join=args.join)
    # the shipped engine, built by the one factory; prototypes built before any timing
    engine = build_disambiguator(settings, corpus.inventory)
    encoder = engine.encoder
    texts, occurrences = inprocess.engine_windows(engine, corpus.documents)
    figures: dict[str, Any] = dict.fromkeys(JSON_KEYS)
    import torch

    figures.update(occurrences=occurrences, documents=len(corpus.documents), joined=corpus.joined,
                   chars_per_document=round(corpus.chars_per_document), windows=len(texts),
                   threads=torch.get_num_threads(), quantized=settings.quantize_encoder)
    notes: list[str] = []
    print(f"bench: {len(corpus.documents)} documents ({corpus.joined} demo document(s) each, "
          f"{corpus.chars_per_document:.0f} characters on average), {occurrences} occurrences, "
          f"{len(texts)} windows, {torch.get_num_threads()} encoder thread(s)", file=sys.stderr)
    list(engine.tag(corpus.documents[:4]))  # first calls allocate; keep them out of the timing

    def bar(name: str, total: int) -> Any:
        return tqdm(total=total, desc=f"{name:15}", unit="occ", file=sys.stderr, leave=True,
                    dynamic_ncols=True)

    with bar("ceiling+engine", 2 * occurrences) as progress:
        ceiling, tagged = inprocess.ceiling_and_engine(engine, corpus.documents, progress.update)
    figures["ceiling_per_s"] = round(ceiling.per_second, 1)
    figures["engine_per_s"] = round(tagged.per_second, 1)
    with bar("naive", occurrences) as progress:
        naive = inprocess.naive(engine, corpus.documents, progress.update)
    figures["naive_per_s"] = round(naive.per_second, 1)
    figures["ceiling_per_cpu_s"] = round(ceiling.per_cpu_second, 1)
    figures["engine_per_cpu_s"] = round(tagged.per_cpu_second, 1)
    figures["naive_per_cpu_s"] = round(naive.per_cpu_second, 1)
    del engine, encoder

    if not args.no_service:
        warmup = list(corpus.raw[: 2 * settings.chunk_size])
        sentences = one_sentence_texts(list(corpus.raw))
        with tempfile.TemporaryDirectory(prefix="whichsense-bench-") as scratch:
            url = f"sqlite:///{Path(scratch) / 'bench.db'}"
            print("starting API and worker on SQLite ...", file=sys.stderr)
            run_sqlite = service_runs.measure(
                url, corpus.inventory_path, corpus.raw, warmup, 1,
                lambda: bar("service sqlite", occurrences),
                sync_sentences=sentences, sync_count=args.sync_requests,
            )
        figures["service_sqlite_per_s"] = round(run_sqlite.per_second, 1)
        figures["service_sqlite_per_cpu_s"] = round(run_sqlite.per_cpu_second, 1)
        figures["peak_rss_mb"] = round(run_sqlite.peak_rss_mb, 1)
        if run_sqlite.sync_ms:
            figures["sync_p50_ms"] = round(percentile(run_sqlite.sync_ms, 0.50), 1)
            figures["sync_p95_ms"] = round(percentile(run_sqlite.sync_ms, 0.95), 1)
        peaks = [run_sqlite.peak_rss_mb]
        why_not = service_runs.postgres_reachable(args.postgres_url)
        if why_not is not None:
            notes.append(f"PostgreSQL runs skipped: no server at {args.postgres_url} ({why_not})")
        else:
            for workers, key in ((1, "service_pg_1w_per_s"), (2, "service_pg_2w_per_s")):
                print(f"starting API and {workers} worker(s) on PostgreSQL ...", file=sys.stderr)
                name = f"service pg {workers}w"
                with service_runs.postgres_database(args.postgres_url) as url:
                    result = service_runs.measure(url, corpus.inventory_path, corpus.raw,
                                                  warmup, workers,
                                                  functools.partial(bar, name, occurrences))
                figures[key] = round(result.per_second, 1)
                figures[key.replace("_per_s", "_per_cpu_s")] = round(result.per_cpu_second, 1)
                peaks.append(result.peak_rss_mb)
        figures["peak_rss_mb"] = round(max(peaks), 1)
    else:
        notes.append("service runs skipped (--no-service)")

    figures["engine_vs_ceiling"] = _ratio(figures["engine_per_s"], figures["ceiling_per_s"])
    figures["service_sqlite_vs_ceiling"] = _ratio(
        figures["service_sqlite_per_s"], figures["ceiling_per_s"])
    figures["engine_vs_naive"] = _ratio(figures["engine_per_s"], figures["naive_per_s"])
    figures["engine_vs_ceiling_cpu"] = _ratio(
        figures["engine_per_cpu_s"], figures["ceiling_per_cpu_s"])
    figures["service_sqlite_vs_ceiling_cpu"] = _ratio(
        figures["service_sqlite_per_cpu_s"], figures["ceiling_per_cpu_s"])
    figures["engine_vs_naive_cpu"] = _ratio(figures["engine_per_cpu_s"], figures["naive_per_cpu_s"])
    print_table(figures, notes)
    if args.json:
        print(json.dumps(figures, sort_keys=False))
    return 0


ROWS = (
    ("ceiling", "ceiling_per_s", "bare encoder forward + attention over the engine's windows"),
    ("engine", "engine_per_s", "shipped engine end to end, rationale without erasure"),
    ("service sqlite", "service_sqlite_per_s", "HTTP batch -> 1 worker -> results, SQLite"),
    ("service pg 1w", "service_pg_1w_per_s", "same on PostgreSQL, 1 worker process"),
    ("service pg 2w", "service_pg_2w_per_s", "same on PostgreSQL, 2 worker processes"),
    ("naive", "naive_per_s", "one encoder call per occurrence over its whole field"),
)


def print_table(figures: dict[str, Any], notes: list[str]) -> None:
    ceiling = figures["ceiling_per_s"]
    print(f"{'run':16} {'occ/s':>9} {'x ceiling':>10}  what")
    for name, key, what in ROWS:
        value = figures[key]
        shown = f"{value:9.1f}" if value is not None else f"{'skipped':>9}"
        share = f"{value / ceiling:10.2f}" if value and ceiling else f"{'':10}"
        print(f"{name:16} {shown} {share}  {what}")
    print(f"per CPU-second (steadier on a shared host): ceiling {figures['ceiling_per_cpu_s']}, "
          f"engine {figures['engine_per_cpu_s']}, naive {figures['naive_per_cpu_s']}, "
          f"service sqlite {figures['service_sqlite_per_cpu_s']} (API + worker), "
          f"pg 1w {figures['service_pg_1w_per_cpu_s']}, "
          f"pg 2w {figures['service_pg_2w_per_cpu_s']}; "
          f"engine vs ceiling {figures['engine_vs_ceiling_cpu']}, "
          f"service sqlite vs ceiling {figures['service_sqlite_vs_ceiling_cpu']}, "
          f"vs naive {figures['engine_vs_naive_cpu']}")
    print(f"engine vs naive: {figures['engine_vs_naive']} x; "
          f"worker peak RSS: {figures['peak_rss_mb']} MB; "
          f"sync POST /v1/disambiguate p50 {figures['sync_p50_ms']} ms, "
          f"p95 {figures['sync_p95_ms']} ms")
    print(f"{figures['occurrences']} occurrences in {figures['documents']} documents "
          f"({figures['joined']} demo document(s) joined per document, "
          f"{figures['chars_per_document']} characters each on average; "
          f"{figures['windows']} windows), {figures['threads']} encoder thread(s), "
          f"int8 encoder: {figures['quantized']}")
    for note in notes:
        print(note)
