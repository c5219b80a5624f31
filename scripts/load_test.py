"""Bounded load run of the batch pipeline on loopback; prints throughput, latency, errors
and a final reconciliation (every submitted occurrence has exactly one result).

Creates a fresh temporary database (PostgreSQL, or a SQLite file with --backend sqlite),
migrates it, loads the demo inventory
(demo_corpus/inventory.json), starts `whichsense serve --no-worker` and N `whichsense
worker` processes against it, then runs C concurrent clients for D seconds. Each client
loops: submit a small batch of demo documents (alternately JSON and NDJSON), poll its
status until it ends, read its results as NDJSON. Afterwards it waits (bounded) for every
batch to end, checks the database, stops everything and drops the database.

    .venv/bin/python scripts/load_test.py --duration 60 --clients 50 --workers 2
    .venv/bin/python scripts/load_test.py --backend sqlite --duration 60 --clients 30 --workers 1

Not a test: the figures depend on the machine and on what else runs on it.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import random
import signal
import socket
import subprocess
import sys
import tempfile
import time
import uuid
from collections import defaultdict
from pathlib import Path
from typing import Any

import httpx
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

ROOT = Path(__file__).resolve().parent.parent
DEFAULT_ADMIN_URL = os.environ.get(
    "WHICHSENSE_TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"
)


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def percentile(values: list[float], share: float) -> float:
    if not values:
        return float("nan")
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, round(share * (len(ordered) - 1)))]


class Stats:
    def __init__(self) -> None:
        self.latency: dict[str, list[float]] = defaultdict(list)
        self.errors: dict[str, int] = defaultdict(int)
        self.batch_seconds: list[float] = []
        self.batches: dict[str, int] = {}  # batch id -> documents submitted

    async def timed(self, route: str, call: Any) -> httpx.Response | None:
        started = time.perf_counter()
        try:
            response = await call
        except httpx.HTTPError as exc:
            self.errors[f"{route} {type(exc).__name__}"] += 1
            return None
        self.latency[route].append(time.perf_counter() - started)
        if response.status_code >= 400:
            self.errors[f"{route} {response.status_code}"] += 1
        return response


async def client_loop(
    number: int,
    base: str,
    token: str,
    documents: list[dict[str, Any]],
    deadline: float,
    stats: Stats,
    batch_size: int,
) -> None:
    rng = random.Random(number)
    headers = {"Authorization": f"Bearer {token}"}
    async with httpx.AsyncClient(base_url=base, headers=headers, timeout=120) as http:
        round_ = 0
        while time.monotonic() < deadline:
            round_ += 1
            chosen = [
                dict(d, id=f"c{number}-r{round_}-{d['id']}")
                for d in rng.sample(documents, batch_size)
            ]
            options = {"rationale": False}
            started = time.perf_counter()
            if round_ % 2:
                call = http.post(
                    "/v1/batches",
                    json={"inventory": "lantern-lane", "documents": chosen, "options": options},
                )
            else:
                lines = [{"inventory": "lantern-lane", "options": options}, *chosen]
                call = http.post(
                    "/v1/batches",
                    content="".join(json.dumps(line) + "\n" for line in lines).encode(),
                    headers={"Content-Type": "application/x-ndjson"},
                )
            response = await stats.timed("POST /v1/batches", call)
            if response is None or response.status_code != 202:
                await asyncio.sleep(0.5)
                continue
            batch_id = response.json()["id"]
            stats.batches[batch_id] = len(chosen)
            state = "queued"
            while state in ("queued", "running") and time.monotonic() < deadline + 600:
                await asyncio.sleep(0.5)
                status = await stats.timed(
                    "GET /v1/batches/{id}", http.get(f"/v1/batches/{batch_id}")
                )
                if status is not None and status.status_code == 200:
                    state = status.json()["state"]
            if state in ("queued", "running"):
                return
            stats.batch_seconds.append(time.perf_counter() - started)
            await stats.timed(
                "GET /v1/batches/{id}/results",
                http.get(
                    f"/v1/batches/{batch_id}/results",
                    headers={"Accept": "application/x-ndjson"},
                ),
            )


def reconcile(url: str) -> dict[str, Any]:
    engine = create_engine(url)
    with engine.connect() as conn:
        totals = conn.execute(
            text(
                "SELECT count(*), coalesce(sum(occurrence_count), 0), "
                "count(*) FILTER (WHERE state NOT IN ('done', 'failed', 'cancelled')) FROM batches"
            )
        ).one()
        results = conn.execute(text("SELECT count(*) FROM batch_results")).scalar_one()
        duplicates = conn.execute(
            text(
                "SELECT count(*) FROM (SELECT 1 FROM batch_results GROUP BY batch_id, document_id, "
                "field, occurrence_index HAVING count(*) > 1) d"
            )
        ).scalar_one()
        mismatched = conn.execute(
            text(
                "SELECT count(*) FROM batch_documents d LEFT JOIN (SELECT batch_id, document_id, "
                "count(*) AS n FROM batch_results GROUP BY batch_id, document_id) r "
                "ON r.batch_id = d.batch_id AND r.document_id = d.document_id "
                "WHERE d.state = 'done' AND coalesce(r.n, 0) <> d.occurrence_count"
            )
        ).scalar_one()
        documents = dict(
            conn.execute(text("SELECT state, count(*) FROM batch_documents GROUP BY state")).all()
        )
    engine.dispose()
    return {
        "batches": totals[0],
        "batches_unfinished": totals[2],
        "occurrences_submitted": int(totals[1]),
        "results_stored": int(results),
        "duplicate_results": int(duplicates),
        "documents_with_wrong_result_count": int(mismatched),
        "documents_by_state": documents,
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--duration", type=float, default=60.0)
    parser.add_argument("--clients", type=int, default=50)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--batch-size", type=int, default=3, help="documents per batch")
    parser.add_argument("--drain-timeout", type=float, default=600.0)
    parser.add_argument("--admin-url", default=DEFAULT_ADMIN_URL)
    parser.add_argument("--backend", choices=("postgres", "sqlite"), default="postgres")
    args = parser.parse_args()

    name = f"whichsense_load_{uuid.uuid4().hex[:8]}"
    admin = create_engine(args.admin_url, isolation_level="AUTOCOMMIT")
    if args.backend == "sqlite":
        url = f"sqlite:///{Path(tempfile.mkdtemp(prefix='whichsense-load-db-')) / 'load.db'}"
    else:
        with admin.connect() as conn:
            conn.execute(text(f'CREATE DATABASE "{name}"'))
        url = make_url(args.admin_url).set(database=name).render_as_string(hide_password=False)
    env = {k: v for k, v in os.environ.items() if not k.startswith("WHICHSENSE_")}
    env.update(WHICHSENSE_DATABASE_URL=url, HF_HUB_OFFLINE="1", TRANSFORMERS_OFFLINE="1")
    cli = [sys.executable, "-m", "service.cli.main"]
    logs = Path(tempfile.mkdtemp(prefix="whichsense-load-"))
    processes: list[subprocess.Popen[bytes]] = []
    try:
        subprocess.run([*cli, "db", "upgrade"], cwd=ROOT, env=env, check=True, capture_output=True)
        subprocess.run(
            [*cli, "inventory", "import", str(ROOT / "demo_corpus" / "inventory.json")],
            cwd=ROOT, env=env, check=True, capture_output=True,
        )  # fmt: skip
        created = subprocess.run(
            [*cli, "keys", "create", "--scope", "ingest"],
            cwd=ROOT, env=env, check=True, capture_output=True, text=True,
        )  # fmt: skip
        token = next(w for w in created.stdout.split() if w.startswith("ws_"))
        port = free_port()
        processes.append(
            subprocess.Popen(
                [*cli, "serve", "--no-worker", "--port", str(port)],
                cwd=ROOT, env=env, stdout=(logs / "api.log").open("wb"), stderr=subprocess.STDOUT,
            )
        )  # fmt: skip
        for n in range(args.workers):
            processes.append(
                subprocess.Popen(
                    [*cli, "worker", "--name", f"load-{n}", "--poll-seconds", "0.2"],
                    cwd=ROOT, env=env, stdout=(logs / f"worker-{n}.log").open("wb"),
                    stderr=subprocess.STDOUT,
                )
            )  # fmt: skip
        base = f"http://127.0.0.1:{port}"
        ready_by = time.monotonic() + 300
        while True:
            try:
                if httpx.get(f"{base}/healthz", timeout=2).status_code == 200:
                    workers_ready = all(
                        "ready" in (logs / f"worker-{n}.log").read_text(errors="replace")
                        for n in range(args.workers)
                    )
                    if workers_ready:
                        break
            except httpx.HTTPError:
                pass
            if time.monotonic() > ready_by:
                raise RuntimeError(f"processes did not start; logs in {logs}")
            time.sleep(0.5)
        documents = [
            json.loads(line)
            for line in (ROOT / "demo_corpus" / "documents.jsonl").read_text().splitlines()
            if line.strip()
        ]
        stats = Stats()
        print(
            f"load: {args.clients} clients x {args.duration:.0f} s, batches of {args.batch_size} "
            f"demo documents, {args.workers} workers, {args.backend} {url}, logs {logs}"
        )
        started = time.perf_counter()
        deadline = time.monotonic() + args.duration

        async def run_clients() -> None:
            await asyncio.gather(
                *(
                    client_loop(n, base, token, documents, deadline, stats, args.batch_size)
                    for n in range(args.clients)
                )
            )

        asyncio.run(run_clients())
        elapsed = time.perf_counter() - started
        drain_by = time.monotonic() + args.drain_timeout
        while reconcile(url)["batches_unfinished"] and time.monotonic() < drain_by:
            time.sleep(1)
        drained = time.perf_counter() - started
        requests = sum(len(v) for v in stats.latency.values())
        print(
            f"\nwall time with clients: {elapsed:.1f} s (until every batch ended: {drained:.1f} s)"
        )
        print(
            f"requests: {requests}  ({requests / elapsed:.1f}/s)   "
            f"errors: {sum(stats.errors.values())}"
        )
        print(
            f"{'route':34} {'count':>7} {'req/s':>7} {'p50 ms':>8} {'p95 ms':>8} {'max ms':>8}"
        )
        for route, values in sorted(stats.latency.items()):
            print(
                f"{route:34} {len(values):7d} {len(values) / elapsed:7.1f} "
                f"{percentile(values, 0.5) * 1000:8.1f} {percentile(values, 0.95) * 1000:8.1f} "
                f"{max(values) * 1000:8.1f}"
            )
        for error, count in sorted(stats.errors.items()):
            print(f"  error {error}: {count}")
        batches = len(stats.batches)
        print(
            f"batches submitted: {batches} ({sum(stats.batches.values())} documents); "
            f"submit-to-end p50 {percentile(stats.batch_seconds, 0.5):.2f} s, "
            f"p95 {percentile(stats.batch_seconds, 0.95):.2f} s"
        )
        figures = reconcile(url)
        print("reconciliation:", json.dumps(figures))
        exact = (
            figures["batches_unfinished"] == 0
            and figures["duplicate_results"] == 0
            and figures["documents_with_wrong_result_count"] == 0
            and figures["results_stored"] == figures["occurrences_submitted"]
        )
        print("every submitted occurrence has exactly one result: " + ("yes" if exact else "NO"))
        return 0 if exact else 1
    finally:
        for process in processes:
            if process.poll() is None:
                process.send_signal(signal.SIGTERM)
        for process in processes:
            try:
                process.wait(60)
            except subprocess.TimeoutExpired:
                process.kill()
        if args.backend == "postgres":
            with admin.connect() as conn:
                conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


if __name__ == "__main__":
    sys.exit(main())
